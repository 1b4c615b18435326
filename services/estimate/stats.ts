/**
 * Statistics of a weighted least-squares fit: covariance s²·(JᵀWJ)⁻¹, standard errors, Student-t confidence
 * intervals, correlations and identifiability warnings; plus the Student-t and chi-square quantiles they
 * need. Pure, no clock.
 *
 * The covariance is computed from the SVD of the column-equilibrated weighted Jacobian (QR first, then a
 * one-sided Jacobi SVD of the n×n factor), never by inverting JᵀJ: on Lanczos3 JᵀJ has a condition
 * number near 1e8 after equilibration (1e16 before), so an explicit inverse would keep few digits.
 */

import {
  chiSquareCdf,
  chiSquareQuantile,
  gammaP,
  incompleteBeta,
  lnGamma,
  normalQuantile,
  studentTCdf,
  studentTQuantile as tQuantile,
} from "../model/distributions.js";
import { EstimateError } from "./errors.js";
import { finiteDifferenceJacobian, householderQr, type LmProblem, weightRoots } from "./lm.js";

const EPS = 2.220446049250313e-16;

// The distributions live in services/model (shared with reconcile); these re-exports keep the
// estimator's public surface in one place.
export { chiSquareCdf, incompleteBeta, lnGamma, normalQuantile, studentTCdf };

/** Regularized lower incomplete gamma P(a, x). */
export const incompleteGammaP = gammaP;

function checkProbability(p: number, dof: number) {
  if (!(p > 0 && p < 1) || !(dof > 0) || !Number.isFinite(dof)) {
    throw new EstimateError(
      "ESTIMATE_PROBABILITY_RANGE",
      `quantile asked for p = ${p}, dof = ${dof}; need 0 < p < 1 and a positive finite dof`,
    );
  }
}

/** Student-t quantile P(T ≤ t) = p; throws ESTIMATE_PROBABILITY_RANGE outside 0 < p < 1, dof > 0. */
export function studentTQuantile(p: number, dof: number): number {
  checkProbability(p, dof);
  return tQuantile(p, dof);
}

/** Chi-square quantile P(X ≤ x) = p; throws ESTIMATE_PROBABILITY_RANGE outside 0 < p < 1, dof > 0. */
export function chiSquareQuantileChecked(p: number, dof: number): number {
  checkProbability(p, dof);
  return chiSquareQuantile(p, dof);
}
export { chiSquareQuantileChecked as chiSquareQuantile };

/** Codes of identifiability warnings. */
export const STAT_WARNING_CODES = {
  STAT_HIGH_CORRELATION: "two parameters' estimates are correlated beyond correlationLimit",
  STAT_WIDE_SD: "a parameter's standard error exceeds maxRelativeSd of its value",
  STAT_ILL_CONDITIONED: "the equilibrated Jacobian's condition number exceeds conditionLimit",
  STAT_RANK_DEFICIENT: "the Jacobian is rank deficient: some parameter combination is not identifiable",
} as const;

/** Code of a {@link StatWarning}. */
export type StatWarningCode = keyof typeof STAT_WARNING_CODES;

/** An identifiability warning. */
export interface StatWarning {
  code: StatWarningCode;
  /** Indices of the parameters concerned. */
  parameters: number[];
  /** The measured value (correlation, relative sd, condition number or singular-value ratio). */
  value: number;
  detail: string;
}

/** Options of {@link fitStatistics}. */
export interface FitStatisticsOptions {
  /** Two-sided confidence level of the intervals, in (0, 1). Default 0.95. */
  confidence?: number;
  /**
   * "residual": s² = RSS/dof (weights give relative precision only; the NIST convention). "known": s² = 1
   * (weights are true 1/σ²). Default "residual".
   */
  varianceFactor?: "residual" | "known";
  /** Warn when |corr(i, j)| exceeds this. Default 0.99. */
  correlationLimit?: number;
  /** Warn when sd/|value| exceeds this. Default 0.5 (a 95 % interval wider than about ±100 %). */
  maxRelativeSd?: number;
  /**
   * Warn when the condition number of the column-equilibrated weighted Jacobian exceeds this. Default 1000
   * (common practice, no source: regression collinearity diagnostics flag condition indexes from 30–100).
   */
  conditionLimit?: number;
  /** Parameter names for warning texts. Default "p0", "p1", …. */
  names?: readonly string[];
  /** Finite-difference scheme when the problem has no analytic Jacobian. Default "central". */
  finiteDifference?: "forward" | "central";
}

/** Result of {@link fitStatistics}. All n×n matrices are row-major Float64Arrays. */
export interface FitStatistics {
  n: number;
  m: number;
  /** Degrees of freedom m − n. */
  dof: number;
  /** Σ wᵢ·rᵢ² at p: the chi-square statistic when weights are true 1/σ². */
  weightedRss: number;
  /** s² used to scale the covariance (RSS/dof, or 1 for "known"). */
  residualVariance: number;
  /** Covariance of p (unit of pᵢ × unit of pⱼ). */
  covariance: Float64Array;
  /** Standard errors √diag(covariance). */
  standardErrors: Float64Array;
  /** Correlation matrix. */
  correlation: Float64Array;
  /** The confidence level used. */
  confidence: number;
  /** Student-t quantile t(1 − (1 − confidence)/2, dof). */
  tQuantile: number;
  /** Half-width of each confidence interval: tQuantile·sd. */
  ciHalfWidth: Float64Array;
  ciLower: Float64Array;
  ciUpper: Float64Array;
  /** Singular values of the column-equilibrated weighted Jacobian, descending. */
  singularValues: Float64Array;
  /** Their ratio max/min (Infinity when rank deficient). */
  conditionNumber: number;
  /** Numerical rank (numpy's rule: singular values above max(m, n)·ε·σ_max). */
  rank: number;
  warnings: StatWarning[];
}

/**
 * One-sided Jacobi SVD (Hestenes) of an n×n row-major matrix a, in place: afterwards the columns of a are
 * U·Σ and v holds V. Returns the singular values (column norms), unsorted.
 */
function jacobiSvd(a: Float64Array, n: number, v: Float64Array): Float64Array {
  v.fill(0);
  for (let j = 0; j < n; j++) v[j * n + j] = 1;
  for (let sweep = 0; sweep < 60; sweep++) {
    let rotated = false;
    for (let p = 0; p < n - 1; p++) {
      for (let q = p + 1; q < n; q++) {
        let alpha = 0;
        let beta = 0;
        let gamma = 0;
        for (let i = 0; i < n; i++) {
          const ap = a[i * n + p] as number;
          const aq = a[i * n + q] as number;
          alpha += ap * ap;
          beta += aq * aq;
          gamma += ap * aq;
        }
        if (gamma === 0 || Math.abs(gamma) <= EPS * Math.sqrt(alpha * beta)) continue;
        rotated = true;
        const zeta = (beta - alpha) / (2 * gamma);
        const t = Math.sign(zeta || 1) / (Math.abs(zeta) + Math.sqrt(1 + zeta * zeta));
        const c = 1 / Math.sqrt(1 + t * t);
        const s = c * t;
        for (let i = 0; i < n; i++) {
          const ap = a[i * n + p] as number;
          const aq = a[i * n + q] as number;
          a[i * n + p] = c * ap - s * aq;
          a[i * n + q] = s * ap + c * aq;
          const vp = v[i * n + p] as number;
          const vq = v[i * n + q] as number;
          v[i * n + p] = c * vp - s * vq;
          v[i * n + q] = s * vp + c * vq;
        }
      }
    }
    if (!rotated) break;
  }
  const sigma = new Float64Array(n);
  for (let j = 0; j < n; j++) {
    let s = 0;
    for (let i = 0; i < n; i++) s += (a[i * n + j] as number) ** 2;
    sigma[j] = Math.sqrt(s);
  }
  return sigma;
}

/**
 * Statistics of the fit of `problem` at p (usually `levenbergMarquardt(...).p`). Evaluates the residuals
 * and the Jacobian once (`jacobian`, else the fused `evaluate`, else central differences).
 * Throws `EstimateError` ESTIMATE_NO_DEGREES_OF_FREEDOM when m ≤ n, ESTIMATE_NON_FINITE when the
 * residuals or the Jacobian are not finite at p.
 */
export function fitStatistics(
  problem: LmProblem,
  p: ArrayLike<number>,
  options: FitStatisticsOptions = {},
): FitStatistics {
  const { n, m } = problem;
  if (p.length !== n) {
    throw new EstimateError("ESTIMATE_DIMENSION_MISMATCH", `p has length ${p.length}, expected n = ${n}`);
  }
  const dof = m - n;
  if (dof <= 0) {
    throw new EstimateError(
      "ESTIMATE_NO_DEGREES_OF_FREEDOM",
      `${m} residuals for ${n} parameters: add measurements or fix parameters`,
    );
  }
  const confidence = options.confidence ?? 0.95;
  if (!(confidence > 0 && confidence < 1)) {
    throw new EstimateError(
      "ESTIMATE_INVALID_OPTION",
      `option confidence must be in (0, 1), got ${confidence}`,
    );
  }
  const correlationLimit = options.correlationLimit ?? 0.99;
  const maxRelativeSd = options.maxRelativeSd ?? 0.5;
  const conditionLimit = options.conditionLimit ?? 1000;
  const name = (j: number) => options.names?.[j] ?? `p${j}`;

  const x = Float64Array.from(p);
  const r = new Float64Array(m);
  const jac = new Float64Array(m * n);
  problem.residuals(x, r);
  if (problem.jacobian || problem.evaluate) {
    const target = problem.jacobianColumnMajor ? new Float64Array(m * n) : jac;
    if (problem.jacobian) problem.jacobian(x, target);
    else problem.evaluate?.(x, r, target);
    if (problem.jacobianColumnMajor) {
      for (let j = 0; j < n; j++) for (let i = 0; i < m; i++) jac[i * n + j] = target[j * m + i] as number;
    }
  } else {
    const fd: { method: "forward" | "central"; lower?: Float64Array; upper?: Float64Array } = {
      method: options.finiteDifference ?? "central",
    };
    if (problem.lower) fd.lower = problem.lower;
    if (problem.upper) fd.upper = problem.upper;
    finiteDifferenceJacobian(problem.residuals, x, m, jac, fd, r);
  }
  const sw = weightRoots(problem.weights, m);
  let rss = 0;
  for (let i = 0; i < m; i++) {
    const w = sw ? (sw[i] as number) : 1;
    rss += ((r[i] as number) * w) ** 2;
    for (let j = 0; j < n; j++) jac[i * n + j] = (jac[i * n + j] as number) * w;
  }
  if (!Number.isFinite(rss) || !jac.every(Number.isFinite)) {
    throw new EstimateError("ESTIMATE_NON_FINITE", "residuals or Jacobian are not finite at p");
  }
  const s2 = options.varianceFactor === "known" ? 1 : rss / dof;

  // Column equilibration: J = Js·C, C = diag(column norms); cov = s²·C⁻¹(JsᵀJs)⁻¹C⁻¹.
  const colNorm = new Float64Array(n);
  for (let j = 0; j < n; j++) {
    let s = 0;
    for (let i = 0; i < m; i++) s += (jac[i * n + j] as number) ** 2;
    colNorm[j] = Math.sqrt(s);
  }
  for (let i = 0; i < m; i++) {
    for (let j = 0; j < n; j++) {
      const c = colNorm[j] as number;
      jac[i * n + j] = c > 0 ? (jac[i * n + j] as number) / c : 0;
    }
  }
  const rDiag = new Float64Array(n);
  const betas = new Float64Array(n);
  householderQr(jac, m, n, rDiag, betas);
  const rUpper = new Float64Array(n * n);
  for (let j = 0; j < n; j++) {
    rUpper[j * n + j] = rDiag[j] as number;
    for (let k = j + 1; k < n; k++) rUpper[j * n + k] = jac[j * n + k] as number;
  }
  const vMat = new Float64Array(n * n);
  const sigmaRaw = jacobiSvd(rUpper, n, vMat);
  const order = Array.from({ length: n }, (_, j) => j).sort(
    (a, b) => (sigmaRaw[b] as number) - (sigmaRaw[a] as number),
  );
  const singularValues = Float64Array.from(order, (j) => sigmaRaw[j] as number);
  const sigmaMax = singularValues[0] as number;
  const cutoff = Math.max(m, n) * EPS * sigmaMax;
  let rank = 0;
  for (const s of singularValues) if (s > cutoff) rank++;
  const sigmaMin = singularValues[n - 1] as number;
  const conditionNumber = sigmaMin > cutoff ? sigmaMax / sigmaMin : Number.POSITIVE_INFINITY;

  // Pseudo-inverse of JsᵀJs over the numerical range: V·Σ⁻²·Vᵀ.
  const covariance = new Float64Array(n * n);
  for (let a = 0; a < n; a++) {
    for (let b = 0; b <= a; b++) {
      let s = 0;
      for (const k of order) {
        const sk = sigmaRaw[k] as number;
        if (sk <= cutoff) continue;
        s += ((vMat[a * n + k] as number) * (vMat[b * n + k] as number)) / (sk * sk);
      }
      const ca = colNorm[a] as number;
      const cb = colNorm[b] as number;
      const value = ca > 0 && cb > 0 ? (s2 * s) / (ca * cb) : Number.POSITIVE_INFINITY;
      covariance[a * n + b] = value;
      covariance[b * n + a] = value;
    }
  }
  const standardErrors = new Float64Array(n);
  for (let j = 0; j < n; j++) standardErrors[j] = Math.sqrt(covariance[j * n + j] as number);
  const correlation = new Float64Array(n * n);
  for (let a = 0; a < n; a++) {
    for (let b = 0; b < n; b++) {
      correlation[a * n + b] =
        a === b
          ? 1
          : (covariance[a * n + b] as number) /
            ((standardErrors[a] as number) * (standardErrors[b] as number));
    }
  }
  const tQuantile = studentTQuantile(1 - (1 - confidence) / 2, dof);
  const ciHalfWidth = standardErrors.map((sd) => tQuantile * sd);
  const ciLower = x.map((v, j) => v - (ciHalfWidth[j] as number));
  const ciUpper = x.map((v, j) => v + (ciHalfWidth[j] as number));

  const warnings: StatWarning[] = [];
  if (rank < n) {
    // Name the parameters that load most on the null-space directions.
    const loaded = new Set<number>();
    for (const k of order.slice(rank)) {
      for (let j = 0; j < n; j++) if (Math.abs(vMat[j * n + k] as number) > 0.1) loaded.add(j);
    }
    const params = [...loaded].sort((a, b) => a - b);
    warnings.push({
      code: "STAT_RANK_DEFICIENT",
      parameters: params,
      value: sigmaMin / sigmaMax,
      detail: `Jacobian rank ${rank} < ${n}; not identifiable together: ${params.map(name).join(", ")}`,
    });
  } else if (conditionNumber > conditionLimit) {
    const k = order[n - 1] as number;
    const params: number[] = [];
    for (let j = 0; j < n; j++) if (Math.abs(vMat[j * n + k] as number) > 0.1) params.push(j);
    warnings.push({
      code: "STAT_ILL_CONDITIONED",
      parameters: params,
      value: conditionNumber,
      detail: `condition number ${conditionNumber.toPrecision(3)} > ${conditionLimit}; weakest combination involves ${params.map(name).join(", ")}`,
    });
  }
  for (let a = 0; a < n; a++) {
    for (let b = a + 1; b < n; b++) {
      const c = correlation[a * n + b] as number;
      if (Math.abs(c) > correlationLimit) {
        warnings.push({
          code: "STAT_HIGH_CORRELATION",
          parameters: [a, b],
          value: c,
          detail: `corr(${name(a)}, ${name(b)}) = ${c.toFixed(4)} beyond ±${correlationLimit}`,
        });
      }
    }
  }
  for (let j = 0; j < n; j++) {
    const rel = (standardErrors[j] as number) / Math.abs(x[j] as number);
    if (!(rel <= maxRelativeSd)) {
      warnings.push({
        code: "STAT_WIDE_SD",
        parameters: [j],
        value: rel,
        detail: `sd(${name(j)}) is ${(100 * rel).toPrecision(3)} % of its value (limit ${100 * maxRelativeSd} %)`,
      });
    }
  }

  return {
    n,
    m,
    dof,
    weightedRss: rss,
    residualVariance: s2,
    covariance,
    standardErrors,
    correlation,
    confidence,
    tQuantile,
    ciHalfWidth,
    ciLower,
    ciUpper,
    singularValues,
    conditionNumber,
    rank,
    warnings,
  };
}
