/**
 * The warm simplex against a reference library. Source: HiGHS (Huangfu & Hall 2018,
 * "Parallelizing the dual revised simplex method", Math. Prog. Comp. 10; the `highs` package on npm),
 * its optima reproduced in each test for the same problem solved from scratch. Every warm answer
 * must have HiGHS's optimal objective for the same costs, solved from scratch, and satisfy the LP
 * optimality conditions (primal feasibility, c − Aᵀy = d, d's sign at each bound, zero for basic
 * variables) on its own. The random LPs are seeded and built around a known feasible point, so every
 * one is feasible; their costs are random, and the answers are computed, never written down.
 */
import { beforeAll, describe, expect, test } from "vitest";
import { createRandom } from "../kit/random.js";
import { createHighsLp, type LpProblem, type LpResult, loadHighs, solveLpHighs } from "./lp.js";
import { type ColumnLp, WarmSimplex } from "./warm-simplex.js";

let highs: Awaited<ReturnType<typeof loadHighs>>;
beforeAll(async () => {
  highs = await loadHighs();
});

/**
 * A feasible LP of n variables and m rows with every kind of bound and row the stage can produce:
 * boxed, lower-only and free variables, ≤, ≥, ranged and equality rows (4–8 nonzeros per row), all
 * built around a point x0 that satisfies them.
 */
function randomLp(seed: number, n: number, m: number, sense: "min" | "max"): LpProblem {
  const r = createRandom(seed).uniform;
  const x0 = Array.from({ length: n }, () => 10 * r() - 2);
  const variables = x0.map((x, j) => {
    const kind = j % 7;
    // every variable has a finite bound on the side its cost pushes towards, so the LP is bounded
    const cost = (2 * r() - 1) * (sense === "min" ? 1 : -1);
    const pushesUp = sense === "min" ? cost < 0 : cost > 0;
    // a free variable costs nothing (any cost would make the LP unbounded)
    if (kind === 0) return { name: `x${j}`, cost: 0, lb: -Infinity, ub: Infinity };
    if (kind === 1 && !pushesUp) return { name: `x${j}`, cost, lb: x - 3 * r(), ub: Infinity };
    return { name: `x${j}`, cost, lb: x - 3 * r(), ub: x + 3 * r() };
  });
  const constraints = Array.from({ length: m }, (_, i) => {
    const k = 4 + Math.floor(5 * r());
    const set = new Set<number>();
    while (set.size < Math.min(k, n)) set.add(Math.floor(r() * n));
    const coeffs: Record<string, number> = {};
    let ax = 0;
    for (const j of set) {
      const a = (0.5 + 2 * r()) * (r() < 0.25 ? -1 : 1);
      coeffs[`x${j}`] = a;
      ax += a * x0[j]!;
    }
    const kind = i % 5;
    if (kind === 0) return { name: `r${i}`, coeffs, lb: ax, ub: ax };
    if (kind === 1) return { name: `r${i}`, coeffs, lb: ax - 4 * r() };
    if (kind === 2) return { name: `r${i}`, coeffs, lb: ax - 4 * r(), ub: ax + 4 * r() };
    return { name: `r${i}`, coeffs, ub: ax + 4 * r() };
  });
  return { sense, variables, constraints };
}

/** `p` with new costs. */
const withCosts = (p: LpProblem, costs: readonly number[]): LpProblem => ({
  ...p,
  variables: p.variables.map((v, j) => ({ ...v, cost: costs[j]! })),
});

/**
 * Largest violation of the LP optimality conditions of `r` for `p` (HiGHS's sign convention, in the
 * problem's own sense): primal bounds and rows, c − Aᵀy − d, and each reduced cost's sign at its bound
 * (for a minimum: d ≥ 0 at a lower bound, ≤ 0 at an upper bound, 0 strictly inside; reversed for a
 * maximum), for the columns and the rows alike.
 */
function kktViolation(p: LpProblem, r: LpResult): number {
  const sign = p.sense === "min" ? 1 : -1;
  const tol = 1e-7;
  let worst = 0;
  const at = (value: number, lb: number, ub: number, d: number) => {
    worst = Math.max(worst, lb - value, value - ub);
    const dd = sign * d;
    const atLower = value <= lb + tol;
    const atUpper = value >= ub - tol;
    if (atLower && atUpper) return; // fixed: any sign
    if (atLower) worst = Math.max(worst, -dd);
    else if (atUpper) worst = Math.max(worst, dd);
    else worst = Math.max(worst, Math.abs(dd));
  };
  const stationarity = p.variables.map((v) => v.cost);
  p.constraints.forEach((c, i) => {
    let activity = 0;
    for (const name in c.coeffs) {
      const j = Number(name.slice(1));
      activity += c.coeffs[name]! * r.columnValues[j]!;
      stationarity[j]! -= c.coeffs[name]! * r.rowDuals[i]!;
    }
    at(activity, c.lb ?? -Infinity, c.ub ?? Infinity, r.rowDuals[i]!);
  });
  p.variables.forEach((v, j) => {
    at(r.columnValues[j]!, v.lb ?? 0, v.ub ?? Infinity, r.columnDuals[j]!);
    worst = Math.max(worst, Math.abs(stationarity[j]! - r.columnDuals[j]!));
  });
  return worst;
}

describe("warm simplex on a kept HiGHS model", () => {
  test.each([
    ["min", 1],
    ["max", 2],
    ["min", 3],
  ] as const)(
    "given a %s LP (seed %i) with every kind of bound and row, when its costs drift for 40 cycles, then each warm answer is HiGHS's optimum and satisfies the optimality conditions",
    (sense, seed) => {
      // given
      const p = randomLp(seed, 120, 70, sense);
      const lp = createHighsLp(highs, p, { records: false });
      const r = createRandom(100 + seed).uniform;
      try {
        expect(lp.solve().status).toBe("optimal");
        let warm = 0;
        let pivots = 0;
        for (let cycle = 0; cycle < 40; cycle++) {
          // when: every cost drifts by up to ±5 %, and every fifth cycle a tenth of them jump by ±50 %
          const costs = p.variables.map((v) => v.cost * (1 + 0.1 * (r() - 0.5)));
          if (cycle % 5 === 4) for (let j = 0; j < costs.length; j += 10) costs[j]! *= 1 + (r() - 0.5);
          lp.setCostVector(costs);
          const got = lp.solve();
          const fresh = solveLpHighs(highs, withCosts(p, costs));
          // then
          expect(got.status).toBe("optimal");
          expect(fresh.status).toBe("optimal");
          expect(Math.abs(got.objective - fresh.objective)).toBeLessThan(
            1e-9 * Math.max(1, Math.abs(fresh.objective)),
          );
          expect(kktViolation(withCosts(p, costs), got)).toBeLessThan(1e-8);
          if (got.warmSimplex) warm++;
          pivots += got.iterations ?? 0;
        }
        // the warm path answered (nearly) every cycle, with pivots to do and refactorizations on the way
        expect(warm).toBeGreaterThanOrEqual(38);
        expect(pivots).toBeGreaterThan(32);
      } finally {
        lp.dispose();
      }
    },
  );

  test.each([
    ["min", 21],
    ["max", 22],
  ] as const)(
    "given a %s LP (seed %i) whose boxes move around the last answer every cycle (move limits) while costs and row limits drift, each answer is HiGHS's optimum and satisfies the optimality conditions",
    (sense, seed) => {
      // given
      const p = randomLp(seed, 120, 70, sense);
      const lp = createHighsLp(highs, p, { records: false });
      const r = createRandom(200 + seed).uniform;
      const lb = p.variables.map((v) => v.lb ?? 0);
      const ub = p.variables.map((v) => v.ub ?? Infinity);
      const rowLb = p.constraints.map((c) => c.lb ?? -Infinity);
      const rowUb = p.constraints.map((c) => c.ub ?? Infinity);
      try {
        let last = lp.solve();
        expect(last.status).toBe("optimal");
        let warm = 0;
        let pivots = 0;
        for (let cycle = 0; cycle < 40; cycle++) {
          // when: every boxed variable may move at most 0.5 from where it is (inside its own bounds),
          // costs drift by up to ±5 %, and the ≤ rows' limits by up to ±0.2
          const costs = p.variables.map((v) => v.cost * (1 + 0.1 * (r() - 0.5)));
          const box = p.variables.map((_, j) => {
            const x = last.columnValues[j]!;
            if (!Number.isFinite(ub[j]!) || !Number.isFinite(lb[j]!)) return [lb[j]!, ub[j]!] as const;
            return [Math.max(lb[j]!, x - 0.5), Math.min(ub[j]!, x + 0.5)] as const;
          });
          const limits = p.constraints.map((_, i) => {
            const shift = Number.isFinite(rowLb[i]!) ? 0 : 0.4 * (r() - 0.5);
            return [rowLb[i]!, rowUb[i]! + shift] as const;
          });
          lp.setCostVector(costs);
          for (const [j, v] of p.variables.entries()) lp.setVariableBounds(v.name, box[j]![0], box[j]![1]);
          for (const [i, c] of p.constraints.entries())
            lp.setConstraintLimits(c.name, limits[i]![0], limits[i]![1]);
          const got = lp.solve();
          const changed: LpProblem = {
            sense,
            variables: p.variables.map((v, j) => ({ ...v, cost: costs[j]!, lb: box[j]![0], ub: box[j]![1] })),
            constraints: p.constraints.map((c, i) => ({ ...c, lb: limits[i]![0], ub: limits[i]![1] })),
          };
          const fresh = solveLpHighs(highs, changed);
          // then
          expect(got.status).toBe(fresh.status);
          if (fresh.status !== "optimal") continue;
          expect(Math.abs(got.objective - fresh.objective)).toBeLessThan(
            1e-9 * Math.max(1, Math.abs(fresh.objective)),
          );
          expect(kktViolation(changed, got)).toBeLessThan(1e-8);
          if (got.warmSimplex) warm++;
          pivots += got.iterations ?? 0;
          last = got;
          rowUb.splice(0, rowUb.length, ...limits.map((l) => l[1]));
        }
        // the warm simplex answered most cycles, with both phases at work
        expect(warm).toBeGreaterThanOrEqual(35);
        expect(pivots).toBeGreaterThan(40);
      } finally {
        lp.dispose();
      }
    },
  );

  test("given a box that leaves no feasible point, the warm simplex declines and HiGHS proves the LP infeasible", () => {
    // given min −x − y over x, y ∈ [0, 10] with 12 ≤ x + y ≤ 15: optimum −15 (by hand)
    const p: LpProblem = {
      sense: "min",
      variables: [
        { name: "x", cost: -1, ub: 10 },
        { name: "y", cost: -1, ub: 10 },
      ],
      constraints: [{ name: "sum", coeffs: { x: 1, y: 1 }, lb: 12, ub: 15 }],
    };
    const lp = createHighsLp(highs, p);
    try {
      expect(lp.solve().objective).toBeCloseTo(-15, 12);
      // when the box shrinks to x, y ≤ 7: the sum may reach 14, and the optimum is −14 (by hand), warm
      lp.setVariableBounds("x", 0, 7);
      lp.setVariableBounds("y", 0, 7);
      const tighter = lp.solve();
      expect(tighter.warmSimplex).toBe(true);
      expect(tighter.message).toMatch(
        /^optimal \(warm simplex from HiGHS's last basis: 0 primal, \d+ dual pivots\)$/,
      );
      expect(tighter.objective).toBeCloseTo(-14, 12);
      // when it shrinks to x, y ≤ 5: the sum cannot reach 12
      lp.setVariableBounds("x", 0, 5);
      lp.setVariableBounds("y", 0, 5);
      const none = lp.solve();
      // then the warm simplex's dual ratio test found no entering variable, and HiGHS proved it
      expect(none.status).toBe("infeasible");
      expect(none.code).toBe("OPTIMIZE_INFEASIBLE");
      expect(none.warmSimplex).toBeUndefined();
    } finally {
      lp.dispose();
    }
  });

  test("given warm answers, when the bound a nonbasic variable sits at is removed, HiGHS answers with every change made meanwhile", () => {
    // given max x + 2y over x ∈ [0, 4], y ∈ [0, 3] with x + y ≤ 5: optimum 8 at (2, 3) (by hand), y at
    // its upper bound and nonbasic; then a warm cost change to max x + 3y (optimum 11 at (2, 3), by hand)
    const p: LpProblem = {
      sense: "max",
      variables: [
        { name: "x", cost: 1, ub: 4 },
        { name: "y", cost: 2, ub: 3 },
      ],
      constraints: [{ name: "cap", coeffs: { x: 1, y: 1 }, ub: 5 }],
    };
    const lp = createHighsLp(highs, p);
    try {
      expect(lp.solve().objective).toBeCloseTo(8, 12);
      lp.setCosts({ y: 3 });
      const warm = lp.solve();
      expect(warm.warmSimplex).toBe(true);
      expect(warm.objective).toBeCloseTo(11, 12);
      // when y's upper bound is removed: y rises to 5 and x falls to 0, 15 (by hand)
      lp.setVariableBounds("y", 0, Number.POSITIVE_INFINITY);
      const got = lp.solve();
      // then HiGHS answered, with the cost change the warm simplex had made
      expect(got.warmSimplex).toBeUndefined();
      expect(got.objective).toBeCloseTo(15, 12);
      expect(got.values).toEqual({ x: 0, y: 5 });
    } finally {
      lp.dispose();
    }
  });

  test("given a cost change that makes the LP unbounded, the warm simplex declines and HiGHS reports unbounded", () => {
    // given min x + y over x, y ≥ 0 with the row x − y ≤ 4: optimum 0 at the origin (by hand)
    const p: LpProblem = {
      sense: "min",
      variables: [
        { name: "x", cost: 1 },
        { name: "y", cost: 1 },
      ],
      constraints: [{ name: "gap", coeffs: { x: 1, y: -1 }, ub: 4 }],
    };
    const lp = createHighsLp(highs, p);
    try {
      expect(lp.solve().objective).toBe(0);
      // when x's cost turns negative: x rises to the row's limit, −4 at (4, 0) (by hand), warm
      lp.setCosts({ x: -1 });
      const bounded = lp.solve();
      expect(bounded.warmSimplex).toBe(true);
      expect(bounded.objective).toBeCloseTo(-4, 12);
      expect(bounded.duals.gap).toBeCloseTo(-1, 12);
      // when y's cost turns negative too: the ray (4, 0) + t·(1, 1) lowers −x − 0.5y without limit
      lp.setCosts({ y: -0.5 });
      const ray = lp.solve();
      // then the warm simplex declined and HiGHS, solving instead, proved it unbounded
      expect(ray.status).toBe("unbounded");
      expect(ray.code).toBe("OPTIMIZE_UNBOUNDED");
      expect(ray.warmSimplex).toBeUndefined();
    } finally {
      lp.dispose();
    }
  });
});

/** `p` in the warm simplex's column form, with HiGHS's optimal basis for `p`'s costs. */
function columnFormWithBasis(p: LpProblem) {
  const n = p.variables.length;
  const m = p.constraints.length;
  const entries: { i: number; j: number; a: number }[] = [];
  p.constraints.forEach((c, i) => {
    for (const name in c.coeffs) entries.push({ i, j: Number(name.slice(1)), a: c.coeffs[name]! });
  });
  entries.sort((e, f) => e.j - f.j || e.i - f.i);
  const colStart = new Int32Array(n + 1);
  for (const e of entries) colStart[e.j + 1]!++;
  for (let j = 0; j < n; j++) colStart[j + 1]! += colStart[j]!;
  const lp: ColumnLp = {
    nCols: n,
    nRows: m,
    colStart,
    rowIndex: Int32Array.from(entries, (e) => e.i),
    value: Float64Array.from(entries, (e) => e.a),
    colLower: Float64Array.from(p.variables, (v) => v.lb ?? 0),
    colUpper: Float64Array.from(p.variables, (v) => v.ub ?? Infinity),
    rowLower: Float64Array.from(p.constraints, (c) => c.lb ?? -Infinity),
    rowUpper: Float64Array.from(p.constraints, (c) => c.ub ?? Infinity),
  };
  const model = createHighsLp(highs, p, { warmSimplex: false });
  const solved = model.solve();
  model.dispose();
  // HiGHS's basis, read back through a raw model (the kept wrapper does not expose it)
  const raw = highs.createModel({
    numCols: n,
    numRows: m,
    sense:
      p.sense === "max" ? highs.constants.objectiveSense.maximize : highs.constants.objectiveSense.minimize,
    colCost: Float64Array.from(p.variables, (v) => v.cost),
    colLower: lp.colLower,
    colUpper: lp.colUpper,
    rowLower: lp.rowLower,
    rowUpper: lp.rowUpper,
    matrix: {
      format: "csc",
      numRows: m,
      numCols: n,
      starts: lp.colStart,
      indices: lp.rowIndex,
      values: lp.value,
    },
  });
  raw.options.set({ output_flag: false });
  raw.run();
  const basis = raw.getBasis();
  raw.dispose();
  return { lp, basis, objective: solved.objective };
}

describe("WarmSimplex", () => {
  test("given a basis with long eta files (refactorization every 64 pivots), when costs alternate for 60 solves, then the updated duals stay equal to duals computed afresh", () => {
    // given: this is the case where a right-hand side entry cancels to exactly zero inside the
    // eta file and comes back later; the pivot-row solve once listed it twice and the duals drifted
    // by up to 1.6 (found by a bench run with long eta files)
    const p = randomLp(11, 300, 150, "min");
    const { lp, basis } = columnFormWithBasis(p);
    const simplex = new WarmSimplex(lp, { refactorEvery: 64 });
    expect(simplex.load(basis.colStatus, basis.rowStatus)).toBeUndefined();
    const r = createRandom(12).uniform;
    const a = Float64Array.from(p.variables, (v) => v.cost * (0.9 + 0.2 * r()));
    const b = Float64Array.from(p.variables, (v) => v.cost);
    let pivots = 0;
    for (let k = 0; k < 60; k++) {
      // when
      const cost = k % 2 === 0 ? a : b;
      const outcome = simplex.solve(cost);
      // then: d = c − Aᵀy for every column, recomputed here from y
      expect(outcome.status).toBe("optimal");
      pivots += outcome.pivots;
      let worst = 0;
      for (let j = 0; j < lp.nCols; j++) {
        let dj = cost[j]!;
        for (let q = lp.colStart[j]!; q < lp.colStart[j + 1]!; q++)
          dj -= lp.value[q]! * simplex.y[lp.rowIndex[q]!]!;
        worst = Math.max(worst, Math.abs(dj - simplex.d[j]!));
      }
      expect(worst).toBeLessThan(1e-9);
    }
    expect(pivots).toBeGreaterThan(64);
  });

  test("given lowered upper bounds only, the dual phase alone re-optimizes: it keeps the basis dual feasible, so no primal pivot follows it", () => {
    // given HiGHS's optimal basis of a seeded LP with nonnegative rows Σ a·x ≤ b and 0 ≤ x ≤ 10 (any
    // x below a feasible one is feasible), its costs held
    const r = createRandom(31).uniform;
    const n = 200;
    const x0 = Array.from({ length: n }, () => 10 * r());
    const p: LpProblem = {
      sense: "min",
      variables: x0.map((_, j) => ({ name: `x${j}`, cost: 2 * r() - 1, ub: 10 })),
      constraints: Array.from({ length: 100 }, (_, i) => {
        const coeffs: Record<string, number> = {};
        let ax = 0;
        for (let k = 0; k < 6; k++) {
          const j = Math.floor(r() * n);
          coeffs[`x${j}`] = 0.5 + 2 * r();
          ax += coeffs[`x${j}`]! * x0[j]!;
        }
        return { name: `r${i}`, coeffs, ub: ax + 5 * r() };
      }),
    };
    const { lp, basis } = columnFormWithBasis(p);
    const simplex = new WarmSimplex(lp);
    expect(simplex.load(basis.colStatus, basis.rowStatus)).toBeUndefined();
    const cost = Float64Array.from(p.variables, (v) => v.cost);
    expect(simplex.solve(cost).status).toBe("optimal");
    const colUpper = Float64Array.from(lp.colUpper);
    let dualPivots = 0;
    for (let cycle = 0; cycle < 30; cycle++) {
      // when a third of the variables at their upper bound get it lowered by 0.1–1 (the LP stays feasible)
      for (let j = 0; j < n; j++)
        if (simplex.x[j]! >= colUpper[j]! - 1e-9 && colUpper[j]! > 1 && r() < 0.33)
          colUpper[j]! -= 0.1 + 0.9 * r();
      const outcome = simplex.solve(cost, {
        colLower: lp.colLower,
        colUpper,
        rowLower: lp.rowLower,
        rowUpper: lp.rowUpper,
      });
      // then only dual pivots, and HiGHS's optimum for the lowered bounds
      expect(outcome.status).toBe("optimal");
      if (outcome.status !== "optimal") break;
      expect(outcome.phases.primal).toBe(0);
      expect(outcome.phases.primalAfterDual).toBe(0);
      dualPivots += outcome.phases.dual;
      const fresh = solveLpHighs(highs, {
        ...p,
        variables: p.variables.map((v, j) => ({ ...v, ub: colUpper[j]! })),
      });
      let objective = 0;
      for (let j = 0; j < n; j++) objective += cost[j]! * simplex.x[j]!;
      expect(Math.abs(objective - fresh.objective)).toBeLessThan(
        1e-9 * Math.max(1, Math.abs(fresh.objective)),
      );
    }
    expect(dualPivots).toBeGreaterThan(30);
  });

  test("declines, with its reason, a basis of the wrong size, and a solve over its pivot limit", () => {
    const p = randomLp(13, 40, 20, "min");
    const { lp, basis } = columnFormWithBasis(p);
    const simplex = new WarmSimplex(lp, { maxPivots: 0 });
    // a basis with one basic variable too few
    const rows = Int32Array.from(basis.rowStatus);
    const k = rows.indexOf(1);
    rows[k] = 0;
    expect(simplex.load(basis.colStatus, rows)).toMatch(/basic variables for 20 rows/);
    expect(simplex.solve(Float64Array.from(p.variables, (v) => v.cost)).status).toBe("declined");
    // HiGHS's own basis loads; a cost change that needs a pivot exceeds maxPivots 0
    expect(simplex.load(basis.colStatus, basis.rowStatus)).toBeUndefined();
    expect(simplex.solve(Float64Array.from(p.variables, (v) => v.cost)).status).toBe("optimal");
    const flipped = Float64Array.from(p.variables, (v) => -v.cost);
    const outcome = simplex.solve(flipped);
    expect(outcome).toMatchObject({ status: "declined", reason: "no optimum after 0 pivots" });
    expect(simplex.ready).toBe(false);
  });
});
