import { describe, expect, test } from "vitest";
import { ReconcileError } from "./errors.js";
import { type LinearProblem, reconcileLinear } from "./reconcile.js";

// Heat exchanger with bypass: inputs published in Narasimhan & Jordache (2000), Data Reconciliation and
// Gross Error Detection, ch. 3 (see CHECK-VALUES §4); unit variances.
const A = [
  [1, -1, -1, 0, 0, 0],
  [0, 1, 0, -1, 0, 0],
  [0, 0, 1, 0, -1, 0],
  [0, 0, 0, 1, 1, -1],
];
const y = [101.91, 64.45, 34.65, 64.2, 36.44, 98.88];
const sigma = [1, 1, 1, 1, 1, 1];
const names = ["s1", "s2", "s3", "s4", "s5", "s6"];
const balanceNames = ["splitter", "exchanger", "bypass", "mixer"];
const exchanger: LinearProblem = { A, y, sigma, names, balanceNames };

function balanceResiduals(values: readonly (number | null)[]): number[] {
  return A.map((row) => row.reduce((s, a, j) => s + a * (values[j] ?? Number.NaN), 0));
}

describe("linear reconciliation of the heat exchanger with bypass", () => {
  test("reproduces the reconciled flows and the global test, and finds no gross error", () => {
    // given the published measurements
    // when
    const result = reconcileLinear(exchanger);
    // then
    // Source: Narasimhan & Jordache (2000), ch. 3, heat exchanger with bypass — reproduced (SciPy 1.17, CHECK-VALUES §4).
    const expected = [100.22, 64.5, 35.72, 64.5, 35.72, 100.22];
    result.values.forEach((v, j) => {
      expect(Math.abs((v ?? Number.NaN) - expected[j]!)).toBeLessThan(0.01);
    });
    // Source: same example, γ = 6.4075 on 4 dof, χ²₀.₉₅(4) = 9.4877 — reproduced (SciPy 1.17, CHECK-VALUES §4).
    expect(Math.abs(result.globalTest.statistic - 6.4075)).toBeLessThan(1e-3);
    expect(result.globalTest.dof).toBe(4);
    expect(Math.abs(result.globalTest.critical - 9.4877)).toBeLessThan(1e-3);
    expect(result.globalTest.passed).toBe(true);
    // Source: same example, largest |z| = 2.070, Šidák critical 2.631 for 6 tests — reproduced (SciPy 1.17, CHECK-VALUES §4).
    const largest = Math.max(...result.measurementTests.map((t) => t.statistic));
    expect(Math.abs(largest - 2.07)).toBeLessThan(1e-3);
    expect(result.measurementTests).toHaveLength(6);
    for (const t of result.measurementTests) {
      expect(Math.abs(t.critical - 2.631)).toBeLessThan(1e-3);
      expect(t.passed).toBe(true);
    }
    expect(result.grossErrors).toEqual([]);
    expect(result.eliminated).toEqual([]);
  });

  test("gives standard deviations of the estimates from V − V·Aᵀ(AVAᵀ)⁻¹·A·V", () => {
    const result = reconcileLinear(exchanger, { covariance: true });
    // Source: Narasimhan & Jordache (2000), ch. 3 covariance formula on the published inputs — reproduced
    // (NumPy 2 / SciPy 1.17): every estimate has variance 1/3.
    for (const sd of result.sds) expect(sd).toBeCloseTo(Math.sqrt(1 / 3), 12);
    const cov = result.covariance!;
    expect(cov.indices).toEqual([0, 1, 2, 3, 4, 5]);
    // Estimates satisfy the balances exactly, so their covariance lies in A's null space: A·Cov = 0.
    for (const row of A) {
      for (let c = 0; c < 6; c++) {
        expect(Math.abs(row.reduce((s, a, j) => s + a * cov.matrix[j]![c]!, 0))).toBeLessThan(1e-12);
      }
    }
  });

  test("reconciled values satisfy the balances and nodal tests name each balance", () => {
    const result = reconcileLinear(exchanger);
    for (const r of balanceResiduals(result.values)) expect(Math.abs(r)).toBeLessThan(1e-10);
    expect(result.nodalTests.map((t) => t.name)).toEqual(balanceNames);
    // Source: nodal test |r_i|/sqrt(H_ii) on the published inputs — reproduced (NumPy 2): splitter 1.6224.
    expect(result.nodalTests[0]!.statistic).toBeCloseTo(1.6224, 4);
    expect(result.nodalTests.every((t) => t.passed)).toBe(true);
  });

  test("honours a non-zero right-hand side", () => {
    // given a balance x0 − x1 = 5 with both measured equally well
    const result = reconcileLinear({ A: [[1, -1]], b: [5], y: [11, 5], sigma: [1, 1] });
    // then the 1-unit discrepancy is split evenly (closed form, common practice)
    expect(result.values[0]).toBeCloseTo(10.5, 12);
    expect(result.values[1]).toBeCloseTo(5.5, 12);
  });
});

describe("unmeasured variables (projection)", () => {
  const measured = [true, false, true, true, false, true];

  test("estimates the unmeasured flows and reconciles the rest", () => {
    // given s2 and s5 unmeasured
    const result = reconcileLinear({ ...exchanger, measured });
    // then
    // Source: Crater–Mah projection on the published inputs (Narasimhan & Jordache 2000, ch. 3) —
    // reproduced (SciPy 1.17 null_space + lstsq): x̂ = 100.086, 64.818, 35.268, 64.818, 35.268, 100.086, γ = 5.54526.
    const expected = [100.086, 64.818, 35.268, 64.818, 35.268, 100.086];
    result.values.forEach((v, j) => {
      expect(v).toBeCloseTo(expected[j]!, 9);
    });
    expect(result.globalTest.statistic).toBeCloseTo(5.54526, 9);
    expect(result.globalTest.dof).toBe(2);
    expect(result.observability).toEqual({ observable: ["s2", "s5"], unobservable: [] });
    expect(result.adjustments[1]).toBeNull();
    for (const r of balanceResiduals(result.values)) expect(Math.abs(r)).toBeLessThan(1e-10);
  });

  test("matches the limit of treating unmeasured flows as measured with a huge sigma", () => {
    const projected = reconcileLinear({ ...exchanger, measured }, { covariance: true });
    const loose = reconcileLinear({ ...exchanger, sigma: [1, 1e5, 1, 1, 1e5, 1] }, { maxEliminations: 0 });
    projected.values.forEach((v, j) => {
      expect(v).toBeCloseTo(loose.values[j]!, 5);
      expect(projected.sds[j]).toBeCloseTo(loose.sds[j]!, 5);
    });
    // Covariance covers the measured flows, then the observable unmeasured ones.
    expect(projected.covariance?.indices).toEqual([0, 2, 3, 5, 1, 4]);
  });

  test("reports unobservable flows as null and still reconciles the redundant ones", () => {
    // given every flow between splitter and mixer unmeasured: the split ratio is free
    const result = reconcileLinear(
      { ...exchanger, measured: [true, false, false, false, false, true] },
      { maxEliminations: 0 },
    );
    // then inlet and outlet are reconciled to their mean (closed form: x1 = x6, equal variances)
    expect(result.values[0]).toBeCloseTo((101.91 + 98.88) / 2, 10);
    expect(result.values[5]).toBeCloseTo((101.91 + 98.88) / 2, 10);
    expect(result.values.slice(1, 5)).toEqual([null, null, null, null]);
    expect(result.sds.slice(1, 5)).toEqual([null, null, null, null]);
    expect(result.observability.unobservable).toEqual(["s2", "s3", "s4", "s5"]);
    expect(result.globalTest.dof).toBe(1);
    expect(result.globalTest.statistic).toBeCloseTo((101.91 - 98.88) ** 2 / 2, 10);
    expect(result.nodalTests).toHaveLength(1);
    expect(result.nodalTests[0]!.balance).toBeNull();
  });

  test("passes a measurement no balance checks through unchanged and does not test it", () => {
    const result = reconcileLinear({
      A: A.map((row) => [...row, 0]),
      y: [...y, 7],
      sigma: [...sigma, 0.5],
      names: [...names, "spare"],
    });
    expect(result.values[6]).toBe(7);
    expect(result.sds[6]).toBeCloseTo(0.5, 12);
    expect(result.redundancy.nonRedundant).toEqual(["spare"]);
    expect(result.measurementTests.map((t) => t.name)).not.toContain("spare");
  });
});

describe("typed errors", () => {
  test("a balance set with a dependent balance is refused with RECONCILE_RANK_DEFICIENT", () => {
    // given the overall balance s1 = s6 added to the four node balances (their sum)
    const problem = {
      ...exchanger,
      A: [...A, [1, 0, 0, 0, 0, -1]],
      balanceNames: [...balanceNames, "overall"],
    };
    // when / then
    let caught: unknown;
    try {
      reconcileLinear(problem);
    } catch (e) {
      caught = e;
    }
    expect(caught).toBeInstanceOf(ReconcileError);
    const err = caught as ReconcileError;
    expect(err.code).toBe("RECONCILE_RANK_DEFICIENT");
    expect([...(err.details.balances ?? [])].sort()).toEqual([...balanceNames, "overall"].sort());
    expect(err.message).toMatch(/linearly dependent/);
  });

  test("a dependent balance set is refused also when unmeasured variables are projected out", () => {
    const problem = {
      ...exchanger,
      A: [...A, [0, 1, 0, -1, 0, 0]],
      balanceNames: [...balanceNames, "duplicate"],
      measured: [true, false, true, true, false, true],
    };
    expect(() => reconcileLinear(problem)).toThrow(
      expect.objectContaining({
        code: "RECONCILE_RANK_DEFICIENT",
        details: { balances: ["exchanger", "duplicate"] },
      }),
    );
  });

  test("malformed input is refused with RECONCILE_INPUT_INVALID naming the variable", () => {
    expect(() => reconcileLinear({ ...exchanger, sigma: [1, 1, 0, 1, 1, 1] })).toThrow(
      expect.objectContaining({ code: "RECONCILE_INPUT_INVALID", message: expect.stringMatching(/s3/) }),
    );
    expect(() => reconcileLinear({ ...exchanger, y: [1, 2, 3] })).toThrow(
      expect.objectContaining({ code: "RECONCILE_INPUT_INVALID" }),
    );
    expect(() => reconcileLinear({ ...exchanger, y: [Number.NaN, ...y.slice(1)] })).toThrow(
      expect.objectContaining({ code: "RECONCILE_INPUT_INVALID" }),
    );
    expect(() => reconcileLinear(exchanger, { alpha: 1.5 })).toThrow(
      expect.objectContaining({ code: "RECONCILE_INPUT_INVALID" }),
    );
  });
});
