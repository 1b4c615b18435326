/**
 * Statistics of a weighted least-squares fit: covariance s²·(JᵀWJ)⁻¹, standard errors, Student-t confidence
 * intervals, correlations and identifiability warnings; plus the Student-t and chi-square quantiles they
 * need. Pure, no clock.
 *
 * The covariance is computed from the SVD of the column-equilibrated weighted Jacobian (QR first, then a
 * one-sided Jacobi SVD of the n×n factor), never by inverting JᵀJ: on Lanczos3 JᵀJ has a condition
 * number near 1e8 after equilibration (1e16 before), so an explicit inverse would keep few digits.
 */
import { EstimateError } from "./errors.js";
import { finiteDifferenceJacobian, householderQr, type LmProblem, weightRoots } from "./lm.js";

const EPS = 2.220446049250313e-16;

// Lanczos approximation, g = 7, 9 terms (the coefficients used by Numerical Recipes 3rd ed. §6.1 and
// many libraries); relative error below 1e-15 for x > 0.
const LANCZOS = [
  0.99999999999980993, 676.5203681218851, -1259.1392167224028, 771.32342877765313, -176.61502916214059,
  12.507343278686905, -0.13857109526572012, 9.9843695780195716e-6, 1.5056327351493116e-7,
];

/** ln Γ(x) for x > 0. */
export function lnGamma(x: number): number {
  if (x < 0.5) return Math.log(Math.PI / Math.sin(Math.PI * x)) - lnGamma(1 - x);
  const z = x - 1;
  let s = LANCZOS[0] as number;
  for (let i = 1; i < 9; i++) s += (LANCZOS[i] as number) / (z + i);
  const t = z + 7.5;
  return 0.5 * Math.log(2 * Math.PI) + (z + 0.5) * Math.log(t) - t + Math.log(s);
}

/** Continued fraction for the incomplete beta (modified Lentz; Numerical Recipes §6.4). */
function betaContinuedFraction(a: number, b: number, x: number): number {
  const tiny = 1e-300;
  let c = 1;
  let d = 1 - ((a + b) * x) / (a + 1);
  if (Math.abs(d) < tiny) d = tiny;
  d = 1 / d;
  let h = d;
  for (let m = 1; m <= 10000; m++) {
    const m2 = 2 * m;
    let aa = (m * (b - m) * x) / ((a + m2 - 1) * (a + m2));
    d = 1 + aa * d;
    if (Math.abs(d) < tiny) d = tiny;
    c = 1 + aa / c;
    if (Math.abs(c) < tiny) c = tiny;
    d = 1 / d;
    h *= d * c;
    aa = (-(a + m) * (a + b + m) * x) / ((a + m2) * (a + m2 + 1));
    d = 1 + aa * d;
    if (Math.abs(d) < tiny) d = tiny;
    c = 1 + aa / c;
    if (Math.abs(c) < tiny) c = tiny;
    d = 1 / d;
    const del = d * c;
    h *= del;
    if (Math.abs(del - 1) < 1e-16) break;
  }
  return h;
}

/** Regularized incomplete beta I_x(a, b), 0 ≤ x ≤ 1, a, b > 0. */
export function incompleteBeta(x: number, a: number, b: number): number {
  if (x <= 0) return 0;
  if (x >= 1) return 1;
  const front = Math.exp(lnGamma(a + b) - lnGamma(a) - lnGamma(b) + a * Math.log(x) + b * Math.log1p(-x));
  if (x < (a + 1) / (a + b + 2)) return (front * betaContinuedFraction(a, b, x)) / a;
  return 1 - (front * betaContinuedFraction(b, a, 1 - x)) / b;
}

/** Regularized lower incomplete gamma P(a, x), a > 0, x ≥ 0 (series or continued fraction, NR §6.2). */
export function incompleteGammaP(a: number, x: number): number {
  if (x <= 0) return 0;
  const lnFront = -x + a * Math.log(x) - lnGamma(a);
  if (x < a + 1) {
    let term = 1 / a;
    let sum = term;
    for (let n = 1; n < 100000; n++) {
      term *= x / (a + n);
      sum += term;
      if (Math.abs(term) < Math.abs(sum) * 1e-17) break;
    }
    return sum * Math.exp(lnFront);
  }
  return 1 - incompleteGammaQContinued(a, x, lnFront);
}

function incompleteGammaQContinued(a: number, x: number, lnFront: number): number {
  const tiny = 1e-300;
  let b = x + 1 - a;
  let c = 1 / tiny;
  let d = 1 / b;
  let h = d;
  for (let i = 1; i < 100000; i++) {
    const an = -i * (i - a);
    b += 2;
    d = an * d + b;
    if (Math.abs(d) < tiny) d = tiny;
    c = b + an / c;
    if (Math.abs(c) < tiny) c = tiny;
    d = 1 / d;
    const del = d * c;
    h *= del;
    if (Math.abs(del - 1) < 1e-16) break;
  }
  return Math.exp(lnFront) * h;
}

function checkProbability(p: number, dof: number) {
  if (!(p > 0 && p < 1) || !(dof > 0) || !Number.isFinite(dof)) {
    throw new EstimateError(
      "ESTIMATE_PROBABILITY_RANGE",
      `quantile asked for p = ${p}, dof = ${dof}; need 0 < p < 1 and a positive finite dof`,
    );
  }
}

/** Student-t cumulative distribution P(T ≤ t) with `dof` degrees of freedom. */
export function studentTCdf(t: number, dof: number): number {
  const tail = 0.5 * incompleteBeta(dof / (dof + t * t), dof / 2, 0.5);
  return t > 0 ? 1 - tail : tail;
}

/** Student-t density. */
function studentTPdf(t: number, dof: number): number {
  return Math.exp(
    lnGamma((dof + 1) / 2) -
      lnGamma(dof / 2) -
      0.5 * Math.log(dof * Math.PI) -
      ((dof + 1) / 2) * Math.log1p((t * t) / dof),
  );
}

/**
 * Solves F(x) = target for an increasing F on [lo, ∞) by Newton steps kept inside a bracket, bisecting
 * when Newton leaves it. `upper` is the upper-tail function (1 − F, computed directly to keep precision
 * in the tail); `pdf` its negative derivative.
 */
function invertUpperTail(
  upper: (x: number) => number,
  pdf: (x: number) => number,
  q: number,
  start: number,
  lo: number,
) {
  let a = lo;
  let b = Math.max(start, lo + 1);
  while (upper(b) > q) {
    a = b;
    b *= 2;
    if (b > 1e300) return Number.POSITIVE_INFINITY;
  }
  let x = Math.min(Math.max(start, a), b);
  for (let i = 0; i < 200; i++) {
    const f = upper(x) - q;
    if (f > 0) a = x;
    else b = x;
    const d = pdf(x);
    let next = d > 0 ? x + f / d : Number.NaN;
    if (!(next > a && next < b)) next = 0.5 * (a + b);
    if (Math.abs(next - x) <= 4 * EPS * Math.abs(next) || b - a <= 4 * EPS * Math.abs(b)) return next;
    x = next;
  }
  return x;
}

/** Standard normal quantile (Acklam's rational approximation, refined by Newton on erfc). */
export function normalQuantile(p: number): number {
  checkProbability(p, 1);
  if (p === 0.5) return 0;
  const q = Math.min(p, 1 - p);
  const upperTail = (z: number) => 0.5 * (1 - incompleteGammaP(0.5, (z * z) / 2)); // for z ≥ 0
  const pdf = (z: number) => Math.exp(-0.5 * z * z) / Math.sqrt(2 * Math.PI);
  const start = Math.sqrt(-2 * Math.log(q)) - 0.8;
  const z = invertUpperTail(upperTail, pdf, q, Math.max(start, 0.1), 0);
  return p < 0.5 ? -z : z;
}

/**
 * Student-t quantile: the t with P(T ≤ t) = p for `dof` degrees of freedom (dof may be fractional).
 * Closed forms for dof 1 and 2; otherwise the incomplete-beta tail inverted by safeguarded Newton steps.
 */
export function studentTQuantile(p: number, dof: number): number {
  checkProbability(p, dof);
  if (p === 0.5) return 0;
  const q = Math.min(p, 1 - p);
  let t: number;
  if (dof === 1) t = Math.tan(Math.PI * (0.5 - q));
  else if (dof === 2) t = Math.sqrt(2 / (4 * q * (1 - q)) - 2);
  else {
    const upperTail = (x: number) => 0.5 * incompleteBeta(dof / (dof + x * x), dof / 2, 0.5);
    t = invertUpperTail(upperTail, (x) => studentTPdf(x, dof), q, normalQuantile(1 - q), 0);
  }
  return p < 0.5 ? -t : t;
}

/** Chi-square cumulative distribution P(X ≤ x) with `dof` degrees of freedom. */
export function chiSquareCdf(x: number, dof: number): number {
  return incompleteGammaP(dof / 2, x / 2);
}

/** Chi-square quantile: the x with P(X ≤ x) = p (Wilson–Hilferty start, safeguarded Newton). */
export function chiSquareQuantile(p: number, dof: number): number {
  checkProbability(p, dof);
  const k = dof;
  const upper = (x: number) => 1 - incompleteGammaP(k / 2, x / 2);
  const pdf = (x: number) =>
    x <= 0 ? 0 : Math.exp((k / 2 - 1) * Math.log(x) - x / 2 - (k / 2) * Math.LN2 - lnGamma(k / 2));
  const z = normalQuantile(p);
  const wh = k * (1 - 2 / (9 * k) + z * Math.sqrt(2 / (9 * k))) ** 3;
  return invertUpperTail(upper, pdf, 1 - p, Math.max(wh, 1e-3), 0);
}

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
 * and the Jacobian once (central differences when the problem has none).
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
  if (problem.jacobian) problem.jacobian(x, jac);
  else {
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
