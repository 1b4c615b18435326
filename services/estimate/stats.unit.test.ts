import { describe, expect, test } from "vitest";
import { loadNistSet, nistProblem, significantDigits } from "../../test/reference/nist-strd/models.js";
import type { LmProblem } from "./lm.js";
import { levenbergMarquardt } from "./lm.js";
import { chiSquareCdf, chiSquareQuantile, fitStatistics, studentTCdf, studentTQuantile } from "./stats.js";

describe("Student t quantile", () => {
  // Source: NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.6.7.2, t table, 0.975 column (published)
  const table: Array<[number, number]> = [
    [1, 12.706],
    [4, 2.776],
    [12, 2.179],
    [18, 2.101],
    [30, 2.042],
  ];
  for (const [dof, t] of table) {
    test(`t(0.975, ${dof}) matches the table value ${t} to its printed 3 decimals`, () => {
      expect(studentTQuantile(0.975, dof)).toBeCloseTo(t, 3);
    });
  }
  test("for a very large dof it tends to the normal quantile 1.960", () => {
    // Source: NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.6.7.2, t table, row ∞ (published)
    expect(studentTQuantile(0.975, 1e7)).toBeCloseTo(1.96, 3);
  });
  test("is the inverse of the t distribution function in both tails", () => {
    for (const dof of [1, 2, 3, 7.5, 40]) {
      for (const p of [1e-6, 0.01, 0.3, 0.9, 0.999]) {
        expect(studentTCdf(studentTQuantile(p, dof), dof)).toBeCloseTo(p, 12);
      }
    }
  });
  test("a probability outside (0, 1) throws ESTIMATE_PROBABILITY_RANGE", () => {
    expect(() => studentTQuantile(1, 5)).toThrowError(
      expect.objectContaining({ code: "ESTIMATE_PROBABILITY_RANGE" }),
    );
  });
});

describe("chi-square quantile", () => {
  // Source: NIST/SEMATECH e-Handbook of Statistical Methods, §1.3.6.7.4, upper critical values of the
  // chi-square distribution (published; copied in CHECK-VALUES §4)
  const table: Array<[number, number, number]> = [
    [1, 3.841, 6.635],
    [2, 5.991, 9.21],
    [3, 7.815, 11.345],
    [4, 9.488, 13.277],
    [5, 11.07, 15.086],
    [6, 12.592, 16.812],
    [8, 15.507, 20.09],
    [10, 18.307, 23.209],
  ];
  for (const [dof, q95, q99] of table) {
    test(`χ²(0.95, ${dof}) = ${q95} and χ²(0.99, ${dof}) = ${q99} to the printed 3 decimals`, () => {
      expect(chiSquareQuantile(0.95, dof)).toBeCloseTo(q95, 3);
      expect(chiSquareQuantile(0.99, dof)).toBeCloseTo(q99, 3);
    });
  }
  test("is the inverse of the chi-square distribution function", () => {
    for (const dof of [0.5, 1, 4, 30, 500]) {
      for (const p of [1e-5, 0.05, 0.5, 0.95, 0.99999]) {
        expect(chiSquareCdf(chiSquareQuantile(p, dof), dof)).toBeCloseTo(p, 11);
      }
    }
  });
});

describe("fit statistics on NIST StRD sets", () => {
  for (const name of [
    "Misra1a",
    "DanWood",
    "Lanczos3",
    "MGH09",
    "Thurber",
    "BoxBOD",
    "Eckerle4",
    "Rat43",
    "MGH10",
  ]) {
    test(`${name}: the standard errors from s²·(JᵀJ)⁻¹ match the certified standard deviations to 8 digits`, () => {
      // given the fit from start 2
      const set = loadNistSet(name);
      const problem = nistProblem(set);
      const fit = levenbergMarquardt(problem, set.start2);
      // when
      const stats = fitStatistics(problem, fit.p);
      // then
      // Source: NIST Statistical Reference Datasets, Nonlinear Regression, <name>, certified values (published)
      const sd = set.certified.standardDeviations ?? [];
      expect(sd.length).toBe(problem.n);
      sd.forEach((c, j) => {
        expect(significantDigits(stats.standardErrors[j] as number, c)).toBeGreaterThanOrEqual(8);
      });
      expect(stats.dof).toBe(set.certified.dof);
      if (set.certified.residualSd !== null) {
        expect(
          significantDigits(Math.sqrt(stats.residualVariance), set.certified.residualSd),
        ).toBeGreaterThanOrEqual(8);
      }
    });
  }

  test("the 95 % interval of Misra1a's b1 is the estimate ± t(0.975, 12) × its certified sd", () => {
    const set = loadNistSet("Misra1a");
    const problem = nistProblem(set);
    const stats = fitStatistics(problem, levenbergMarquardt(problem, set.start2).p);
    // Source: NIST StRD Misra1a certified sd (published) and NIST/SEMATECH §1.3.6.7.2 t(0.975, 12) = 2.179 (published)
    expect(stats.ciHalfWidth[0]).toBeCloseTo(2.179 * 2.7070075241, 2);
    expect((stats.ciUpper[0] as number) - (stats.ciLower[0] as number)).toBeCloseTo(
      2 * (stats.ciHalfWidth[0] as number),
      10,
    );
  });

  test("Lanczos3's three exponentials raise ill-conditioning and high-correlation warnings", () => {
    const set = loadNistSet("Lanczos3");
    const problem = nistProblem(set);
    const stats = fitStatistics(problem, levenbergMarquardt(problem, set.start2).p, {
      names: ["b1", "b2", "b3", "b4", "b5", "b6"],
    });
    const codes = stats.warnings.map((w) => w.code);
    expect(codes).toContain("STAT_ILL_CONDITIONED");
    expect(codes).toContain("STAT_HIGH_CORRELATION");
    expect(stats.conditionNumber).toBeGreaterThan(1000);
    expect(stats.warnings.find((w) => w.code === "STAT_HIGH_CORRELATION")?.detail).toMatch(
      /corr\(b\d, b\d\)/,
    );
  });

  test("MGH09's b2, whose certified sd exceeds its value, gets a wide-sd warning", () => {
    const set = loadNistSet("MGH09");
    const problem = nistProblem(set);
    const stats = fitStatistics(problem, levenbergMarquardt(problem, set.start2).p);
    // Source: NIST StRD MGH09 certified values (published): b2 = 0.19128, sd 0.19633
    expect(stats.warnings.some((w) => w.code === "STAT_WIDE_SD" && w.parameters[0] === 1)).toBe(true);
  });

  test("known measurement variances skip the s² scaling of the covariance", () => {
    const set = loadNistSet("Misra1a");
    const problem = nistProblem(set);
    const p = levenbergMarquardt(problem, set.start2).p;
    const residual = fitStatistics(problem, p);
    const known = fitStatistics(problem, p, { varianceFactor: "known" });
    expect(known.residualVariance).toBe(1);
    expect((residual.covariance[0] as number) / (known.covariance[0] as number)).toBeCloseTo(
      residual.weightedRss / residual.dof,
      10,
    );
  });
});

describe("identifiability and failures", () => {
  // y = a·b·x: only the product a·b is identifiable.
  const xs = [1, 2, 3, 4, 5, 6];
  const ys = [2.1, 3.9, 6.2, 7.8, 10.1, 12.0];
  const product: LmProblem = {
    n: 2,
    m: xs.length,
    residuals(p, out) {
      xs.forEach((x, i) => {
        out[i] = (p[0] as number) * (p[1] as number) * x - (ys[i] as number);
      });
    },
    jacobian(p, out) {
      xs.forEach((x, i) => {
        out[2 * i] = (p[1] as number) * x;
        out[2 * i + 1] = (p[0] as number) * x;
      });
    },
  };

  test("a model where only a product of two parameters matters is reported rank deficient, naming both", () => {
    const stats = fitStatistics(product, [1, 2], { names: ["a", "b"] });
    expect(stats.rank).toBe(1);
    const w = stats.warnings.find((x) => x.code === "STAT_RANK_DEFICIENT");
    expect(w?.parameters).toEqual([0, 1]);
    expect(stats.conditionNumber).toBe(Number.POSITIVE_INFINITY);
  });

  test("as many parameters as residuals throws ESTIMATE_NO_DEGREES_OF_FREEDOM", () => {
    const set = loadNistSet("Misra1a");
    const two = nistProblem({ ...set, x: set.x.slice(0, 2), y: set.y.slice(0, 2) });
    expect(() => fitStatistics(two, set.start2)).toThrowError(
      expect.objectContaining({ code: "ESTIMATE_NO_DEGREES_OF_FREEDOM" }),
    );
  });

  test("a column-major Jacobian gives the certified Misra1a standard deviations to 6 digits", () => {
    // given Misra1a whose Jacobian callback writes by columns (out[j·m + i])
    const set = loadNistSet("Misra1a");
    const base = nistProblem(set);
    const rows = new Float64Array(base.m * 2);
    const columns: LmProblem = {
      ...base,
      jacobianColumnMajor: true,
      jacobian(p, out) {
        base.jacobian?.(p, rows);
        for (let i = 0; i < base.m; i++)
          for (let j = 0; j < 2; j++) out[j * base.m + i] = rows[i * 2 + j] as number;
      },
    };
    // when
    const stats = fitStatistics(columns, set.certified.parameters);
    // then
    // Source: NIST Statistical Reference Datasets, Nonlinear Regression, Misra1a, certified values (published)
    expect(significantDigits(stats.standardErrors[0] as number, 2.7070075241)).toBeGreaterThanOrEqual(6);
    expect(significantDigits(stats.standardErrors[1] as number, 7.2668688436e-6)).toBeGreaterThanOrEqual(6);
  });

  test("without an analytic Jacobian, central differences give the certified Misra1a sd to 6 digits", () => {
    const set = loadNistSet("Misra1a");
    const { jacobian: _analytic, ...numeric } = nistProblem(set);
    const stats = fitStatistics(numeric, set.certified.parameters);
    // Source: NIST Statistical Reference Datasets, Nonlinear Regression, Misra1a, certified values (published)
    expect(significantDigits(stats.standardErrors[0] as number, 2.7070075241)).toBeGreaterThanOrEqual(6);
    expect(significantDigits(stats.standardErrors[1] as number, 7.2668688436e-6)).toBeGreaterThanOrEqual(6);
  });
});
