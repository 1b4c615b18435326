/**
 * Problems from the Hock & Schittkowski collection, written with exact derivatives.
 *
 * Source: Hock, W. & Schittkowski, K. (1981), "Test Examples for Nonlinear Programming Codes",
 * Springer, LNEMS vol. 187 (the economics and mathematical systems series). Problem statements, start points
 * and optima are from memory; each optimum below was re-computed with SciPy 1.17 SLSQP from the same
 * start with exact derivatives (ftol 1e-12 and 1e-14), see `reproduction` on each problem.
 *
 * Inequalities are written c(x) ≥ 0, as in the collection.
 */
import type { NlpProblem } from "../../../services/optimize/sqp.js";

/** A reference problem and its known optimum. */
export interface HsProblem {
  /** Number in the collection, e.g. 71 for HS 71. */
  id: number;
  problem: NlpProblem;
  /** Known optimal objective value. */
  fStar: number;
  /** Known minimizer. */
  xStar: readonly number[];
  /** Names of the constraints (and bounds, "<var> ≥ lb") active at the optimum. */
  activeAtOptimum: readonly string[];
  /** How the optimum is known. */
  reproduction: string;
}

const sq = (v: number) => v * v;

/** HS 6: one nonlinear equality, unbounded variables. */
export const hs6: HsProblem = {
  id: 6,
  problem: {
    x0: [-1.2, 1],
    objective: (x) => sq(1 - x[0]!),
    gradient: (x) => [-2 * (1 - x[0]!), 0],
    equalities: {
      names: ["parabola"],
      values: (x) => [10 * (x[1]! - sq(x[0]!))],
      jacobian: (x) => [[-20 * x[0]!, 10]],
    },
  },
  fStar: 0,
  xStar: [1, 1],
  activeAtOptimum: ["parabola"],
  reproduction: "from memory; reproduced (SciPy SLSQP)",
};

/** HS 21: quadratic objective, one linear inequality and a lower bound both active. */
export const hs21: HsProblem = {
  id: 21,
  problem: {
    x0: [-1, -1],
    variableNames: ["x1", "x2"],
    lower: [2, -50],
    upper: [50, 50],
    objective: (x) => 0.01 * sq(x[0]!) + sq(x[1]!) - 100,
    gradient: (x) => [0.02 * x[0]!, 2 * x[1]!],
    inequalities: {
      names: ["c1"],
      values: (x) => [10 * x[0]! - x[1]! - 10],
      jacobian: () => [[10, -1]],
    },
  },
  fStar: -99.96,
  xStar: [2, 0],
  activeAtOptimum: ["x1 ≥ 2"],
  reproduction: "from memory; reproduced (SciPy SLSQP)",
};

/** HS 35: convex quadratic, one active linear inequality. */
export const hs35: HsProblem = {
  id: 35,
  problem: {
    x0: [0.5, 0.5, 0.5],
    lower: [0, 0, 0],
    objective: (x) =>
      9 -
      8 * x[0]! -
      6 * x[1]! -
      4 * x[2]! +
      2 * sq(x[0]!) +
      2 * sq(x[1]!) +
      sq(x[2]!) +
      2 * x[0]! * x[1]! +
      2 * x[0]! * x[2]!,
    gradient: (x) => [
      -8 + 4 * x[0]! + 2 * x[1]! + 2 * x[2]!,
      -6 + 4 * x[1]! + 2 * x[0]!,
      -4 + 2 * x[2]! + 2 * x[0]!,
    ],
    inequalities: {
      names: ["budget"],
      values: (x) => [3 - x[0]! - x[1]! - 2 * x[2]!],
      jacobian: () => [[-1, -1, -2]],
    },
  },
  fStar: 1 / 9,
  xStar: [4 / 3, 7 / 9, 4 / 9],
  activeAtOptimum: ["budget"],
  reproduction: "from memory; reproduced (SciPy SLSQP)",
};

/** HS 71: nonlinear equality and inequality, a lower bound active. */
export const hs71: HsProblem = {
  id: 71,
  problem: {
    x0: [1, 5, 5, 1],
    lower: [1, 1, 1, 1],
    upper: [5, 5, 5, 5],
    objective: (x) => x[0]! * x[3]! * (x[0]! + x[1]! + x[2]!) + x[2]!,
    gradient: (x) => [
      x[3]! * (2 * x[0]! + x[1]! + x[2]!),
      x[0]! * x[3]!,
      x[0]! * x[3]! + 1,
      x[0]! * (x[0]! + x[1]! + x[2]!),
    ],
    equalities: {
      names: ["sphere"],
      values: (x) => [sq(x[0]!) + sq(x[1]!) + sq(x[2]!) + sq(x[3]!) - 40],
      jacobian: (x) => [[2 * x[0]!, 2 * x[1]!, 2 * x[2]!, 2 * x[3]!]],
    },
    inequalities: {
      names: ["product"],
      values: (x) => [x[0]! * x[1]! * x[2]! * x[3]! - 25],
      jacobian: (x) => [
        [x[1]! * x[2]! * x[3]!, x[0]! * x[2]! * x[3]!, x[0]! * x[1]! * x[3]!, x[0]! * x[1]! * x[2]!],
      ],
    },
  },
  fStar: 17.0140172891,
  xStar: [1, 4.7429996373, 3.8211499842, 1.3794082932],
  activeAtOptimum: ["sphere", "product", "x[0] ≥ 1"],
  reproduction: "from memory; reproduced (SciPy SLSQP)",
};

/** HS 76: convex quadratic, two active linear inequalities and one active bound. */
export const hs76: HsProblem = {
  id: 76,
  problem: {
    x0: [0.5, 0.5, 0.5, 0.5],
    lower: [0, 0, 0, 0],
    objective: (x) =>
      sq(x[0]!) +
      0.5 * sq(x[1]!) +
      sq(x[2]!) +
      0.5 * sq(x[3]!) -
      x[0]! * x[2]! +
      x[2]! * x[3]! -
      x[0]! -
      3 * x[1]! +
      x[2]! -
      x[3]!,
    gradient: (x) => [2 * x[0]! - x[2]! - 1, x[1]! - 3, 2 * x[2]! - x[0]! + x[3]! + 1, x[3]! + x[2]! - 1],
    inequalities: {
      names: ["c1", "c2", "c3"],
      values: (x) => [
        5 - x[0]! - 2 * x[1]! - x[2]! - x[3]!,
        4 - 3 * x[0]! - x[1]! - 2 * x[2]! + x[3]!,
        x[1]! + 4 * x[2]! - 1.5,
      ],
      jacobian: () => [
        [-1, -2, -1, -1],
        [-3, -1, -2, 1],
        [0, 1, 4, 0],
      ],
    },
  },
  fStar: -4.68181818182,
  xStar: [3 / 11, 23 / 11, 0, 6 / 11],
  activeAtOptimum: ["c1", "x[2] ≥ 0"],
  reproduction: "from memory; reproduced (SciPy SLSQP)",
};

/** HS 100: seven variables, four nonlinear inequalities (two active). */
export const hs100: HsProblem = {
  id: 100,
  problem: {
    x0: [1, 2, 0, 4, 0, 1, 1],
    objective: (x) =>
      sq(x[0]! - 10) +
      5 * sq(x[1]! - 12) +
      x[2]! ** 4 +
      3 * sq(x[3]! - 11) +
      10 * x[4]! ** 6 +
      7 * sq(x[5]!) +
      x[6]! ** 4 -
      4 * x[5]! * x[6]! -
      10 * x[5]! -
      8 * x[6]!,
    gradient: (x) => [
      2 * (x[0]! - 10),
      10 * (x[1]! - 12),
      4 * x[2]! ** 3,
      6 * (x[3]! - 11),
      60 * x[4]! ** 5,
      14 * x[5]! - 4 * x[6]! - 10,
      4 * x[6]! ** 3 - 4 * x[5]! - 8,
    ],
    inequalities: {
      names: ["c1", "c2", "c3", "c4"],
      values: (x) => [
        127 - 2 * sq(x[0]!) - 3 * x[1]! ** 4 - x[2]! - 4 * sq(x[3]!) - 5 * x[4]!,
        282 - 7 * x[0]! - 3 * x[1]! - 10 * sq(x[2]!) - x[3]! + x[4]!,
        196 - 23 * x[0]! - sq(x[1]!) - 6 * sq(x[5]!) + 8 * x[6]!,
        -4 * sq(x[0]!) - sq(x[1]!) + 3 * x[0]! * x[1]! - 2 * sq(x[2]!) - 5 * x[5]! + 11 * x[6]!,
      ],
      jacobian: (x) => [
        [-4 * x[0]!, -12 * x[1]! ** 3, -1, -8 * x[3]!, -5, 0, 0],
        [-7, -3, -20 * x[2]!, -1, 1, 0, 0],
        [-23, -2 * x[1]!, 0, 0, 0, -12 * x[5]!, 8],
        [-8 * x[0]! + 3 * x[1]!, -2 * x[1]! + 3 * x[0]!, -4 * x[2]!, 0, 0, -5, 11],
      ],
    },
  },
  fStar: 680.630057297,
  xStar: [2.3305005816, 1.9513723, -0.4775394751, 4.3657258964, -0.6244859434, 1.0381338445, 1.5942290827],
  activeAtOptimum: ["c1", "c4"],
  reproduction: "from memory; reproduced (SciPy SLSQP)",
};

/** The problems used by the SQP reference tests. */
export const hsProblems: readonly HsProblem[] = [hs6, hs21, hs35, hs71, hs76, hs100];
