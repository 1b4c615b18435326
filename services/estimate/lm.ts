/**
 * Weighted Levenberg–Marquardt for nonlinear least squares on Float64Arrays: pure, no allocation in the
 * iteration loop, no clock.
 *
 * Choices and their sources:
 * - Scaled damping: solve (JᵀJ + μ·D²)·h = −Jᵀr with D² = diag(JᵀJ), kept non-decreasing over the run
 *   (Moré 1978, "The Levenberg–Marquardt algorithm: implementation and theory", MINPACK `mode = 1`).
 *   This makes μ dimensionless and the step invariant to the parameters' units, which is what lets
 *   Misra1a (b2 ≈ 5e-4) and MGH10 (b2 ≈ 6e3) share one default.
 * - Damping update: Nielsen (1999), "Damping parameter in Marquardt's method", IMM-REP-1999-05:
 *   μ ← μ·max(1/3, 1 − (2ρ − 1)³) on success, μ ← μ·ν, ν ← 2ν on failure.
 * - Stopping: MINPACK's relative tests (ftol on actual and predicted relative reduction, xtol on the
 *   scaled step, gtol on the cosine between r and the columns of J).
 * - Linear algebra, "auto": the damped normal equations by Cholesky (m·n²/2 flops to form JᵀJ) when the
 *   column-equilibrated JᵀJ is well conditioned; otherwise QR of the Jacobian (2·m·n² flops) and a small
 *   QR of [R; √μ·D] per damping trial, as MINPACK does. Forming JᵀJ squares the condition number:
 *   with κ(J) = 1e6 the normal equations carry only ~4 correct digits in the step, while QR keeps ~10.
 *   The switch costs one n×n Cholesky per Jacobian and keeps the fast path for well-posed plant fits
 *   (thousands of residuals, a handful of parameters), where forming JᵀJ is 4× cheaper than QR.
 * - Bounds by projection onto the box after each step (simple, adequate for sanity limits; not an
 *   active-set method: a parameter pinned at a bound is reported, not optimized along the bound).
 */
import { EstimateError } from "./errors.js";

/** A weighted nonlinear least-squares problem: minimize Σ wᵢ·rᵢ(p)². */
export interface LmProblem {
  /** Number of parameters. */
  readonly n: number;
  /** Number of residuals. */
  readonly m: number;
  /** Writes the m residuals at p into out (model − measurement, in the measurement's unit). */
  residuals(p: Float64Array, out: Float64Array): void;
  /**
   * Writes ∂rᵢ/∂pⱼ into out[i·n + j] (m×n, row-major; column-major out[j·m + i] when
   * `jacobianColumnMajor`). Absent: forward differences with relative steps.
   */
  jacobian?(p: Float64Array, out: Float64Array): void;
  /**
   * Optional fused evaluation: writes the residuals (as `residuals`) and the Jacobian (as `jacobian`) at p
   * in one pass, so that both share the model's expensive terms (exponentials, solves). When present,
   * {@link levenbergMarquardt} calls it at every trial point instead of `residuals` and keeps the Jacobian
   * of an accepted step, so no point is evaluated twice; `residuals` is still used for finite differences,
   * geodesic acceleration and by other callers. Must agree with `residuals` and `jacobian`.
   */
  evaluate?(p: Float64Array, residualsOut: Float64Array, jacobianOut: Float64Array): void;
  /**
   * True when `jacobian` and `evaluate` write column-major (out[j·m + i]). The normal equations read
   * the Jacobian by columns, so this saves the solver a transpose of the m×n matrix per iteration
   * (about 15 % of a 2,000×8 fit); writing by columns costs the model nothing measurable. Default false.
   */
  readonly jacobianColumnMajor?: boolean;
  /** Weights wᵢ = 1/σᵢ² (σ in the residual's unit); default all 1. Zero drops a residual. */
  readonly weights?: Float64Array;
  /** Lower bounds on p (−Infinity for none); steps are projected onto [lower, upper]. */
  readonly lower?: Float64Array;
  /** Upper bounds on p (+Infinity for none). */
  readonly upper?: Float64Array;
}

/** Options of {@link levenbergMarquardt}. */
export interface LmOptions {
  /** Maximum number of Jacobian evaluations (outer iterations). Default 500. */
  maxIterations?: number;
  /** Maximum number of residual evaluations, finite-difference ones included. Default 200·(n + 1) + 1000. */
  maxEvaluations?: number;
  /**
   * Stop when both the actual and the predicted relative reduction of the RSS are ≤ ftol. Default 1e-20:
   * in effect off, because a flat RSS says little about a weakly determined parameter (MGH09's b2 moves
   * in its 8th digit while the RSS changes by 1e-17 relative); xtol and gtol decide.
   */
  ftol?: number;
  /**
   * Stop when every parameter's step |hⱼ| ≤ xtol·(|pⱼ| + √rss/Dⱼ), Dⱼ the column scale. Default 1e-12.
   */
  xtol?: number;
  /** Stop when max |cos(r, J·eⱼ)| ≤ gtol (first-order optimality, scale-free). Default 1e-13. */
  gtol?: number;
  /** Starting damping μ relative to D² (dimensionless). Default 1e-3. */
  initialDamping?: number;
  /** Linear solver: "auto" (Cholesky when well conditioned, else QR), "cholesky" or "qr". Default "auto". */
  solver?: "auto" | "cholesky" | "qr";
  /** In "auto", use QR when the estimated condition number of the equilibrated JᵀJ exceeds this. Default 1e8. */
  conditionLimit?: number;
  /** Finite-difference scheme when the problem has no analytic Jacobian. Default "forward". */
  finiteDifference?: "forward" | "central";
  /**
   * Geodesic acceleration (one extra residual evaluation per trial step). Default off. `maxRatio`: reject a
   * step whose acceleration ‖D·a‖ exceeds this fraction of ‖D·v‖ (default 0.75); `step`: the finite-difference
   * step along v, as a fraction of v (default 0.1).
   */
  geodesicAcceleration?: { maxRatio?: number; step?: number };
}

/** Why the iteration stopped. The first four count as converged. */
export type LmReason =
  | "ftol"
  | "xtol"
  | "gtol"
  | "zero-residual"
  | "max-iterations"
  | "max-evaluations"
  | "damping-overflow"
  | "non-finite-start";

/** Result of {@link levenbergMarquardt}. */
export interface LmResult {
  /** Parameters at the best point found. */
  p: Float64Array;
  /** Weighted residual sum of squares Σ wᵢ·rᵢ² at p (the residual's unit squared, times the weight's). */
  rss: number;
  /** Number of outer iterations (Jacobian evaluations after the first). */
  iterations: number;
  /** Residual evaluations, finite-difference ones included. */
  nfev: number;
  /** Jacobian evaluations (analytic or finite-difference). */
  njev: number;
  /** True when a relative tolerance (or an exact fit) stopped the iteration. */
  converged: boolean;
  /** The stopping rule that fired. */
  reason: LmReason;
}

const EPS = 2.220446049250313e-16;
const SQRT_EPS = Math.sqrt(EPS);
const CBRT_EPS = Math.cbrt(EPS);
/**
 * Below MODEL_TRUST·rss the actual RSS change is not trusted over the linear model's prediction. The noise
 * of the actual change is about ε·|model|/|r| relative: 1e-15 on MGH09, 1e-12 on Lanczos3 (residuals 1e-5 of
 * the model). A step accepted under this rule can raise the RSS by at most 1e-11 relative, far below any
 * statistical meaning (a parameter shift of ~1e-5 standard deviations).
 */
const MODEL_TRUST = 1e-11;

/** Options of {@link finiteDifferenceJacobian}. */
export interface FiniteDifferenceOptions {
  /** "forward" (n evaluations, ~8 digits) or "central" (2n evaluations, ~10 digits). Default "forward". */
  method?: "forward" | "central";
  /** Lower bounds: a step that would cross one is taken backwards instead. */
  lower?: Float64Array;
  /** Upper bounds: a step that would cross one is taken backwards instead. */
  upper?: Float64Array;
}

/**
 * Finite-difference Jacobian with relative steps hⱼ = √ε·max(|pⱼ|, 1e-8)·sign (forward) or ∛ε·… (central),
 * written m×n row-major into out. A relative step is the fix for the absolute 0.1 step that gives
 * nonsense on parameters of order 1e-4 (see LIBRARY-NOTES on ml-levenberg-marquardt).
 * `f0` (the residuals at p) saves one evaluation in the forward scheme. Returns the number of
 * residual evaluations made.
 */
export function finiteDifferenceJacobian(
  residuals: (p: Float64Array, out: Float64Array) => void,
  p: Float64Array,
  m: number,
  out: Float64Array,
  options: FiniteDifferenceOptions = {},
  f0?: Float64Array,
): number {
  const n = p.length;
  const central = options.method === "central";
  const fPlus = new Float64Array(m);
  const fMinus = new Float64Array(m);
  const q = Float64Array.from(p);
  let evaluations = 0;
  let base = f0;
  if (!central && base === undefined) {
    base = new Float64Array(m);
    residuals(p, base);
    evaluations++;
  }
  for (let j = 0; j < n; j++) {
    const pj = p[j] as number;
    const magnitude = Math.max(Math.abs(pj), 1e-8);
    let h = (central ? CBRT_EPS : SQRT_EPS) * magnitude;
    const hi = options.upper?.[j] ?? Number.POSITIVE_INFINITY;
    const lo = options.lower?.[j] ?? Number.NEGATIVE_INFINITY;
    if (pj + h > hi) h = -h;
    if (central) {
      // Near a bound the central scheme falls back to one side of the bound.
      const up = Math.min(pj + h, hi);
      const down = Math.max(pj - h, lo);
      q[j] = up;
      residuals(q, fPlus);
      q[j] = down;
      residuals(q, fMinus);
      evaluations += 2;
      const width = up - down;
      for (let i = 0; i < m; i++) out[i * n + j] = ((fPlus[i] as number) - (fMinus[i] as number)) / width;
    } else {
      // Re-read the step after rounding so the divisor is the step actually taken.
      q[j] = pj + h;
      const taken = (q[j] as number) - pj;
      residuals(q, fPlus);
      evaluations++;
      const f = base as Float64Array;
      for (let i = 0; i < m; i++) out[i * n + j] = ((fPlus[i] as number) - (f[i] as number)) / taken;
    }
    q[j] = pj;
  }
  return evaluations;
}

/**
 * @internal Shared with stats.ts.
 * Householder QR in place on a rows×cols row-major matrix `a` (rows ≥ cols). Afterwards the strict upper
 * triangle of a's first `cols` rows holds R above the diagonal, `rDiag` its diagonal, and the columns below
 * hold the reflectors (with `betas`) for {@link applyQt}.
 */
export function householderQr(
  a: Float64Array,
  rows: number,
  cols: number,
  rDiag: Float64Array,
  betas: Float64Array,
) {
  for (let k = 0; k < cols; k++) {
    let norm2 = 0;
    for (let i = k; i < rows; i++) {
      const v = a[i * cols + k] as number;
      norm2 += v * v;
    }
    if (norm2 === 0) {
      rDiag[k] = 0;
      betas[k] = 0;
      continue;
    }
    const akk = a[k * cols + k] as number;
    const alpha = akk > 0 ? -Math.sqrt(norm2) : Math.sqrt(norm2);
    const v0 = akk - alpha;
    a[k * cols + k] = v0;
    // ‖v‖² = ‖x‖² − x₀² + v₀² with v = x − alpha·e₀.
    const beta = 2 / (norm2 - akk * akk + v0 * v0);
    betas[k] = beta;
    for (let j = k + 1; j < cols; j++) {
      let s = 0;
      for (let i = k; i < rows; i++) s += (a[i * cols + k] as number) * (a[i * cols + j] as number);
      s *= beta;
      for (let i = k; i < rows; i++)
        a[i * cols + j] = (a[i * cols + j] as number) - s * (a[i * cols + k] as number);
    }
    rDiag[k] = alpha;
  }
}

/** Overwrites v (length rows) with Qᵀ·v, Q from {@link householderQr}. */
function applyQt(a: Float64Array, rows: number, cols: number, betas: Float64Array, v: Float64Array) {
  for (let k = 0; k < cols; k++) {
    const beta = betas[k] as number;
    if (beta === 0) continue;
    let s = 0;
    for (let i = k; i < rows; i++) s += (a[i * cols + k] as number) * (v[i] as number);
    s *= beta;
    for (let i = k; i < rows; i++) v[i] = (v[i] as number) - s * (a[i * cols + k] as number);
  }
}

/**
 * Upper triangle of JᵀJ from the column-major Jᵀ (n rows of length m) into a (n×n row-major), in 2×2 blocks
 * of columns: four products per four loads instead of one per two, which halves the time in V8 (35 µs
 * instead of 75 µs for 2,000×8 here). The lower triangle is left for the caller to mirror.
 */
function gram(jt: Float64Array, m: number, n: number, a: Float64Array) {
  for (let j = 0; j < n; j += 2) {
    const c0 = j * m;
    const c1 = c0 + m;
    const pairJ = j + 1 < n;
    for (let k = j; k < n; k += 2) {
      const d0 = k * m;
      const d1 = d0 + m;
      const pairK = k + 1 < n;
      let s00 = 0;
      let s01 = 0;
      let s10 = 0;
      let s11 = 0;
      if (pairJ && pairK) {
        for (let i = 0; i < m; i++) {
          const a0 = jt[c0 + i] as number;
          const a1 = jt[c1 + i] as number;
          const b0 = jt[d0 + i] as number;
          const b1 = jt[d1 + i] as number;
          s00 += a0 * b0;
          s01 += a0 * b1;
          s10 += a1 * b0;
          s11 += a1 * b1;
        }
      } else if (pairJ) {
        for (let i = 0; i < m; i++) {
          const b0 = jt[d0 + i] as number;
          s00 += (jt[c0 + i] as number) * b0;
          s10 += (jt[c1 + i] as number) * b0;
        }
      } else if (pairK) {
        for (let i = 0; i < m; i++) {
          const a0 = jt[c0 + i] as number;
          s00 += a0 * (jt[d0 + i] as number);
          s01 += a0 * (jt[d1 + i] as number);
        }
      } else {
        for (let i = 0; i < m; i++) s00 += (jt[c0 + i] as number) * (jt[d0 + i] as number);
      }
      a[j * n + k] = s00;
      if (pairK) a[j * n + k + 1] = s01;
      if (pairJ && k > j) a[(j + 1) * n + k] = s10;
      if (pairJ && pairK) a[(j + 1) * n + k + 1] = s11;
    }
  }
}

/**
 * In-place Cholesky of the leading n×n of `a` (row-major, lower triangle used). Returns the ratio of the
 * smallest to the largest squared pivot (a cheap lower bound on 1/κ), or −1 when `a` is not positive definite.
 */
function cholesky(a: Float64Array, n: number): number {
  let minPivot = Number.POSITIVE_INFINITY;
  let maxPivot = 0;
  for (let j = 0; j < n; j++) {
    let d = a[j * n + j] as number;
    for (let k = 0; k < j; k++) {
      const l = a[j * n + k] as number;
      d -= l * l;
    }
    if (!(d > 0)) return -1;
    minPivot = Math.min(minPivot, d);
    maxPivot = Math.max(maxPivot, d);
    const ljj = Math.sqrt(d);
    a[j * n + j] = ljj;
    for (let i = j + 1; i < n; i++) {
      let s = a[i * n + j] as number;
      for (let k = 0; k < j; k++) s -= (a[i * n + k] as number) * (a[j * n + k] as number);
      a[i * n + j] = s / ljj;
    }
  }
  return minPivot / maxPivot;
}

/** Solves L·Lᵀ·x = b in place in b, L from {@link cholesky}. */
function choleskySolve(l: Float64Array, n: number, b: Float64Array) {
  for (let i = 0; i < n; i++) {
    let s = b[i] as number;
    for (let k = 0; k < i; k++) s -= (l[i * n + k] as number) * (b[k] as number);
    b[i] = s / (l[i * n + i] as number);
  }
  for (let i = n - 1; i >= 0; i--) {
    let s = b[i] as number;
    for (let k = i + 1; k < n; k++) s -= (l[k * n + i] as number) * (b[k] as number);
    b[i] = s / (l[i * n + i] as number);
  }
}

// The O(m·n) loops live in top-level functions that take their arrays as arguments: inside the solver's
// closure the buffers that are swapped between iterations (r, jac) are context variables, which V8
// reloads and re-checks on every access; as parameters they stay in registers (3–4× faster here).

/** Multiplies entry i of each column of the column-major `jacT` (n columns of length m) by sw[i]. */
function scaleColumns(jacT: Float64Array, sw: Float64Array, m: number, n: number) {
  for (let j = 0; j < n; j++) {
    const c = j * m;
    for (let i = 0; i < m; i++) jacT[c + i] = (jacT[c + i] as number) * (sw[i] as number);
  }
}

/** Row-major copy of the column-major `jacT` (n columns of length m). */
function untranspose(jacT: Float64Array, m: number, n: number, jac: Float64Array) {
  for (let j = 0; j < n; j++) {
    const c = j * m;
    for (let i = 0; i < m; i++) jac[i * n + j] = jacT[c + i] as number;
  }
}

// Scratch buffers of the m- and m·n-sized arrays, kept between fits: a 2,000×8 fit otherwise allocates and
// zeroes ~0.5 MB per call (6 % of its time). Taken buffers are zeroed, as fresh ones would be, because a
// Jacobian callback may write only its non-zero entries; a nested or failed fit simply takes new ones.
const scratch: Float64Array[] = [];
const SCRATCH_LIMIT = 16;

function takeBuffer(length: number): Float64Array {
  for (let k = scratch.length - 1; k >= 0; k--) {
    const b = scratch[k] as Float64Array;
    if (b.length === length) {
      scratch.splice(k, 1);
      return b.fill(0);
    }
  }
  return new Float64Array(length);
}

function returnBuffers(...buffers: (Float64Array | undefined)[]) {
  for (const b of buffers) {
    if (b !== undefined && !scratch.includes(b)) scratch.push(b);
  }
  if (scratch.length > SCRATCH_LIMIT) scratch.splice(0, scratch.length - SCRATCH_LIMIT);
}

/** Multiplies row i of the row-major m×n `jac` by sw[i]. */
function scaleRows(jac: Float64Array, sw: Float64Array, m: number, n: number) {
  for (let i = 0; i < m; i++) {
    const s = sw[i] as number;
    const row = i * n;
    for (let j = 0; j < n; j++) jac[row + j] = (jac[row + j] as number) * s;
  }
}

/** Column-major copy jacT (n rows of length m) of the row-major m×n `jac`. */
function transpose(jac: Float64Array, m: number, n: number, jacT: Float64Array) {
  for (let i = 0; i < m; i++) {
    const row = i * n;
    for (let j = 0; j < n; j++) jacT[j * m + i] = jac[row + j] as number;
  }
}

/** g = Jᵀ·r from the column-major Jᵀ, two partial sums per column. */
function gradient(jacT: Float64Array, r: Float64Array, m: number, n: number, g: Float64Array) {
  for (let j = 0; j < n; j++) {
    const cj = j * m;
    let g0 = 0;
    let g1 = 0;
    let i = 0;
    for (; i + 1 < m; i += 2) {
      g0 += (jacT[cj + i] as number) * (r[i] as number);
      g1 += (jacT[cj + i + 1] as number) * (r[i + 1] as number);
    }
    if (i < m) g0 += (jacT[cj + i] as number) * (r[i] as number);
    g[j] = g0 + g1;
  }
}

/** Writes the weighted residuals raw·sw into out; returns Σ out², NaN when not finite. */
function weighResiduals(
  raw: Float64Array,
  sw: Float64Array | undefined,
  m: number,
  out: Float64Array,
): number {
  let s = 0;
  if (sw) {
    for (let i = 0; i < m; i++) {
      const value = (raw[i] as number) * (sw[i] as number);
      out[i] = value;
      s += value * value;
    }
  } else {
    for (let i = 0; i < m; i++) {
      const value = raw[i] as number;
      out[i] = value;
      s += value * value;
    }
  }
  return Number.isFinite(s) ? s : Number.NaN;
}

/**
 * Σ(rᵢ − r'ᵢ)(rᵢ + r'ᵢ) rather than rss − rss': the difference of two sums loses everything below ε·rss,
 * which caps Thurber and MGH09 at ~8 digits (steps that still help get rejected as noise).
 */
function actualReduction(r: Float64Array, rNew: Float64Array, m: number): number {
  let actual = 0;
  for (let i = 0; i < m; i++) {
    const ri = r[i] as number;
    const rn = rNew[i] as number;
    actual += (ri - rn) * (ri + rn);
  }
  return actual;
}

function checkLength(name: string, a: ArrayLike<number> | undefined, expected: number) {
  if (a !== undefined && a.length !== expected) {
    throw new EstimateError(
      "ESTIMATE_DIMENSION_MISMATCH",
      `${name} has length ${a.length}, expected ${expected}; check the problem's n and m`,
    );
  }
}

function positiveOption(name: string, value: number | undefined, fallback: number): number {
  const v = value ?? fallback;
  if (!(v > 0) || !Number.isFinite(v)) {
    throw new EstimateError(
      "ESTIMATE_INVALID_OPTION",
      `option ${name} must be a positive finite number, got ${v}`,
    );
  }
  return v;
}

/** Square roots of the weights (validated), or undefined for unit weights. */
export function weightRoots(weights: Float64Array | undefined, m: number): Float64Array | undefined {
  if (weights === undefined) return undefined;
  checkLength("weights", weights, m);
  const roots = new Float64Array(m);
  for (let i = 0; i < m; i++) {
    const w = weights[i] as number;
    if (!(w >= 0) || !Number.isFinite(w)) {
      throw new EstimateError(
        "ESTIMATE_INVALID_WEIGHT",
        `weights[${i}] = ${w}; weights must be finite and ≥ 0`,
      );
    }
    roots[i] = Math.sqrt(w);
  }
  return roots;
}

/**
 * Minimizes Σ wᵢ·rᵢ(p)² from p0 by Levenberg–Marquardt (see the module comment for the method).
 * Throws `EstimateError` on mismatched dimensions, bad weights or bad options; a start where the residuals
 * are not finite returns `reason: "non-finite-start"` with `converged: false`.
 */
export function levenbergMarquardt(
  problem: LmProblem,
  p0: ArrayLike<number>,
  options: LmOptions = {},
): LmResult {
  const { n, m } = problem;
  if (!Number.isInteger(n) || !Number.isInteger(m) || n < 1 || m < 1) {
    throw new EstimateError("ESTIMATE_DIMENSION_MISMATCH", `n = ${n} and m = ${m} must be positive integers`);
  }
  checkLength("p0", p0, n);
  checkLength("lower", problem.lower, n);
  checkLength("upper", problem.upper, n);
  const sw = weightRoots(problem.weights, m);
  const maxIterations = positiveOption("maxIterations", options.maxIterations, 500);
  const maxEvaluations = positiveOption("maxEvaluations", options.maxEvaluations, 200 * (n + 1) + 1000);
  const ftol = positiveOption("ftol", options.ftol, 1e-20);
  const xtol = positiveOption("xtol", options.xtol, 1e-12);
  const gtol = positiveOption("gtol", options.gtol, 1e-13);
  let mu = positiveOption("initialDamping", options.initialDamping, 1e-3);
  const conditionLimit = positiveOption("conditionLimit", options.conditionLimit, 1e8);
  const accel = options.geodesicAcceleration;
  const accelRatio = accel ? positiveOption("geodesicAcceleration.maxRatio", accel.maxRatio, 0.75) : 0;
  const accelStep = accel ? positiveOption("geodesicAcceleration.step", accel.step, 0.1) : 0;
  const solver = options.solver ?? "auto";
  const lower = problem.lower;
  const upper = problem.upper;

  const x = new Float64Array(n);
  for (let j = 0; j < n; j++) x[j] = project(Number(p0[j]), j);
  const xNew = new Float64Array(n);
  const v = new Float64Array(n);
  const h = new Float64Array(n);
  const acc = new Float64Array(n);
  let raw = takeBuffer(m);
  let rawNew = takeBuffer(m);
  let r = takeBuffer(m);
  let rNew = takeBuffer(m);
  // `jac` is in the problem's layout (finite differences: row-major); `jacT` the column-major copy when
  // that layout is row-major; `jacRows` the row-major one that the QR path and the acceleration read.
  const columnMajor =
    problem.jacobianColumnMajor === true &&
    (problem.jacobian !== undefined || problem.evaluate !== undefined);
  let jac = takeBuffer(m * n);
  // With a fused evaluation the trial point's Jacobian lands here and is swapped in on acceptance.
  let jacNew = problem.evaluate ? takeBuffer(m * n) : jac;
  const jacT = columnMajor ? undefined : takeBuffer(m * n);
  let jacRowsCopy: Float64Array | undefined;
  let jacRows = jac;
  const a = new Float64Array(n * n);
  const g = new Float64Array(n);
  const gAccel = new Float64Array(n);
  const d2 = new Float64Array(n);
  const work = new Float64Array(n * n);
  const scale = new Float64Array(n);
  // QR path and acceleration buffers, allocated on first use.
  let qrWork: Float64Array | undefined;
  let qrVector: Float64Array | undefined;
  const qrBetas = new Float64Array(n);
  const rUpper = new Float64Array(n * n);
  const c = new Float64Array(n);
  const cAccel = new Float64Array(n);
  const rDiag = new Float64Array(n);
  const aug = new Float64Array(2 * n * n);
  const augRhs = new Float64Array(2 * n);
  const augDiag = new Float64Array(n);
  const augBetas = new Float64Array(n);
  const fvv = accel ? new Float64Array(m) : undefined;
  const rawProbe = accel ? new Float64Array(m) : undefined;

  let nfev = 0;
  let njev = 0;
  const fused = problem.evaluate?.bind(problem);
  const fdOptions: FiniteDifferenceOptions = { method: options.finiteDifference ?? "forward" };
  if (lower) fdOptions.lower = lower;
  if (upper) fdOptions.upper = upper;

  function project(value: number, j: number): number {
    const lo = lower?.[j] ?? Number.NEGATIVE_INFINITY;
    const hi = upper?.[j] ?? Number.POSITIVE_INFINITY;
    return Math.min(Math.max(value, lo), hi);
  }

  /**
   * Evaluates raw and weighted residuals at p (and, with a fused evaluation, the unweighted Jacobian into
   * jacOut); returns the weighted RSS, NaN when not finite.
   */
  function evaluate(p: Float64Array, rawOut: Float64Array, out: Float64Array, jacOut: Float64Array): number {
    if (fused) fused(p, rawOut, jacOut);
    else problem.residuals(p, rawOut);
    nfev++;
    return weighResiduals(rawOut, sw, m, out);
  }

  /**
   * Factors the damped system for the current μ (Cholesky: `work`; QR: `aug`). Returns false when the
   * Cholesky factorization fails (the caller raises μ).
   */
  function factor(useQr: boolean): boolean {
    if (useQr) {
      // [R; √μ·D] by a small Householder QR (MINPACK's lmpar/qrsolv, without pivoting: the √μ·D rows
      // make the augmented matrix full rank whenever μ > 0).
      aug.fill(0);
      aug.set(rUpper);
      const sm = Math.sqrt(mu);
      for (let j = 0; j < n; j++) aug[(n + j) * n + j] = sm * Math.sqrt(d2[j] as number);
      householderQr(aug, 2 * n, n, augDiag, augBetas);
      return true;
    }
    // Equilibrated damped normal equations S(A + μD²)S, S = diag(A)^(−1/2).
    for (let j = 0; j < n; j++) {
      const sj = scale[j] as number;
      for (let k = 0; k <= j; k++) work[j * n + k] = (a[j * n + k] as number) * sj * (scale[k] as number);
      work[j * n + j] = (work[j * n + j] as number) + mu * (d2[j] as number) * sj * sj;
    }
    return cholesky(work, n) >= 0;
  }

  /**
   * Solves the factored damped system for the step `out` = argmin ‖J·h + f‖² + μ‖D·h‖², given Jᵀf
   * (Cholesky path) or the first n entries of Qᵀf (QR path).
   */
  function solve(useQr: boolean, jtf: Float64Array, qtf: Float64Array, out: Float64Array) {
    if (useQr) {
      for (let j = 0; j < n; j++) {
        augRhs[j] = -(qtf[j] as number);
        augRhs[n + j] = 0;
      }
      applyQt(aug, 2 * n, n, augBetas, augRhs);
      for (let j = n - 1; j >= 0; j--) {
        let s = augRhs[j] as number;
        for (let k = j + 1; k < n; k++) s -= (aug[j * n + k] as number) * (out[k] as number);
        out[j] = s / (augDiag[j] as number);
      }
      return;
    }
    for (let j = 0; j < n; j++) out[j] = -(jtf[j] as number) * (scale[j] as number);
    choleskySolve(work, n, out);
    for (let j = 0; j < n; j++) out[j] = (out[j] as number) * (scale[j] as number);
  }

  /** ‖J·h‖² from R (QR path) or from A = JᵀJ. */
  function jacobianNorm2(useQr: boolean, step: Float64Array): number {
    let s2 = 0;
    for (let j = 0; j < n; j++) {
      let s = 0;
      if (useQr) for (let k = j; k < n; k++) s += (rUpper[j * n + k] as number) * (step[k] as number);
      else for (let k = 0; k < n; k++) s += (a[j * n + k] as number) * (step[k] as number);
      s2 += useQr ? s * s : (step[j] as number) * s;
    }
    return s2;
  }

  /**
   * Geodesic acceleration (Transtrum & Sethna 2012, "Improvements to the Levenberg–Marquardt algorithm
   * for nonlinear least-squares minimization", arXiv:1201.5885): the second directional derivative of r
   * along v by a finite difference, then the correction a from the same damped system. Returns false when
   * ‖D·a‖ > maxRatio·‖D·v‖ (the step leaves the region where the quadratic model holds: reject it).
   */
  function accelerate(useQr: boolean): boolean {
    const f = fvv as Float64Array;
    const probe = rawProbe as Float64Array;
    for (let j = 0; j < n; j++) xNew[j] = (x[j] as number) + accelStep * (v[j] as number);
    problem.residuals(xNew, probe);
    nfev++;
    for (let i = 0; i < m; i++) {
      let jv = 0;
      for (let j = 0; j < n; j++) jv += (jacRows[i * n + j] as number) * (v[j] as number);
      const w = sw ? (sw[i] as number) : 1;
      f[i] = (2 / accelStep) * (((probe[i] as number) * w - (r[i] as number)) / accelStep - jv);
    }
    if (!Number.isFinite(f.reduce((s, value) => s + value, 0))) return false;
    if (useQr) {
      const q = qrVector as Float64Array;
      q.set(f);
      applyQt(qrWork as Float64Array, m, n, qrBetas, q);
      for (let j = 0; j < n; j++) cAccel[j] = q[j] as number;
    } else {
      gAccel.fill(0);
      for (let i = 0; i < m; i++) {
        const fi = f[i] as number;
        for (let j = 0; j < n; j++) gAccel[j] = (gAccel[j] as number) + (jacRows[i * n + j] as number) * fi;
      }
    }
    solve(useQr, gAccel, cAccel, acc);
    let an = 0;
    let vn = 0;
    for (let j = 0; j < n; j++) {
      an += (d2[j] as number) * (acc[j] as number) ** 2;
      vn += (d2[j] as number) * (v[j] as number) ** 2;
    }
    return Math.sqrt(an) <= accelRatio * Math.sqrt(vn);
  }

  let rss = evaluate(x, raw, r, jac);
  const result = (reason: LmReason, iterations: number): LmResult => {
    returnBuffers(raw, rawNew, r, rNew, jac, jacNew, jacT, jacRowsCopy, qrWork, qrVector);
    return {
      p: Float64Array.from(x),
      rss,
      iterations,
      nfev,
      njev,
      converged: reason === "ftol" || reason === "xtol" || reason === "gtol" || reason === "zero-residual",
      reason,
    };
  };
  if (Number.isNaN(rss)) return result("non-finite-start", 0);
  if (rss === 0) return result("zero-residual", 0);

  let nu = 2;
  for (let iteration = 0; ; iteration++) {
    if (iteration >= maxIterations) return result("max-iterations", iteration);
    // Jacobian of the weighted residuals (already at hand after a fused evaluation).
    // A fused evaluation's Jacobian is counted once per accepted point, like an analytic one.
    if (!fused) {
      if (problem.jacobian) problem.jacobian(x, jac);
      else nfev += finiteDifferenceJacobian(problem.residuals, x, m, jac, fdOptions, raw);
    }
    njev++;
    // A = JᵀJ and g = Jᵀr from the column-major Jacobian (see gram()): this is the O(m·n²) step.
    let columns: Float64Array;
    if (jacT === undefined) {
      if (sw) scaleColumns(jac, sw, m, n);
      columns = jac;
    } else {
      if (sw) scaleRows(jac, sw, m, n);
      transpose(jac, m, n, jacT);
      columns = jacT;
    }
    gram(columns, m, n, a);
    gradient(columns, r, m, n, g);
    for (let j = 0; j < n; j++) for (let k = 0; k < j; k++) a[j * n + k] = a[k * n + j] as number;
    if (!Number.isFinite(a.reduce((s, value) => s + value, 0))) {
      // A non-finite Jacobian cannot give a step; report it rather than return garbage as converged.
      return result("non-finite-start", iteration);
    }

    // Marquardt scaling (MINPACK: non-decreasing column norms; a zero column starts at scale 1).
    let gtolMeasure = 0;
    const rNorm = Math.sqrt(rss);
    for (let j = 0; j < n; j++) {
      const ajj = a[j * n + j] as number;
      d2[j] = Math.max(d2[j] as number, ajj > 0 ? ajj : iteration === 0 ? 1 : (d2[j] as number));
      scale[j] = ajj > 0 ? 1 / Math.sqrt(ajj) : 1;
      if (ajj > 0) gtolMeasure = Math.max(gtolMeasure, Math.abs(g[j] as number) / (Math.sqrt(ajj) * rNorm));
    }
    if (gtolMeasure <= gtol) return result("gtol", iteration);

    // Choose the linear algebra for this Jacobian.
    let useQr = solver === "qr";
    if (solver === "auto") {
      for (let j = 0; j < n; j++) {
        for (let k = 0; k < n; k++) {
          work[j * n + k] = (a[j * n + k] as number) * (scale[j] as number) * (scale[k] as number);
        }
      }
      const inverseCondition = cholesky(work, n);
      useQr = inverseCondition < 1 / conditionLimit;
    }
    if (jacT === undefined && (useQr || accel)) {
      jacRowsCopy ??= takeBuffer(m * n);
      untranspose(jac, m, n, jacRowsCopy);
      jacRows = jacRowsCopy;
    } else jacRows = jac;
    if (useQr) {
      qrWork ??= takeBuffer(m * n);
      qrVector ??= takeBuffer(m);
      qrWork.set(jacRows);
      householderQr(qrWork, m, n, rDiag, qrBetas);
      qrVector.set(r);
      applyQt(qrWork, m, n, qrBetas, qrVector);
      rUpper.fill(0);
      for (let j = 0; j < n; j++) {
        rUpper[j * n + j] = rDiag[j] as number;
        for (let k = j + 1; k < n; k++) rUpper[j * n + k] = qrWork[j * n + k] as number;
        c[j] = qrVector[j] as number;
      }
    }

    // Inner loop: raise the damping until a step lowers the RSS (or a stopping test fires).
    for (;;) {
      if (!factor(useQr)) {
        mu *= nu;
        nu *= 2;
        if (mu > 1e300) return result("damping-overflow", iteration);
        continue;
      }
      solve(useQr, g, c, v);
      // Predicted reduction of the linear model along the velocity: −2·vᵀg − ‖J·v‖².
      let vg = 0;
      for (let j = 0; j < n; j++) vg += (v[j] as number) * (g[j] as number);
      const predicted = -2 * vg - jacobianNorm2(useQr, v);
      let accelerationOk = true;
      if (accel) accelerationOk = accelerate(useQr);

      // Project, then measure the step actually taken.
      let stepRelative = 0;
      for (let j = 0; j < n; j++) {
        const xj = x[j] as number;
        const step = (v[j] as number) + (accel && accelerationOk ? 0.5 * (acc[j] as number) : 0);
        const xn = project(xj + step, j);
        xNew[j] = xn;
        h[j] = xn - xj;
        // Per parameter, like GSL's test |hⱼ| ≤ xtol·(|xⱼ| + xtol): MINPACK's ‖D·h‖ ≤ xtol·‖D·x‖ lets a
        // weakly determined parameter stop early when a well-determined one dominates the norm.
        // The floor √rss/Dⱼ (the change of pⱼ that moves the fit by one residual norm) stands in for |pⱼ| when
        // a parameter sits at zero.
        const floor = Math.sqrt(rss / (d2[j] as number));
        stepRelative = Math.max(stepRelative, Math.abs(h[j] as number) / (Math.abs(xj) + floor));
      }

      let rssNew = Number.NaN;
      if (accelerationOk) rssNew = evaluate(xNew, rawNew, rNew, jacNew);
      const actual = Number.isNaN(rssNew) ? Number.NEGATIVE_INFINITY : actualReduction(r, rNew, m);
      let rho = predicted > 0 ? actual / predicted : -1;
      // Near the optimum the actual reduction drowns in the evaluation noise of the residuals while the
      // linear model's prediction is still exact; there a step the model says is tiny is accepted unless it
      // visibly raises the RSS. Without this rule MGH09 and Thurber stall at 7–8 digits (as MINPACK does).
      const noise = MODEL_TRUST * rss;
      if (rho <= 0 && predicted > 0 && predicted <= noise && actual >= -noise) rho = 1;
      const rssOld = rss;
      const accepted = rho > 0;
      if (accepted) {
        x.set(xNew);
        [raw, rawNew] = [rawNew, raw];
        [r, rNew] = [rNew, r];
        if (fused) [jac, jacNew] = [jacNew, jac];
        rss = rssNew;
        mu *= Math.max(1 / 3, 1 - (2 * rho - 1) ** 3);
        nu = 2;
      } else {
        mu *= nu;
        nu *= 2;
      }

      if (rss === 0) return result("zero-residual", iteration + 1);
      if (Math.abs(actual) <= ftol * rssOld && predicted <= ftol * rssOld && rho <= 2) {
        return result("ftol", iteration + 1);
      }
      if (stepRelative <= xtol) return result("xtol", iteration + 1);
      if (nfev >= maxEvaluations) return result("max-evaluations", iteration + 1);
      if (mu > 1e300) return result("damping-overflow", iteration + 1);
      if (accepted) break;
    }
  }
}
