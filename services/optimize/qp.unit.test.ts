import { describe, expect, test } from "vitest";
import { solveQp } from "./qp.js";

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
