/**
 * NIST StRD nonlinear-regression sets (the JSON files beside this one) as least-squares problems with
 * analytic Jacobians, shared by the estimation unit tests and bench/estimate.ts.
 * Model formulas: NIST Statistical Reference Datasets, Nonlinear Regression, each set's page (published).
 */
import { readFileSync } from "node:fs";
import type { LmProblem } from "../../../services/estimate/lm.js";

/** One NIST StRD nonlinear-regression set as stored in `<Name>.json`. */
export interface NistSet {
  name: string;
  source: string;
  difficulty: "lower" | "average" | "higher";
  model: string;
  start1: number[];
  start2: number[];
  certified: {
    parameters: number[];
    standardDeviations: number[] | null;
    rss: number;
    residualSd: number | null;
    dof: number;
  };
  x: number[];
  y: number[];
}

/** Model value at x and its gradient with respect to b (written into grad). */
type Model = (x: number, b: Float64Array, grad: Float64Array) => number;

const models: Record<string, Model> = {
  Misra1a(x, b, g) {
    const [b1, b2] = b as unknown as [number, number];
    const e = Math.exp(-b2 * x);
    g[0] = 1 - e;
    g[1] = b1 * x * e;
    return b1 * (1 - e);
  },
  DanWood(x, b, g) {
    const [b1, b2] = b as unknown as [number, number];
    const p = x ** b2;
    g[0] = p;
    g[1] = b1 * p * Math.log(x);
    return b1 * p;
  },
  Lanczos3(x, b, g) {
    let y = 0;
    for (let k = 0; k < 3; k++) {
      const a = b[2 * k] as number;
      const e = Math.exp(-(b[2 * k + 1] as number) * x);
      g[2 * k] = e;
      g[2 * k + 1] = -a * x * e;
      y += a * e;
    }
    return y;
  },
  MGH09(x, b, g) {
    const [b1, b2, b3, b4] = b as unknown as [number, number, number, number];
    const num = x * x + x * b2;
    const den = x * x + x * b3 + b4;
    g[0] = num / den;
    g[1] = (b1 * x) / den;
    g[2] = (-b1 * num * x) / (den * den);
    g[3] = (-b1 * num) / (den * den);
    return (b1 * num) / den;
  },
  Thurber(x, b, g) {
    const x2 = x * x;
    const x3 = x2 * x;
    const num = (b[0] as number) + (b[1] as number) * x + (b[2] as number) * x2 + (b[3] as number) * x3;
    const den = 1 + (b[4] as number) * x + (b[5] as number) * x2 + (b[6] as number) * x3;
    const q = num / (den * den);
    g[0] = 1 / den;
    g[1] = x / den;
    g[2] = x2 / den;
    g[3] = x3 / den;
    g[4] = -x * q;
    g[5] = -x2 * q;
    g[6] = -x3 * q;
    return num / den;
  },
  BoxBOD(x, b, g) {
    const [b1, b2] = b as unknown as [number, number];
    const e = Math.exp(-b2 * x);
    g[0] = 1 - e;
    g[1] = b1 * x * e;
    return b1 * (1 - e);
  },
  Eckerle4(x, b, g) {
    const [b1, b2, b3] = b as unknown as [number, number, number];
    const u = (x - b3) / b2;
    const e = Math.exp(-0.5 * u * u);
    const y = (b1 / b2) * e;
    g[0] = e / b2;
    g[1] = (y * (u * u - 1)) / b2;
    g[2] = (y * u) / b2;
    return y;
  },
  Rat43(x, b, g) {
    const [b1, b2, b3, b4] = b as unknown as [number, number, number, number];
    const e = Math.exp(b2 - b3 * x);
    const base = 1 + e;
    const p = base ** (-1 / b4);
    const y = b1 * p;
    g[0] = p;
    g[1] = (-y * e) / (b4 * base);
    g[2] = (y * e * x) / (b4 * base);
    g[3] = (y * Math.log(base)) / (b4 * b4);
    return y;
  },
  MGH10(x, b, g) {
    const [b1, b2, b3] = b as unknown as [number, number, number];
    const e = Math.exp(b2 / (x + b3));
    g[0] = e;
    g[1] = (b1 * e) / (x + b3);
    g[2] = (-b1 * b2 * e) / ((x + b3) * (x + b3));
    return b1 * e;
  },
};

/** Names of the stored sets, lower difficulty first. */
export const NIST_SET_NAMES = [
  "Misra1a",
  "DanWood",
  "Lanczos3",
  "MGH09",
  "Thurber",
  "BoxBOD",
  "Eckerle4",
  "Rat43",
  "MGH10",
] as const;

/** Reads `<name>.json` from this folder. */
export function loadNistSet(name: string): NistSet {
  const url = new URL(`./${name}.json`, import.meta.url);
  return JSON.parse(readFileSync(url, "utf8")) as NistSet;
}

/** The set as an unweighted least-squares problem, residual = model − y, with the analytic Jacobian. */
export function nistProblem(set: NistSet): LmProblem {
  const model = models[set.name];
  if (!model) throw new Error(`no model for NIST set ${set.name}`);
  const n = set.certified.parameters.length;
  const m = set.x.length;
  const xs = Float64Array.from(set.x);
  const ys = Float64Array.from(set.y);
  const grad = new Float64Array(n);
  return {
    n,
    m,
    residuals(p, out) {
      for (let i = 0; i < m; i++) out[i] = model(xs[i] as number, p, grad) - (ys[i] as number);
    },
    jacobian(p, out) {
      for (let i = 0; i < m; i++) {
        model(xs[i] as number, p, grad);
        out.set(grad, i * n);
      }
    },
  };
}

/**
 * Log relative error, the StRD measure of agreement: −log10(|estimate − certified| / |certified|),
 * capped at 15 (an exact match). The number of significant digits that agree.
 */
export function significantDigits(estimate: number, certified: number): number {
  const err = Math.abs(estimate - certified);
  if (err === 0) return 15;
  if (!Number.isFinite(err)) return 0;
  return Math.min(15, Math.max(0, -Math.log10(err / Math.abs(certified))));
}
