import { Matrix, solve } from "ml-matrix";
import { describe, expect, test } from "vitest";
import { type BilinearBalance, type BilinearProblem, reconcileBilinear } from "./bilinear.js";
import { ReconcileError } from "./errors.js";

// A mixer (two feeds) followed by a two-way separator, with a solute and an enthalpy balance: a network
// of our own. Variables: flows F1..F5 (kg/s, 0–4), solute mass fractions w1..w5 (5–9), mixer
// temperatures T1, T2, T3 (°C, 10–12; equal heat capacities, so F·T balances).
const balances: BilinearBalance[] = [
  { name: "mixer total", terms: [t(1, 0), t(1, 1), t(-1, 2)] },
  { name: "mixer solute", terms: [t(1, 0, 5), t(1, 1, 6), t(-1, 2, 7)] },
  { name: "mixer enthalpy", terms: [t(1, 0, 10), t(1, 1, 11), t(-1, 2, 12)] },
  { name: "separator total", terms: [t(1, 2), t(-1, 3), t(-1, 4)] },
  { name: "separator solute", terms: [t(1, 2, 7), t(-1, 3, 8), t(-1, 4, 9)] },
];
function t(coef: number, ...vars: number[]) {
  return { coef, vars };
}
const y = [10.12, 4.93, 15.08, 8.95, 6.11, 0.204, 0.497, 0.296, 0.402, 0.147, 350.6, 299.4, 333.9];
const sigma = [0.1, 0.1, 0.1, 0.1, 0.1, 0.005, 0.005, 0.005, 0.005, 0.005, 0.5, 0.5, 0.5];
const names = ["F1", "F2", "F3", "F4", "F5", "w1", "w2", "w3", "w4", "w5", "T1", "T2", "T3"];
const network: BilinearProblem = { balances, y, sigma, names };

function f(x: readonly number[]): number[] {
  return balances.map((b) =>
    b.terms.reduce((s, term) => s + term.coef * term.vars.reduce((p, v) => p * x[v]!, 1), 0),
  );
}
function jac(x: readonly number[]): number[][] {
  const h = 1e-7;
  return balances.map((_, i) =>
    x.map((xj, j) => {
      const up = [...x];
      const dn = [...x];
      up[j] = xj + h * Math.max(1, Math.abs(xj));
      dn[j] = xj - h * Math.max(1, Math.abs(xj));
      return (f(up)[i]! - f(dn)[i]!) / (up[j]! - dn[j]!);
    }),
  );
}

describe("bilinear reconciliation by successive linearization", () => {
  test("converges and satisfies every bilinear balance to 1e-8", () => {
    const result = reconcileBilinear(network);
    const x = result.values.map((v) => v ?? Number.NaN);
    for (const r of f(x)) expect(Math.abs(r)).toBeLessThan(1e-8);
    expect(result.maxBalanceResidual).toBeLessThan(1e-8);
    expect(result.iterations).toBeLessThan(10);
    expect(result.globalTest.passed).toBe(true);
  });

  test("meets the optimality condition V⁻¹(y − x̂) = J(x̂)ᵀλ of nonlinear weighted least squares", () => {
    const result = reconcileBilinear(network);
    const x = result.values.map((v) => v ?? Number.NaN);
    const g = Matrix.columnVector(x.map((xj, j) => (y[j]! - xj) / sigma[j]! ** 2));
    const Jt = new Matrix(jac(x)).transpose();
    const lambda = solve(Jt, g); // least squares: the gradient must lie in the span of Jᵀ
    const gap = Jt.mmul(lambda).sub(g).norm() / g.norm();
    expect(gap).toBeLessThan(1e-6);
  });

  test("agrees with a general nonlinear optimizer", () => {
    const result = reconcileBilinear(network);
    // Source: this test's own inputs solved by SciPy 1.17 optimize.minimize(method="SLSQP", ftol=1e-15) — reproduced.
    const scipy = [
      10.138971598275738, 4.926626218188903, 15.065597816464642, 8.952474476325044, 6.113123340139598,
      0.20239563572690228, 0.49622041973543896, 0.2984797674079005, 0.40194303824156147, 0.14696110177039282,
      350.61855091759884, 299.40901405872415, 333.8724350326703,
    ];
    result.values.forEach((v, j) => {
      expect(Math.abs((v ?? Number.NaN) / scipy[j]! - 1)).toBeLessThan(1e-7);
    });
    // Source: same SciPy run, objective Σ((x − y)/σ)² = 0.43763075 — reproduced. At convergence the
    // linearized global test statistic equals the nonlinear objective.
    expect(result.globalTest.statistic).toBeCloseTo(0.43763075, 7);
    expect(result.globalTest.dof).toBe(5);
  });

  test("estimates unmeasured flow and composition from their starting values", () => {
    // given F5 and w5 unmeasured, started away from the answer
    const result = reconcileBilinear({
      ...network,
      measured: names.map((n) => n !== "F5" && n !== "w5"),
      initial: names.map((n) => (n === "F5" ? 5 : n === "w5" ? 0.1 : null)),
    });
    // then
    // Source: this test's own inputs solved by SciPy 1.17 SLSQP with F5, w5 free — reproduced.
    expect(result.values[4]).toBeCloseTo(6.117365395, 6);
    expect(result.values[9]).toBeCloseTo(0.1469416885, 7);
    expect(result.observability).toEqual({ observable: ["F5", "w5"], unobservable: [] });
    // with the separator's outlets free, F4 and w4 are checked by no balance
    expect(result.redundancy.nonRedundant).toEqual(["F4", "w4"]);
    expect(result.values[3]).toBe(8.95);
    expect(result.maxBalanceResidual).toBeLessThan(1e-8);
  });

  test("finds a flow bias and names temperature biases as indistinguishable", () => {
    // given +1 kg/s (10 σ) on F2 — a case of our own
    const flow = reconcileBilinear({ ...network, y: y.map((v, j) => (j === 1 ? v + 1 : v)) });
    expect(flow.eliminated).toEqual(["F2"]);
    expect(Math.abs(flow.grossErrors[0]!.estimatedSize - 1)).toBeLessThan(
      3 * flow.grossErrors[0]!.estimatedSizeSd,
    );
    expect(flow.globalTest.passed).toBe(true);
    expect(flow.maxBalanceResidual).toBeLessThan(1e-8);
    // given +5 °C (10 σ) on T1: the three temperatures meet in one balance only, so the tests cannot tell them apart
    const temp = reconcileBilinear({ ...network, y: y.map((v, j) => (j === 10 ? v + 5 : v)) });
    expect(temp.eliminated).toEqual(["T1"]);
    expect(temp.grossErrors[0]!.tiedWith).toEqual(["T2", "T3"]);
  });

  test("refuses an unmeasured variable without a starting value", () => {
    expect(() => reconcileBilinear({ ...network, measured: names.map((n) => n !== "F5") })).toThrow(
      ReconcileError,
    );
    expect(() => reconcileBilinear({ ...network, measured: names.map((n) => n !== "F5") })).toThrow(
      expect.objectContaining({ code: "RECONCILE_INPUT_INVALID", message: expect.stringMatching(/F5/) }),
    );
  });

  test("reports non-convergence with RECONCILE_NOT_CONVERGED", () => {
    expect(() => reconcileBilinear(network, { maxIterations: 1 })).toThrow(
      expect.objectContaining({ code: "RECONCILE_NOT_CONVERGED" }),
    );
  });
});
