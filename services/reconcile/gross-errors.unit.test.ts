import { describe, expect, test } from "vitest";
import { globalTest } from "./gross-errors.js";
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
const names = ["s1", "s2", "s3", "s4", "s5", "s6"];
const exchanger: LinearProblem = { A, y, sigma: [1, 1, 1, 1, 1, 1], names };

function withBias(index: number, bias: number): LinearProblem {
  return { ...exchanger, y: y.map((v, j) => (j === index ? v + bias : v)) };
}

describe("serial elimination", () => {
  test("finds an 8-sigma bias on s2, estimates its size and passes the global test after removal", () => {
    // given the published data with +8 (8 σ) added to s2 — a case of our own
    // when
    const result = reconcileLinear(withBias(1, 8));
    // then
    expect(result.initialGlobalTest.passed).toBe(false);
    expect(result.eliminated).toEqual(["s2"]);
    const [error] = result.grossErrors;
    expect(error?.index).toBe(1);
    expect(Math.abs((error?.estimatedSize ?? 0) - 8)).toBeLessThan(1.5);
    expect(error?.statistic).toBeGreaterThan(error?.estimatedSizeSd ?? 0);
    expect(result.globalTest.passed).toBe(true);
    expect(result.globalTest.dof).toBe(3);
    // the eliminated stream keeps an estimate (it was redundant), and no measurement is adjusted for it
    expect(result.measured[1]).toBe(false);
    expect(result.values[1]).not.toBeNull();
    expect(result.adjustments[1]).toBeNull();
  });

  test.each([0, 1, 2, 3, 4, 5])("finds an 8-sigma bias on stream index %i and only that stream", (index) => {
    const result = reconcileLinear(withBias(index, 8));
    expect(result.grossErrors.map((e) => e.index)).toEqual([index]);
    // size within three standard deviations of its own estimate (measurement noise stays in it)
    const e = result.grossErrors[0]!;
    expect(Math.abs(e.estimatedSize - 8)).toBeLessThan(3 * e.estimatedSizeSd);
    expect(result.globalTest.passed).toBe(true);
  });

  test("finds two biases one after the other", () => {
    const problem = { ...exchanger, y: y.map((v, j) => v + (j === 0 ? 12 : j === 4 ? -10 : 0)) };
    const result = reconcileLinear(problem);
    expect([...result.eliminated].sort()).toEqual(["s1", "s5"]);
    expect(result.globalTest.passed).toBe(true);
  });

  test("stops when no redundancy remains and reports indistinguishable candidates", () => {
    // given two flows in series (x0 = x1) that disagree by far more than their sigmas
    const result = reconcileLinear({ A: [[1, -1]], y: [10, 30], sigma: [1, 1], names: ["in", "out"] });
    // then one is removed, the other is named as equally suspect, and the test has nothing left to check
    expect(result.eliminated).toEqual(["in"]);
    expect(result.grossErrors[0]?.tiedWith).toEqual(["out"]);
    expect(result.globalTest.dof).toBe(0);
    expect(result.globalTest.passed).toBe(true);
    expect(result.values).toEqual([30, 30]);
  });

  test("is off when maxEliminations is 0: the failing global test is reported as it is", () => {
    const result = reconcileLinear(withBias(1, 8), { maxEliminations: 0 });
    expect(result.globalTest.passed).toBe(false);
    expect(result.grossErrors).toEqual([]);
    const flagged = result.measurementTests.filter((t) => !t.passed).map((t) => t.name);
    expect(flagged).toContain("s2");
  });

  test("a nodal test flags the balances around a biased stream", () => {
    const result = reconcileLinear(withBias(1, 8), { maxEliminations: 0 });
    const failed = result.nodalTests.filter((t) => !t.passed).map((t) => t.name);
    // s2 leaves balance 0 and enters balance 1; no other balance holds it
    expect(failed.length).toBeGreaterThan(0);
    for (const name of failed) expect(["balance 0", "balance 1"]).toContain(name);
  });
});

describe("global test", () => {
  test("with no degrees of freedom passes trivially and has p-value 1", () => {
    expect(globalTest(0, 0, 0.05)).toEqual({
      statistic: 0,
      dof: 0,
      critical: 0,
      pValue: 1,
      alpha: 0.05,
      passed: true,
    });
  });

  test("rejects at the critical value's right and accepts at its left", () => {
    // Source: NIST/SEMATECH e-Handbook §1.3.6.7.4, χ²₀.₉₅(4) = 9.488 — published.
    expect(globalTest(9.49, 4, 0.05).passed).toBe(false);
    expect(globalTest(9.48, 4, 0.05).passed).toBe(true);
    expect(globalTest(9.48, 4, 0.05).pValue).toBeGreaterThan(0.05);
  });
});
