import { beforeAll, describe, expect, test } from "vitest";
import { OptimizeError } from "./errors.js";
import { createHighsLp, type LpProblem, type LpResult, loadHighs, solveLpHighs, solveLpJs } from "./lp.js";

let highs: Awaited<ReturnType<typeof loadHighs>>;
beforeAll(async () => {
  highs = await loadHighs();
});

/**
 * A two-product LP solved by hand: max 4a + 3b s.t. labour a + b ≤ 10, machine 2a + b ≤ 16, a ≤ 7.
 * Vertices: (0,0) 0, (0,10) 30, (6,4) 36, (7,2) 34, (7,0) 28, so the optimum is (6,4) with 36.
 * Both rows bind; c_B = A_Bᵀy gives 4 = y1 + 2y2, 3 = y1 + y2, so y = (2, 1).
 */
const handSolved: LpProblem = {
  sense: "max",
  variables: [
    { name: "a", cost: 4, ub: 7 },
    { name: "b", cost: 3 },
  ],
  constraints: [
    { name: "labour", coeffs: { a: 1, b: 1 }, ub: 10 },
    { name: "machine", coeffs: { a: 2, b: 1 }, ub: 16 },
  ],
};

/** Small blending LP (invented): minimize cost of a 100 kg blend meeting two quality limits. */
const blend: LpProblem = {
  sense: "min",
  variables: [
    { name: "crudeA", cost: 0.42, ub: 60 },
    { name: "crudeB", cost: 0.35 },
    { name: "crudeC", cost: 0.51, lb: 5 },
  ],
  constraints: [
    { name: "mass", coeffs: { crudeA: 1, crudeB: 1, crudeC: 1 }, lb: 100, ub: 100 },
    { name: "sulfur", coeffs: { crudeA: 0.8, crudeB: 2.5, crudeC: 0.3 }, ub: 120 },
    { name: "density", coeffs: { crudeA: 850, crudeB: 880, crudeC: 820 }, lb: 84_000, ub: 86_500 },
  ],
};

/** A free variable, a ≥ row and an equality (invented). */
const mixed: LpProblem = {
  sense: "max",
  variables: [
    { name: "x", cost: 1, lb: -5, ub: 5 },
    { name: "y", cost: 2, lb: Number.NEGATIVE_INFINITY, ub: 4 },
    { name: "z", cost: -1, lb: 0, ub: 10 },
  ],
  constraints: [
    { name: "link", coeffs: { x: 1, y: -1, z: 1 }, lb: 1 },
    { name: "cap", coeffs: { x: 1, y: 1, z: 2 }, ub: 12 },
    { name: "balance", coeffs: { x: 2, z: -1 }, lb: 3, ub: 3 },
  ],
};

/** MILP (invented): two integer units and a continuous top-up. */
const milp: LpProblem = {
  sense: "max",
  variables: [
    { name: "units", cost: 4, ub: 7, integer: true },
    { name: "batches", cost: 3, ub: 20, integer: true },
    { name: "topUp", cost: 2.5, lb: -1, ub: 3 },
  ],
  constraints: [
    { name: "labour", coeffs: { units: 1, batches: 1, topUp: 1 }, ub: 10.5 },
    { name: "machine", coeffs: { units: 2, batches: 1, topUp: 3 }, ub: 16.3 },
    { name: "mix", coeffs: { batches: 1, topUp: -1 }, lb: 1 },
  ],
};

const bindingDuals = (r: ReturnType<typeof solveLpJs>) =>
  Object.fromEntries(Object.entries(r.duals).filter(([, y]) => Math.abs(y) > 1e-9));

describe("LP and MILP", () => {
  test("both solvers find the hand-derived optimum and shadow prices of a two-product LP", () => {
    // when
    const h = solveLpHighs(highs, handSolved);
    const j = solveLpJs(handSolved);
    // then
    // Source: derived by hand in the comment above handSolved (vertex enumeration), common practice, no source
    for (const r of [h, j]) {
      expect(r.status).toBe("optimal");
      expect(r.objective).toBeCloseTo(36, 9);
      expect(r.values.a).toBeCloseTo(6, 7);
      expect(r.values.b).toBeCloseTo(4, 7);
      expect(r.duals.labour).toBeCloseTo(2, 7);
      expect(r.duals.machine).toBeCloseTo(1, 7);
    }
  });

  for (const [name, p] of [
    ["blending (min, equality, ranged row, lower bound)", blend],
    ["mixed (max, free variable, equality)", mixed],
    ["MILP with integer variables", milp],
  ] as const) {
    test(`javascript-lp-solver agrees with HiGHS on ${name}`, () => {
      // when
      const h = solveLpHighs(highs, p);
      const j = solveLpJs(p);
      // then
      // Source: CHECK-VALUES.md §5 — cross-check against HiGHS (npm highs), reproduced (HiGHS 1.15)
      expect(h.status).toBe("optimal");
      expect(j.status).toBe("optimal");
      expect(Math.abs(j.objective - h.objective)).toBeLessThanOrEqual(
        1e-7 * Math.max(1, Math.abs(h.objective)),
      );
      const hb = bindingDuals(h);
      expect(Object.keys(hb).length).toBeGreaterThan(0);
      for (const [row, y] of Object.entries(hb)) expect(j.duals[row]).toBeCloseTo(y, 6);
    });
  }

  test("HiGHS duals equal the change of the optimum per unit of the binding limit", () => {
    // given
    const base = solveLpHighs(highs, blend);
    const bump = (row: string, delta: number): LpProblem => ({
      ...blend,
      constraints: blend.constraints.map((c) =>
        c.name !== row
          ? c
          : { ...c, ub: (c.ub ?? 0) + delta, lb: c.lb === c.ub ? (c.lb ?? 0) + delta : c.lb },
      ),
    });
    // then: for each binding row, (obj(b + δ) − obj(b)) / δ = dual
    for (const [row, y] of Object.entries(bindingDuals(base))) {
      const moved = solveLpHighs(highs, bump(row, 1e-3));
      expect((moved.objective - base.objective) / 1e-3).toBeCloseTo(y, 6);
    }
  });

  test.each([
    ["HiGHS", false],
    ["the warm simplex", true],
  ])("a kept model re-solved after a cost change by %s equals a fresh solve", (_, warmSimplex) => {
    // given
    const lp = createHighsLp(highs, blend, { warmSimplex });
    try {
      lp.solve();
      // when
      lp.setCosts({ crudeB: 0.47 });
      const warm = lp.solve();
      // then the same optimum as HiGHS from scratch (reference: HiGHS, Huangfu & Hall 2018), by whichever path
      const fresh = solveLpHighs(highs, {
        ...blend,
        variables: blend.variables.map((v) => (v.name === "crudeB" ? { ...v, cost: 0.47 } : v)),
      });
      expect(warm.warmSimplex === true).toBe(warmSimplex);
      expect(warm.objective).toBeCloseTo(fresh.objective, 9);
      for (const v of blend.variables) expect(warm.values[v.name]).toBeCloseTo(fresh.values[v.name]!, 9);
      for (const c of blend.constraints) expect(warm.duals[c.name]).toBeCloseTo(fresh.duals[c.name]!, 9);
    } finally {
      lp.dispose();
    }
  });

  test.each([
    ["HiGHS", false],
    ["the warm simplex", true],
  ])("a kept model re-solved by %s after bound and limit changes equals a fresh solve", (_, warmSimplex) => {
    // given the blend kept in HiGHS, then every bound re-stated unchanged and two really changed
    const lp = createHighsLp(highs, blend, { warmSimplex });
    try {
      const cold = lp.solve();
      for (const v of blend.variables)
        lp.setVariableBounds(v.name, v.lb ?? 0, v.ub ?? Number.POSITIVE_INFINITY);
      const same = lp.solve();
      lp.setVariableBounds("crudeA", 0, 40);
      lp.setConstraintLimits("sulfur", Number.NEGATIVE_INFINITY, 110);
      // when
      const warm = lp.solve();
      // then
      const changed: LpProblem = {
        ...blend,
        variables: blend.variables.map((v) => (v.name === "crudeA" ? { ...v, ub: 40 } : v)),
        constraints: blend.constraints.map((c) => (c.name === "sulfur" ? { ...c, ub: 110 } : c)),
      };
      const fresh = solveLpHighs(highs, changed);
      expect(same.objective).toBe(cold.objective);
      expect(same.iterations).toBe(0);
      expect(warm.warmSimplex === true).toBe(warmSimplex);
      expect(warm.objective).toBeCloseTo(fresh.objective, 9);
      for (const [name, x] of Object.entries(fresh.values)) expect(warm.values[name]).toBeCloseTo(x, 9);
      for (const [name, y] of Object.entries(fresh.duals)) expect(warm.duals[name]).toBeCloseTo(y, 9);
    } finally {
      lp.dispose();
    }
  });

  test("a warm re-solve after a small cost change needs fewer simplex iterations than the cold solve", () => {
    // given a 40-variable LP (invented: a knapsack-like cover with a cost per unit of each variable)
    const n = 40;
    const variables = Array.from({ length: n }, (_, j) => ({
      name: `x${j}`,
      cost: 1 + ((j * 7) % 11) / 10,
      ub: 5,
    }));
    const constraints = Array.from({ length: 20 }, (_, i) => ({
      name: `c${i}`,
      coeffs: Object.fromEntries([0, 1, 2, 3].map((k) => [`x${(i * 3 + k * 7) % n}`, 1 + k])),
      lb: 4 + (i % 5),
    }));
    const p: LpProblem = { sense: "min", variables, constraints };
    const lp = createHighsLp(highs, p);
    try {
      const cold = lp.solve();
      // when one cost moves by 3 %
      lp.setCosts({ x5: (variables[5]?.cost ?? 0) * 1.03 });
      const warm = lp.solve();
      // then the kept basis is reused (HiGHS's own count) and the optimum equals a fresh solve's
      const fresh = solveLpHighs(highs, {
        ...p,
        variables: variables.map((v) => (v.name === "x5" ? { ...v, cost: v.cost * 1.03 } : v)),
      });
      expect(cold.iterations).toBeGreaterThan(0);
      expect(warm.iterations).toBeLessThan(cold.iterations ?? 0);
      expect(warm.objective).toBeCloseTo(fresh.objective, 9);
    } finally {
      lp.dispose();
    }
  });

  test("both solvers report an infeasible problem as infeasible", () => {
    const p: LpProblem = {
      sense: "min",
      variables: [{ name: "x", cost: 1, ub: 1 }],
      constraints: [{ name: "demand", coeffs: { x: 1 }, lb: 2 }],
    };
    expect(solveLpHighs(highs, p).status).toBe("infeasible");
    expect(solveLpJs(p).status).toBe("infeasible");
  });

  test("refuses a constraint on an undeclared variable without throwing", () => {
    const p: LpProblem = {
      sense: "min",
      variables: [{ name: "x", cost: 1 }],
      constraints: [{ name: "c", coeffs: { y: 1 }, ub: 1 }],
    };
    const r = solveLpJs(p);
    expect(r.status).toBe("error");
    expect(r.code).toBe("OPTIMIZE_INVALID_PROBLEM");
    expect(solveLpHighs(highs, p).message).toContain('"y"');
  });
});

/** The result's typed arrays turned into records by the problem's names (what the by-name API promises). */
const recordsOfArrays = (p: LpProblem, r: LpResult) => ({
  values: Object.fromEntries(p.variables.map((v, j) => [v.name, r.columnValues[j]])),
  duals: Object.fromEntries(p.constraints.map((c, i) => [c.name, r.rowDuals[i]])),
  reducedCosts: Object.fromEntries(p.variables.map((v, j) => [v.name, r.columnDuals[j]])),
});

/**
 * A HiGHS handle whose models record every `changeColsCost` call (a copy of the mask, taken at the call:
 * the model clears its mask afterwards). The models are real HiGHS models; only that method is observed.
 */
function observedHighs(calls: number[][]): typeof highs {
  return Object.create(highs, {
    createModel: {
      value: (data: Parameters<typeof highs.createModel>[0]) => {
        const model = highs.createModel(data);
        return new Proxy(model, {
          get(target, key) {
            if (key === "changeColsCost")
              return (selection: { kind: string; mask?: ArrayLike<number> }, costs: Float64Array) => {
                calls.push(Array.from(selection.mask ?? []));
                return target.changeColsCost(selection as never, costs);
              };
            const v = Reflect.get(target, key);
            return typeof v === "function" ? v.bind(target) : v;
          },
        });
      },
    },
  }) as typeof highs;
}

describe("indexed HiGHS API", () => {
  test("typed arrays by index equal the records by name, for HiGHS and javascript-lp-solver", () => {
    for (const p of [handSolved, blend, mixed, milp]) {
      for (const r of [solveLpHighs(highs, p), solveLpJs(p)]) {
        // then
        expect(r.status).toBe("optimal");
        expect(r.columnValues).toHaveLength(p.variables.length);
        expect(r.rowDuals).toHaveLength(p.constraints.length);
        expect(r.columnDuals).toHaveLength(p.variables.length);
        const fromArrays = recordsOfArrays(p, r);
        expect(r.values).toEqual(fromArrays.values);
        expect(r.duals).toEqual(fromArrays.duals);
        expect(r.reducedCosts).toEqual(fromArrays.reducedCosts);
      }
    }
  });

  test("a HiGHS result builds each by-name record on its first read, then keeps it as a plain value", () => {
    // given a kept model's result, nothing read yet
    const lp = createHighsLp(highs, blend);
    try {
      const r = lp.solve();
      const pending = (key: string) => typeof Object.getOwnPropertyDescriptor(r, key)?.get === "function";
      expect([pending("values"), pending("duals"), pending("reducedCosts")]).toEqual([true, true, true]);
      // when one record is read
      const values = r.values;
      // then that one is built (and the same object on the next read); the others still wait
      expect(values).toEqual(recordsOfArrays(blend, r).values);
      expect(r.values).toBe(values);
      expect([pending("values"), pending("duals"), pending("reducedCosts")]).toEqual([false, true, true]);
      // and a copy of the whole result carries every record
      expect({ ...r }.duals).toEqual(recordsOfArrays(blend, r).duals);
    } finally {
      lp.dispose();
    }
  });

  test("a MILP's indexed duals are those of the LP with the integers fixed", () => {
    // given
    const r = solveLpHighs(highs, milp);
    const x = r.columnValues;
    const fixed: LpProblem = {
      ...milp,
      variables: milp.variables.map((v, j) => (v.integer ? { ...v, integer: false, lb: x[j], ub: x[j] } : v)),
    };
    // when
    const f = solveLpHighs(highs, fixed);
    // then
    expect(r.rowDuals).toEqual(f.rowDuals);
    expect(r.columnDuals).toEqual(f.columnDuals);
    expect(r.duals).toEqual(f.duals);
  });

  test("a result that is not optimal has empty arrays and empty records", () => {
    const p: LpProblem = {
      sense: "min",
      variables: [{ name: "x", cost: 1, ub: 1 }],
      constraints: [{ name: "demand", coeffs: { x: 1 }, lb: 2 }],
    };
    for (const r of [solveLpHighs(highs, p), solveLpJs(p)]) {
      expect(r.status).toBe("infeasible");
      expect([r.columnValues.length, r.rowDuals.length, r.columnDuals.length]).toEqual([0, 0, 0]);
      expect([r.values, r.duals, r.reducedCosts]).toEqual([{}, {}, {}]);
    }
  });

  for (const [name, p, costs] of [
    ["blending", blend, [0.45, 0.31, 0.51]],
    ["mixed", mixed, [1.5, 2, -0.25]],
  ] as const) {
    test(`a warm re-solve after setCostVector equals a cold HiGHS solve (${name})`, () => {
      // given a kept model solved at the original costs
      const lp = createHighsLp(highs, p);
      try {
        lp.solve();
        // when
        lp.setCostVector(costs);
        const warm = lp.solve();
        // then: the reference is a fresh HiGHS model of the changed problem
        const cold = solveLpHighs(highs, {
          ...p,
          variables: p.variables.map((v, j) => ({ ...v, cost: costs[j]! })),
        });
        expect(warm.status).toBe("optimal");
        expect(warm.objective).toBeCloseTo(cold.objective, 9);
        for (let j = 0; j < p.variables.length; j++) {
          expect(warm.columnValues[j]).toBeCloseTo(cold.columnValues[j]!, 9);
          expect(warm.columnDuals[j]).toBeCloseTo(cold.columnDuals[j]!, 9);
        }
        for (let i = 0; i < p.constraints.length; i++)
          expect(warm.rowDuals[i]).toBeCloseTo(cold.rowDuals[i]!, 9);
      } finally {
        lp.dispose();
      }
    });
  }

  test("setCostVector gives the same model state and result as setCosts by name", () => {
    // given two kept models of the same LP
    const byIndex = createHighsLp(highs, blend);
    const byName = createHighsLp(highs, blend);
    try {
      byIndex.solve();
      byName.solve();
      // when
      byIndex.setCostVector(Float64Array.of(0.4, 0.5, 0.3));
      byName.setCosts({ crudeA: 0.4, crudeB: 0.5, crudeC: 0.3 });
      const a = byIndex.solve();
      const b = byName.solve();
      // then
      expect(a).toEqual(b);
    } finally {
      byIndex.dispose();
      byName.dispose();
    }
  });

  test("setCostVector sends only the changed entries, and nothing when no entry changed", () => {
    // given a kept model whose cost changes are observed
    const calls: number[][] = [];
    // (HiGHS's own path: the warm simplex would leave the cost changes pending, not sent)
    const lp = createHighsLp(observedHighs(calls), mixed, { warmSimplex: false });
    try {
      const cold = lp.solve();
      // when the same costs are re-stated
      lp.setCostVector(mixed.variables.map((v) => v.cost));
      const same = lp.solve();
      // then nothing is sent and HiGHS does no pivot
      expect(calls).toEqual([]);
      expect(same.iterations).toBe(0);
      expect(same.objective).toBe(cold.objective);
      // when two of three entries change
      lp.setCostVector([1, 2.5, -2]);
      lp.solve();
      // then one batch with exactly those entries marked
      expect(calls).toEqual([[0, 1, 1]]);
    } finally {
      lp.dispose();
    }
  });

  test("setCostVector refuses a vector of the wrong length with a typed error", () => {
    const lp = createHighsLp(highs, blend);
    try {
      let caught: unknown;
      try {
        lp.setCostVector([1, 2]);
      } catch (err) {
        caught = err;
      }
      expect(caught).toBeInstanceOf(OptimizeError);
      expect((caught as OptimizeError).code).toBe("OPTIMIZE_INVALID_PROBLEM");
    } finally {
      lp.dispose();
    }
  });

  test("a model made with records: false answers by index only, with the same numbers", () => {
    // given the same LP kept twice, with and without records
    const full = createHighsLp(highs, blend);
    const bare = createHighsLp(highs, blend, { records: false });
    try {
      // when
      const a = full.solve();
      const b = bare.solve();
      // then: empty records, identical arrays, and the arrays match the records of the full result
      expect(b.status).toBe("optimal");
      expect(b.values).toEqual({});
      expect(b.duals).toEqual({});
      expect(b.reducedCosts).toEqual({});
      expect([...b.columnValues]).toEqual([...a.columnValues]);
      expect([...b.rowDuals]).toEqual([...a.rowDuals]);
      expect(recordsOfArrays(blend, b)).toEqual({
        values: a.values,
        duals: a.duals,
        reducedCosts: a.reducedCosts,
      });
    } finally {
      full.dispose();
      bare.dispose();
    }
  });
});
