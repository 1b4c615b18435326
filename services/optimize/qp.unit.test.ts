import { describe, expect, test } from "vitest";
import { createRandom } from "../kit/random.js";
import { type QpProblem, solveQp } from "./qp.js";

describe("solveQp", () => {
  test("solves the solve.QP example with the published minimizer", () => {
    // given: min −(0 5 0)·b + ½bᵀb subject to Aᵀb ≥ (−8, 2, 0)
    const r = solveQp({
      hessian: [
        [1, 0, 0],
        [0, 1, 0],
        [0, 0, 1],
      ],
      linear: [0, -5, 0],
      inequalities: {
        rows: [
          [-4, -3, 0],
          [2, 1, 0],
          [0, -2, 1],
        ],
        rhs: [-8, 2, 0],
      },
    });
    // then
    // Source: Turlach & Weingessel, R package quadprog, documentation example of solve.QP (from memory)
    expect(r.status).toBe("optimal");
    expect(r.x[0]).toBeCloseTo(0.4761905, 6);
    expect(r.x[1]).toBeCloseTo(1.047619, 6);
    expect(r.x[2]).toBeCloseTo(2.0952381, 6);
    expect(r.objective).toBeCloseTo(-2.380952, 6);
  });

  test("reports a multiplier equal to the change of the optimum per unit of right-hand side", () => {
    // given: min ½(d1² + d2²) − d1 − d2 with d1 + d2 ≤ b, written −d1 − d2 ≥ −b
    const solve = (b: number) =>
      solveQp({
        hessian: [
          [1, 0],
          [0, 1],
        ],
        linear: [-1, -1],
        inequalities: { rows: [[-1, -1]], rhs: [-b] },
        upper: [10, 10],
      });
    // when
    const base = solve(1);
    const raised = solve(1 + 1e-6);
    // then: ∂q*/∂(rhs) = λ with rhs = −b, so dq*/db = −λ
    expect(base.status).toBe("optimal");
    expect(base.inequalityMultipliers[0]).toBeGreaterThan(0);
    expect((raised.objective - base.objective) / 1e-6).toBeCloseTo(-base.inequalityMultipliers[0]!, 4);
  });

  test("says the constraints are inconsistent instead of throwing", () => {
    // given: d ≥ 2 and d ≤ 1
    const r = solveQp({ hessian: [[1]], linear: [0], inequalities: { rows: [[1], [-1]], rhs: [2, -1] } });
    // then
    expect(r.status).toBe("inconsistent");
    expect(r.message).toMatch(/inconsistent/);
  });

  test("says the Hessian is not positive definite", () => {
    const r = solveQp({
      hessian: [
        [1, 0],
        [0, -1],
      ],
      linear: [0, 0],
    });
    expect(r.status).toBe("not-convex");
  });

  test("solves an unconstrained problem (no constraint rows at all)", () => {
    const r = solveQp({ hessian: [[2]], linear: [-4] });
    expect(r.status).toBe("optimal");
    expect(r.x[0]).toBeCloseTo(2, 12);
  });
});

describe("solveQp: the dual method against the quadprog package", () => {
  /** A seeded random strictly convex QP with equalities, inequalities and (some) bounds. */
  function randomQp(rnd: () => number, feasible: boolean): QpProblem {
    const n = 2 + Math.floor(rnd() * 10);
    const a = Array.from({ length: n }, () => Array.from({ length: n }, () => 2 * rnd() - 1));
    const hessian = a.map((ai, i) =>
      a.map((aj, j) => ai.reduce((s, v, k) => s + v * aj[k]!, 0) + (i === j ? 0.1 : 0)),
    );
    const row = () => Array.from({ length: n }, () => 2 * rnd() - 1);
    const mEq = Math.floor(rnd() * Math.min(3, n));
    const mIn = Math.floor(rnd() * 6);
    const inequalities = {
      rows: Array.from({ length: mIn }, row),
      rhs: Array.from({ length: mIn }, () => rnd() - 0.8),
    };
    if (!feasible) {
      // d₀ ≥ 2 and d₀ ≤ 1 hidden among the rest
      const e = new Array<number>(n).fill(0);
      e[0] = 1;
      inequalities.rows.push(
        e,
        e.map((v) => -v),
      );
      inequalities.rhs.push(2, -1);
    }
    return {
      hessian,
      linear: row().map((v) => 5 * v),
      equalities: {
        rows: Array.from({ length: mEq }, row),
        rhs: Array.from({ length: mEq }, () => rnd() - 0.5),
      },
      inequalities,
      lower: Array.from({ length: n }, () => (rnd() < 0.7 ? -rnd() : Number.NEGATIVE_INFINITY)),
      upper: Array.from({ length: n }, () => (rnd() < 0.7 ? rnd() : Number.POSITIVE_INFINITY)),
    };
  }

  /** ‖H·d + g − Aeqᵀλ − Ainᵀμ − μlo + μup‖∞, and the worst sign or complementarity violation. */
  function kkt(p: QpProblem, r: ReturnType<typeof solveQp>) {
    const n = p.linear.length;
    let stationarity = 0;
    for (let i = 0; i < n; i++) {
      let v = p.linear[i]!;
      for (let j = 0; j < n; j++) v += p.hessian[i]![j]! * r.x[j]!;
      p.equalities!.rows.forEach((row, k) => {
        v -= row[i]! * r.equalityMultipliers[k]!;
      });
      p.inequalities!.rows.forEach((row, k) => {
        v -= row[i]! * r.inequalityMultipliers[k]!;
      });
      v += r.upperMultipliers[i]! - r.lowerMultipliers[i]!;
      stationarity = Math.max(stationarity, Math.abs(v));
    }
    let complementarity = 0;
    p.inequalities!.rows.forEach((row, k) => {
      const slack = Array.from(row).reduce((s, a, j) => s + a * r.x[j]!, 0) - p.inequalities!.rhs[k]!;
      const mu = r.inequalityMultipliers[k]!;
      complementarity = Math.max(complementarity, -mu, Math.abs(mu * slack), -slack);
    });
    for (let j = 0; j < n; j++) {
      complementarity = Math.max(
        complementarity,
        -r.lowerMultipliers[j]!,
        -r.upperMultipliers[j]!,
        Math.abs(r.lowerMultipliers[j]! * (r.x[j]! - p.lower![j]!)) || 0,
        Math.abs(r.upperMultipliers[j]! * (p.upper![j]! - r.x[j]!)) || 0,
      );
    }
    return { stationarity, complementarity };
  }

  test("gives quadprog's minimizer and multipliers that satisfy the KKT conditions on 500 random QPs", () => {
    // given: seeded random QPs; the reference for the minimizer is the quadprog package (Turlach &
    // Weingessel's port of Goldfarb & Idnani 1983); the multipliers are judged by the KKT conditions,
    // because quadprog's own equality multipliers can carry the wrong sign (see solveWithQuadprog).
    const rnd = createRandom(11).uniform;
    let worstX = 0;
    let worstStationarity = 0;
    let worstComplementarity = 0;
    for (let t = 0; t < 500; t++) {
      const p = randomQp(rnd, true);
      // when
      const ours = solveQp(p);
      const ref = solveQp(p, { method: "quadprog" });
      // then
      expect(ours.status).toBe(ref.status);
      if (ours.status !== "optimal") continue;
      for (let j = 0; j < ours.x.length; j++) worstX = Math.max(worstX, Math.abs(ours.x[j]! - ref.x[j]!));
      const k = kkt(p, ours);
      worstStationarity = Math.max(worstStationarity, k.stationarity);
      worstComplementarity = Math.max(worstComplementarity, k.complementarity);
    }
    expect(worstX).toBeLessThan(1e-9);
    expect(worstStationarity).toBeLessThan(1e-9);
    expect(worstComplementarity).toBeLessThan(1e-9);
  });

  test("finds the same inconsistent problems as quadprog", () => {
    const rnd = createRandom(12).uniform;
    for (let t = 0; t < 100; t++) {
      const p = randomQp(rnd, false);
      expect(solveQp(p).status).toBe("inconsistent");
      expect(solveQp(p, { method: "quadprog" }).status).toBe("inconsistent");
    }
  });

  test("gives an equality multiplier the sign of the Lagrangian convention when the start violates it from above", () => {
    // given: min ½‖d‖² − (1, 2)·d with d₀ + d₁ = 0; the unconstrained minimum (1, 2) lies above the plane
    const p: QpProblem = {
      hessian: [
        [1, 0],
        [0, 1],
      ],
      linear: [-1, -2],
      equalities: { rows: [[1, 1]], rhs: [0] },
    };
    // when
    const r = solveQp(p);
    // then: d = (−0.5, 0.5), and H·d + g = λ·(1, 1) gives λ = −1.5 (= ∂q*/∂beq)
    expect(r.x[0]).toBeCloseTo(-0.5, 12);
    expect(r.x[1]).toBeCloseTo(0.5, 12);
    expect(r.equalityMultipliers[0]).toBeCloseTo(-1.5, 12);
    const raised = solveQp({ ...p, equalities: { rows: [[1, 1]], rhs: [1e-6] } });
    expect((raised.objective - r.objective) / 1e-6).toBeCloseTo(-1.5, 5);
  });
});
