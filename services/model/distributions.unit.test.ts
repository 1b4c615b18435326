import { describe, expect, test } from "vitest";
import {
  chiSquareCdf,
  chiSquareCritical,
  chiSquareQuantile,
  chiSquareSurvival,
  erfc,
  gammaP,
  gammaPInverse,
  gammaQ,
  lnGamma,
  normalCdf,
  normalQuantile,
  sidakAlpha,
  sidakNormalCritical,
} from "./distributions.js";

describe("chi-square critical values", () => {
  // Source: NIST/SEMATECH e-Handbook of Statistical Methods (2012), §1.3.6.7.4, upper critical values
  // of the chi-square distribution — published.
  const nist: readonly [number, number, number][] = [
    [1, 3.841, 6.635],
    [2, 5.991, 9.21],
    [3, 7.815, 11.345],
    [4, 9.488, 13.277],
    [5, 11.07, 15.086],
    [6, 12.592, 16.812],
    [8, 15.507, 20.09],
    [10, 18.307, 23.209],
  ];
  test.each(nist)("match the NIST table to 3 decimals for %i degrees of freedom", (dof, at95, at99) => {
    expect(chiSquareCritical(0.05, dof)).toBeCloseTo(at95, 3);
    expect(chiSquareCritical(0.01, dof)).toBeCloseTo(at99, 3);
  });

  test("agree with SciPy to 12 significant digits, far tails included", () => {
    // Source: SciPy 1.17 scipy.stats.chi2.isf(alpha, dof) — reproduced.
    const scipy: readonly [number, number, number][] = [
      [0.05, 4, 9.487729036781158],
      [0.01, 50, 76.1538912490127],
      [0.999, 1, 1.570797149262492e-6],
      [0.05, 200, 233.99426889232492],
      [1e-10, 3, 49.542155927523666],
    ];
    for (const [alpha, dof, expected] of scipy) {
      expect(Math.abs(chiSquareCritical(alpha, dof) / expected - 1)).toBeLessThan(1e-12);
    }
  });

  test("invert the distribution function they come from", () => {
    for (const dof of [1, 2, 7, 33]) {
      for (const p of [1e-8, 0.01, 0.5, 0.95, 0.999999]) {
        const x = chiSquareQuantile(p, dof);
        expect(chiSquareCdf(x, dof)).toBeCloseTo(p, 13);
        expect(Math.abs(chiSquareSurvival(x, dof) - (1 - p))).toBeLessThan(1e-13);
      }
    }
  });
});

describe("incomplete gamma and log-gamma", () => {
  test("reduce to the exponential distribution when a = 1", () => {
    // Source: P(1, x) = 1 − e^(−x), a textbook identity — common practice, no source.
    for (const x of [1e-6, 0.3, 1, 2, 10, 40]) {
      expect(gammaP(1, x)).toBeCloseTo(-Math.expm1(-x), 14);
      expect(gammaQ(1, x) / Math.exp(-x)).toBeCloseTo(1, 12);
    }
  });

  test("give ln Γ(1/2) = ln √π and ln Γ(n) = ln (n−1)!", () => {
    // Source: Γ(1/2) = √π and Γ(n) = (n−1)! — textbook identities, common practice.
    expect(lnGamma(0.5)).toBeCloseTo(0.5 * Math.log(Math.PI), 13);
    expect(lnGamma(11)).toBeCloseTo(Math.log(3628800), 12);
  });

  test("gammaPInverse finds x with P(a, x) = p for small and large a", () => {
    for (const a of [0.2, 0.5, 1, 3.5, 80]) {
      for (const p of [1e-6, 0.1, 0.5, 0.9]) {
        expect(gammaP(a, gammaPInverse(a, p))).toBeCloseTo(p, 12);
      }
    }
  });
});

describe("normal distribution", () => {
  test("quantiles agree with SciPy to 13 significant digits from 1e-300 to 1 − 1e-7", () => {
    // Source: SciPy 1.17 scipy.stats.norm.ppf(p) — reproduced.
    const scipy: readonly [number, number][] = [
      [1e-300, -37.0470962993612],
      [1e-20, -9.262340089798409],
      [1e-5, -4.264890793922825],
      [0.01, -2.3263478740408408],
      [0.02425, -1.972961051311885],
      [0.3, -0.5244005127080409],
      [0.975, 1.959963984540054],
      [0.9999999, 5.199337582290661],
    ];
    for (const [p, expected] of scipy) {
      expect(Math.abs(normalQuantile(p) - expected)).toBeLessThan(1e-13 * Math.max(1, Math.abs(expected)));
    }
    expect(normalQuantile(0.5)).toBe(0);
  });

  test("the distribution function and erfc are consistent with the quantile", () => {
    for (const x of [-8, -2.5, -0.1, 0, 0.7, 3]) {
      expect(normalQuantile(normalCdf(x))).toBeCloseTo(x, 9);
    }
    // Source: erfc(1) = 0.157299207050285… (Abramowitz & Stegun 1964, table 7.1) — from memory.
    expect(erfc(1)).toBeCloseTo(0.157299207050285, 14);
  });

  test("the Šidák critical value for 6 tests at 5 % is 2.631", () => {
    // Source: Narasimhan & Jordache (2000), Data Reconciliation and Gross Error Detection, ch. 7;
    // value as listed in the project's CHECK-VALUES §4 — reproduced (SciPy 1.17 norm.ppf).
    expect(sidakNormalCritical(0.05, 6)).toBeCloseTo(2.631, 3);
    expect(sidakAlpha(0.05, 1)).toBe(0.05);
    expect(1 - (1 - sidakAlpha(0.05, 1000)) ** 1000).toBeCloseTo(0.05, 12);
  });
});
