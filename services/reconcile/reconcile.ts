/**
 * Linear data reconciliation: weighted least squares under linear balances A·x = b, with unmeasured
 * variables eliminated by projection, then the gross-error tests and serial elimination.
 *
 * Method: Narasimhan, S. & Jordache, C. (2000), "Data Reconciliation and Gross Error Detection",
 * ch. 3: x̂ = y − V·Aᵀ·(A·V·Aᵀ)⁻¹·(A·y − b), Cov(x̂) = V − V·Aᵀ·(A·V·Aᵀ)⁻¹·A·V. Unmeasured variables:
 * Crater & Mah (1987) projection, a matrix P with P·A_u = 0 built here from an SVD (ml-matrix).
 *
 * Pure: no clock, no bus. The hot path (everything measured) works on Float64Arrays and allocates a few
 * buffers per call, because a cycle may reconcile many times during serial elimination.
 */
import { SingularValueDecomposition } from "ml-matrix";
import { ReconcileError } from "./errors.js";
import {
  type GlobalTest,
  globalTest,
  type MeasurementTest,
  measurementTests,
  type NodalTest,
  nodalTests,
  serialElimination,
} from "./gross-errors.js";

/** A linear reconciliation problem: balances A·x = b over n variables, some of them measured. */
export interface LinearProblem {
  /** Balance matrix, m rows (balances) × n columns (variables); rows must be linearly independent. */
  readonly A: readonly (readonly number[])[];
  /** Right-hand side, m entries, in the balance's unit. Default: zeros (conservation balances). */
  readonly b?: readonly number[];
  /** Measured values, n entries, in each variable's unit; entries of unmeasured variables are ignored. */
  readonly y: readonly number[];
  /** Measurement standard deviations, n entries, same units as y, > 0 for measured variables. */
  readonly sigma: readonly number[];
  /** Which variables are measured. Default: all. */
  readonly measured?: readonly boolean[];
  /** Variable names (tags), n entries. Default: "x0", "x1", … */
  readonly names?: readonly string[];
  /** Balance names, m entries. Default: "balance 0", "balance 1", … */
  readonly balanceNames?: readonly string[];
}

/** Options of {@link reconcileLinear}. */
export interface ReconcileOptions {
  /** Family-wise significance level of every test (global, measurement, nodal). Default 0.05. */
  readonly alpha?: number;
  /** Most measurements serial elimination may remove; 0 turns it off. Default: no limit but redundancy. */
  readonly maxEliminations?: number;
  /** Also return the covariance matrix of the estimates. Default false. */
  readonly covariance?: boolean;
}

/** One suspected gross error found by serial elimination. */
export interface GrossError {
  /** Variable name (tag). */
  readonly name: string;
  /** Variable index in the problem. */
  readonly index: number;
  /** Measured minus reconciled value after all eliminations, in the variable's unit. */
  readonly estimatedSize: number;
  /** Standard deviation of that estimate (measurement σ and estimate σ combined), same unit. */
  readonly estimatedSizeSd: number;
  /** Measurement-test statistic |z| when the measurement was removed. */
  readonly statistic: number;
  /** Other measurements whose statistic tied with this one (indistinguishable on this network). */
  readonly tiedWith: readonly string[];
}

/** Covariance of the estimates over the variables that have an estimate. */
export interface EstimateCovariance {
  /** Variable indices, in matrix order: measured ones and observable unmeasured ones. */
  readonly indices: readonly number[];
  /** Covariance matrix, units of the two variables multiplied. */
  readonly matrix: readonly (readonly number[])[];
}

/** Result of {@link reconcileLinear}; "value" arrays follow the variable order of the problem. */
export interface ReconcileResult {
  readonly names: readonly string[];
  /** Reconciled values (measured) and estimates (observable unmeasured); null where unobservable. */
  readonly values: readonly (number | null)[];
  /** Standard deviations of those values; null where unobservable. */
  readonly sds: readonly (number | null)[];
  /** Measured minus reconciled, for variables measured at the end; null otherwise. */
  readonly adjustments: readonly (number | null)[];
  /** Which variables are treated as measured at the end (eliminated ones are not). */
  readonly measured: readonly boolean[];
  /** Global test of the final reconciliation. */
  readonly globalTest: GlobalTest;
  /** Global test before any elimination. */
  readonly initialGlobalTest: GlobalTest;
  /** Measurement tests of the final reconciliation, one per redundant measurement. */
  readonly measurementTests: readonly MeasurementTest[];
  /** Nodal tests of the final reconciliation, one per (reduced) balance. */
  readonly nodalTests: readonly NodalTest[];
  /** Suspected gross errors, in the order serial elimination removed them. */
  readonly grossErrors: readonly GrossError[];
  /** Names of the eliminated measurements (same order as grossErrors). */
  readonly eliminated: readonly string[];
  readonly observability: {
    /** Unmeasured variables that the balances determine. */
    readonly observable: readonly string[];
    /** Unmeasured variables that the balances leave free. */
    readonly unobservable: readonly string[];
  };
  readonly redundancy: {
    /** Measured variables that the balances would determine without their own measurement. */
    readonly redundant: readonly string[];
    /** Measured variables that no balance checks (they pass unchanged). */
    readonly nonRedundant: readonly string[];
  };
  /** Present when options.covariance is true. */
  readonly covariance?: EstimateCovariance;
}

/** A validated problem in flat arrays (row-major A). */
export interface Prepared {
  readonly n: number;
  readonly m: number;
  readonly A: Float64Array;
  readonly b: Float64Array;
  readonly y: Float64Array;
  readonly variance: Float64Array;
  readonly names: readonly string[];
  readonly balanceNames: readonly string[];
  readonly measured: readonly boolean[];
}

/** The numbers one weighted least-squares solve produces; the tests are computed from these. */
export interface CoreSolution {
  readonly measured: readonly boolean[];
  /** Estimate per variable; meaningful where `known`. */
  readonly values: Float64Array;
  /** Variance per variable; meaningful where `known`. */
  readonly variances: Float64Array;
  /** Measured, or unmeasured and observable. */
  readonly known: readonly boolean[];
  /** Measured and checked by at least one (reduced) balance. */
  readonly redundant: readonly boolean[];
  /** Degrees of freedom of the global test: the number of independent reduced balances. */
  readonly dof: number;
  /** rᵀ(A·V·Aᵀ)⁻¹r on the reduced balances. */
  readonly gamma: number;
  /** Maximum-power measurement statistic per variable; NaN where not redundant (internal only). */
  readonly measurementStatistic: Float64Array;
  /** Per reduced balance: the original balance (or null for a combination), its weights, its |z|. */
  readonly nodal: readonly { balance: number | null; weights: Float64Array; statistic: number }[];
  readonly covariance?: EstimateCovariance;
}

// Relative pivot below which A·V·Aᵀ counts as singular: a condition number beyond ~1e12 means the
// balance set is dependent up to rounding, and the estimates would be noise.
const PIVOT_TOLERANCE = 1e-12;
// Relative singular value below which a direction counts as null (rank decisions on scaled columns).
const RANK_TOLERANCE = 1e-10;
// Fraction of a measurement's variance that reconciliation must remove for it to count as redundant.
const REDUNDANCY_TOLERANCE = 1e-9;

/** Checks sizes and values and copies the problem into flat arrays. Throws RECONCILE_INPUT_INVALID. */
export function prepareProblem(problem: LinearProblem): Prepared {
  const m = problem.A.length;
  const n = problem.y.length;
  const bad = (message: string): never => {
    throw new ReconcileError("RECONCILE_INPUT_INVALID", message);
  };
  if (n === 0) bad("the problem has no variables (y is empty)");
  if (problem.sigma.length !== n) bad(`sigma has ${problem.sigma.length} entries, y has ${n}`);
  if (problem.measured && problem.measured.length !== n)
    bad(`measured has ${problem.measured.length} entries, y has ${n}`);
  if (problem.names && problem.names.length !== n)
    bad(`names has ${problem.names.length} entries, y has ${n}`);
  if (problem.b && problem.b.length !== m) bad(`b has ${problem.b.length} entries, A has ${m} rows`);
  if (problem.balanceNames && problem.balanceNames.length !== m)
    bad(`balanceNames has ${problem.balanceNames.length} entries, A has ${m} rows`);
  const names = problem.names ? [...problem.names] : Array.from({ length: n }, (_, j) => `x${j}`);
  const balanceNames = problem.balanceNames
    ? [...problem.balanceNames]
    : Array.from({ length: m }, (_, i) => `balance ${i}`);
  const measured = problem.measured ? [...problem.measured] : new Array<boolean>(n).fill(true);
  const A = new Float64Array(m * n);
  for (let i = 0; i < m; i++) {
    const row = problem.A[i]!;
    if (row.length !== n) bad(`A row ${i} (${balanceNames[i]}) has ${row.length} entries, y has ${n}`);
    for (let j = 0; j < n; j++) {
      const v = row[j]!;
      if (!Number.isFinite(v)) bad(`A[${i}][${j}] (${balanceNames[i]}, ${names[j]}) is not finite`);
      A[i * n + j] = v;
    }
  }
  const b = new Float64Array(m);
  for (let i = 0; i < m; i++) {
    const v = problem.b?.[i] ?? 0;
    if (!Number.isFinite(v)) bad(`b[${i}] (${balanceNames[i]}) is not finite`);
    b[i] = v;
  }
  const y = new Float64Array(n);
  const variance = new Float64Array(n);
  for (let j = 0; j < n; j++) {
    if (!measured[j]) continue;
    const v = problem.y[j]!;
    const s = problem.sigma[j]!;
    if (!Number.isFinite(v)) bad(`measured value of ${names[j]} is not finite`);
    if (!(Number.isFinite(s) && s > 0)) bad(`sigma of ${names[j]} must be finite and > 0 (got ${s})`);
    y[j] = v;
    variance[j] = s * s;
  }
  return { n, m, A, b, y, variance, names, balanceNames, measured };
}

/** In-place Cholesky of a p×p symmetric matrix (row-major, lower triangle used); false if not PD. */
function cholesky(H: Float64Array, p: number): boolean {
  for (let j = 0; j < p; j++) {
    const hjj = H[j * p + j]!;
    let d = hjj;
    for (let k = 0; k < j; k++) d -= H[j * p + k]! ** 2;
    // A pivot tiny against its own diagonal means this row is (nearly) a combination of earlier ones.
    if (!(d > PIVOT_TOLERANCE * hjj)) return false;
    const l = Math.sqrt(d);
    H[j * p + j] = l;
    for (let i = j + 1; i < p; i++) {
      let s = H[i * p + j]!;
      for (let k = 0; k < j; k++) s -= H[i * p + k]! * H[j * p + k]!;
      H[i * p + j] = s / l;
    }
  }
  return true;
}

/** Forward substitution L·x = v in place (L lower, row-major p×p). */
function forward(L: Float64Array, p: number, v: Float64Array): void {
  for (let i = 0; i < p; i++) {
    let s = v[i]!;
    for (let k = 0; k < i; k++) s -= L[i * p + k]! * v[k]!;
    v[i] = s / L[i * p + i]!;
  }
}

/** Back substitution Lᵀ·x = v in place. */
function backward(L: Float64Array, p: number, v: Float64Array): void {
  for (let i = p - 1; i >= 0; i--) {
    let s = v[i]!;
    for (let k = i + 1; k < p; k++) s -= L[k * p + i]! * v[k]!;
    v[i] = s / L[i * p + i]!;
  }
}

/** SVD of an r×c matrix padded with zero rows to at least c rows (ml-matrix wants rows ≥ columns). */
function svdPadded(M: number[][], c: number): SingularValueDecomposition {
  const rows = M.map((r) => [...r]);
  while (rows.length < c) rows.push(new Array<number>(c).fill(0));
  return new SingularValueDecomposition(rows, { autoTranspose: false });
}

/** Orthonormal basis of the null space {v : M·v = 0} of an r×c matrix, as columns (c × k). */
function nullSpace(M: number[][], c: number): number[][] {
  if (c === 0) return [];
  const svd = svdPadded(M, c);
  const s = svd.diagonal;
  const smax = s[0] ?? 0;
  const V = svd.rightSingularVectors;
  const basis: number[][] = [];
  for (let k = 0; k < c; k++) {
    if ((s[k] ?? 0) <= RANK_TOLERANCE * smax || smax === 0) basis.push(V.getColumn(k));
  }
  return basis;
}

/** Throws RECONCILE_RANK_DEFICIENT naming the balances of one dependent combination. */
function rankDeficient(prep: Prepared): never {
  const { n, m, A, balanceNames } = prep;
  const At: number[][] = Array.from({ length: n }, (_, j) =>
    Array.from({ length: m }, (_, i) => A[i * n + j]!),
  );
  const combos = nullSpace(At, m);
  const w = combos[0];
  if (!w) {
    throw new ReconcileError(
      "RECONCILE_RANK_DEFICIENT",
      "the balances are too close to dependent (A·V·Aᵀ is ill-conditioned beyond 1e12): check the balance coefficients and units",
    );
  }
  const wmax = Math.max(...w.map(Math.abs));
  const involved = balanceNames.filter((_, i) => Math.abs(w[i]!) > 1e-8 * wmax);
  throw new ReconcileError(
    "RECONCILE_RANK_DEFICIENT",
    `the balances ${involved.join(", ")} are linearly dependent (one is a combination of the others): remove one of them`,
    { balances: involved },
  );
}

/**
 * One weighted least-squares solve with the given measured set: projection of the unmeasured
 * variables, reconciled values, variances, the statistics of every test. Throws RECONCILE_RANK_DEFICIENT.
 */
export function solveCore(
  prep: Prepared,
  measured: readonly boolean[],
  wantCovariance = false,
): CoreSolution {
  const { n, m, A, b, y, variance } = prep;
  const xIdx: number[] = [];
  const uIdx: number[] = [];
  for (let j = 0; j < n; j++) (measured[j] ? xIdx : uIdx).push(j);
  const nx = xIdx.length;
  const nu = uIdx.length;

  // Reduced balances Ar·x = br over the measured variables only; rows untouched by unmeasured variables
  // are kept as they are so their nodal tests still name a real balance.
  let Ar: Float64Array;
  let br: Float64Array;
  let nodalMeta: { balance: number | null; weights: Float64Array }[];
  let projection: Projection | null = null;
  if (nu === 0) {
    Ar = new Float64Array(m * nx);
    for (let i = 0; i < m; i++) for (let k = 0; k < nx; k++) Ar[i * nx + k] = A[i * n + xIdx[k]!]!;
    br = b;
    nodalMeta = Array.from({ length: m }, (_, i) => {
      const w = new Float64Array(m);
      w[i] = 1;
      return { balance: i, weights: w };
    });
  } else {
    projection = project(prep, xIdx, uIdx);
    Ar = projection.Ar;
    br = projection.br;
    nodalMeta = projection.rows;
  }
  const p = nodalMeta.length;

  // Work on scaled columns B = Ar·diag(σ): H = B·Bᵀ = Ar·V·Arᵀ, and every later product is a dot
  // product of contiguous rows (this loop is the hot path of serial elimination).
  const B = new Float64Array(p * nx);
  const sd = new Float64Array(nx);
  for (let c = 0; c < nx; c++) sd[c] = Math.sqrt(variance[xIdx[c]!]!);
  for (let i = 0; i < p; i++) for (let c = 0; c < nx; c++) B[i * nx + c] = Ar[i * nx + c]! * sd[c]!;
  const H = new Float64Array(p * p);
  for (let i = 0; i < p; i++) {
    for (let k = 0; k <= i; k++) {
      let s = 0;
      for (let c = 0, ri = i * nx, rk = k * nx; c < nx; c++) s += B[ri + c]! * B[rk + c]!;
      H[i * p + k] = s;
      H[k * p + i] = s;
    }
  }
  const hDiag = new Float64Array(p);
  for (let i = 0; i < p; i++) hDiag[i] = H[i * p + i]!;
  // Cholesky failure is the rank test of the whole balance set (see project()).
  if (!cholesky(H, p)) rankDeficient(prep);

  // r = Ar·y − br, λ = H⁻¹·r, γ = rᵀλ = |L⁻¹r|².
  const r = new Float64Array(p);
  for (let i = 0; i < p; i++) {
    let s = -br[i]!;
    for (let c = 0; c < nx; c++) s += Ar[i * nx + c]! * y[xIdx[c]!]!;
    r[i] = s;
  }
  const lambda = Float64Array.from(r);
  forward(H, p, lambda);
  let gamma = 0;
  for (let i = 0; i < p; i++) gamma += lambda[i]! ** 2;
  backward(H, p, lambda);

  // G = L⁻¹·B row by row, so diag(GᵀG)_j = σ_j²·W_jj with W = Arᵀ·H⁻¹·Ar: the fraction of measurement
  // j's variance that reconciliation removes.
  const G = new Float64Array(p * nx);
  for (let i = 0; i < p; i++) {
    const gi = i * nx;
    for (let c = 0; c < nx; c++) G[gi + c] = B[gi + c]!;
    for (let k = 0; k < i; k++) {
      const lik = H[i * p + k]!;
      if (lik === 0) continue;
      for (let c = 0, gk = k * nx; c < nx; c++) G[gi + c]! -= lik * G[gk + c]!;
    }
    const lii = H[i * p + i]!;
    for (let c = 0; c < nx; c++) G[gi + c]! /= lii;
  }
  const dScaled = new Float64Array(nx);
  const reduction = new Float64Array(nx);
  for (let i = 0; i < p; i++) {
    const li = lambda[i]!;
    for (let c = 0, gi = i * nx; c < nx; c++) {
      dScaled[c]! += B[gi + c]! * li;
      reduction[c]! += G[gi + c]! ** 2;
    }
  }

  const values = new Float64Array(n);
  const variances = new Float64Array(n);
  const known = new Array<boolean>(n).fill(false);
  const redundant = new Array<boolean>(n).fill(false);
  const mt = new Float64Array(n).fill(Number.NaN);
  for (let c = 0; c < nx; c++) {
    const j = xIdx[c]!;
    const v = variance[j]!;
    const rho = reduction[c]!;
    values[j] = y[j]! - sd[c]! * dScaled[c]!;
    variances[j] = Math.max(0, v * (1 - rho));
    known[j] = true;
    if (rho > REDUNDANCY_TOLERANCE) {
      redundant[j] = true;
      // Maximum-power test (Mah & Tamhane 1982): |d_j|/sqrt(W_jj) with d = Arᵀ·H⁻¹·r; σ_j cancels.
      mt[j] = Math.abs(dScaled[c]!) / Math.sqrt(rho);
    }
  }
  const nodal = nodalMeta.map((meta, i) => ({ ...meta, statistic: Math.abs(r[i]!) / Math.sqrt(hDiag[i]!) }));

  let covX: Float64Array | null = null;
  if (wantCovariance || nu > 0) {
    // Cov(x̂) = V − V·Arᵀ·H⁻¹·Ar·V = diag(σ)·(I − GᵀG)·diag(σ) over the measured variables.
    covX = new Float64Array(nx * nx);
    for (let a = 0; a < nx; a++) {
      for (let c = 0; c <= a; c++) {
        let s = 0;
        for (let i = 0; i < p; i++) s += G[i * nx + a]! * G[i * nx + c]!;
        const e = sd[a]! * ((a === c ? 1 : 0) - s) * sd[c]!;
        covX[a * nx + c] = e;
        covX[c * nx + a] = e;
      }
    }
  }
  let covariance: EstimateCovariance | undefined;
  if (projection && covX) {
    const est = estimateUnmeasured(prep, projection, xIdx, uIdx, values, covX, wantCovariance);
    for (let k = 0; k < nu; k++) {
      const j = uIdx[k]!;
      if (!projection.observable[k]) continue;
      known[j] = true;
      values[j] = est.values[k]!;
      variances[j] = Math.max(0, est.variances[k]!);
    }
    covariance = est.covariance;
  } else if (covX && wantCovariance) {
    const matrix = Array.from({ length: nx }, (_, a) => Array.from(covX.subarray(a * nx, (a + 1) * nx)));
    covariance = { indices: xIdx, matrix };
  }
  return {
    measured: [...measured],
    values,
    variances,
    known,
    redundant,
    dof: p,
    gamma,
    measurementStatistic: mt,
    nodal,
    ...(covariance ? { covariance } : {}),
  };
}

interface Projection {
  readonly Ar: Float64Array;
  readonly br: Float64Array;
  readonly rows: { balance: number | null; weights: Float64Array }[];
  /** Per unmeasured variable (order of uIdx): determined by the balances? */
  readonly observable: readonly boolean[];
  /** Rows of A that involve unmeasured variables. */
  readonly sRows: readonly number[];
  /** Pseudo-inverse of the column-scaled A_u[S] (nu × |S|), column scales folded back in. */
  readonly pinv: Float64Array;
}

/**
 * Crater–Mah projection: P spans the left null space of A_u, so P·A_x·x = P·b no longer holds the
 * unmeasured variables. Rows of A without unmeasured variables are kept; the rest (S) are combined with
 * the left null vectors of A_u[S]. If A has full row rank, P·A_x has full row rank too, so a singular
 * H later means a dependent balance set. Columns of A_u are scaled to unit norm first, so rank and
 * observability do not depend on the variables' units.
 */
function project(prep: Prepared, xIdx: readonly number[], uIdx: readonly number[]): Projection {
  const { n, m, A, b } = prep;
  const nx = xIdx.length;
  const nu = uIdx.length;
  const sRows: number[] = [];
  const kRows: number[] = [];
  for (let i = 0; i < m; i++) (uIdx.some((j) => A[i * n + j] !== 0) ? sRows : kRows).push(i);
  const ns = sRows.length;
  const colScale = uIdx.map((j) => Math.sqrt(sRows.reduce((s, i) => s + A[i * n + j]! ** 2, 0)) || 1);
  const Au = sRows.map((i) => uIdx.map((j, k) => A[i * n + j]! / colScale[k]!));

  const svd = svdPadded(Au, nu);
  const sv = svd.diagonal;
  const smax = sv[0] ?? 0;
  let rank = 0;
  for (const s of sv) if (s > RANK_TOLERANCE * smax) rank++;
  const U = svd.leftSingularVectors;
  const Vr = svd.rightSingularVectors;

  // Observable: the unmeasured variable's row of the null-space basis of A_u is zero.
  const observable = uIdx.map((_, k) => {
    let s = 0;
    for (let c = rank; c < nu; c++) s += Vr.get(k, c) ** 2;
    return Math.sqrt(s) < 1e-8;
  });

  // Pseudo-inverse of the scaled A_u[S], unscaled: u = D⁻¹·V_r·Σ⁻¹·U_rᵀ·rhs_S.
  const pinv = new Float64Array(nu * ns);
  for (let k = 0; k < nu; k++) {
    for (let i = 0; i < ns; i++) {
      let s = 0;
      for (let c = 0; c < rank; c++) s += (Vr.get(k, c) * U.get(i, c)) / sv[c]!;
      pinv[k * ns + i] = s / colScale[k]!;
    }
  }

  const leftNull = nullSpace(
    Array.from({ length: nu }, (_, k) => Au.map((row) => row[k]!)),
    ns,
  );
  const rows: { balance: number | null; weights: Float64Array }[] = [];
  for (const i of kRows) {
    const w = new Float64Array(m);
    w[i] = 1;
    rows.push({ balance: i, weights: w });
  }
  for (const z of leftNull) {
    const w = new Float64Array(m);
    for (let q = 0; q < ns; q++) w[sRows[q]!] = z[q]!;
    rows.push({ balance: null, weights: w });
  }
  const p = rows.length;
  const Ar = new Float64Array(p * nx);
  const br = new Float64Array(p);
  for (let r = 0; r < p; r++) {
    const w = rows[r]!.weights;
    let sb = 0;
    for (let i = 0; i < m; i++) {
      const wi = w[i]!;
      if (wi === 0) continue;
      sb += wi * b[i]!;
      for (let c = 0; c < nx; c++) Ar[r * nx + c]! += wi * A[i * n + xIdx[c]!]!;
    }
    br[r] = sb;
  }
  return { Ar, br, rows, observable, sRows, pinv };
}

/** u = A_u⁺·(b − A_x·x̂) on the rows S, with the covariance that x̂ carries into u. */
function estimateUnmeasured(
  prep: Prepared,
  proj: Projection,
  xIdx: readonly number[],
  uIdx: readonly number[],
  values: Float64Array,
  covX: Float64Array,
  wantCovariance: boolean,
): { values: Float64Array; variances: Float64Array; covariance?: EstimateCovariance } {
  const { n, A, b } = prep;
  const nx = xIdx.length;
  const nu = uIdx.length;
  const ns = proj.sRows.length;
  const rhs = new Float64Array(ns);
  for (let q = 0; q < ns; q++) {
    const i = proj.sRows[q]!;
    let s = b[i]!;
    for (let c = 0; c < nx; c++) s -= A[i * n + xIdx[c]!]! * values[xIdx[c]!]!;
    rhs[q] = s;
  }
  // C = −A_u⁺·A_x[S] maps x̂ to u, so Cov(u) = C·Cov(x̂)·Cᵀ and Cov(u, x̂) = C·Cov(x̂).
  const C = new Float64Array(nu * nx);
  const u = new Float64Array(nu);
  for (let k = 0; k < nu; k++) {
    let s = 0;
    for (let q = 0; q < ns; q++) s += proj.pinv[k * ns + q]! * rhs[q]!;
    u[k] = s;
    for (let c = 0; c < nx; c++) {
      let t = 0;
      for (let q = 0; q < ns; q++) t -= proj.pinv[k * ns + q]! * A[proj.sRows[q]! * n + xIdx[c]!]!;
      C[k * nx + c] = t;
    }
  }
  const CS = new Float64Array(nu * nx);
  for (let k = 0; k < nu; k++)
    for (let c = 0; c < nx; c++) {
      let s = 0;
      for (let e = 0; e < nx; e++) s += C[k * nx + e]! * covX[e * nx + c]!;
      CS[k * nx + c] = s;
    }
  const covU = new Float64Array(nu * nu);
  for (let k = 0; k < nu; k++)
    for (let l = 0; l <= k; l++) {
      let s = 0;
      for (let c = 0; c < nx; c++) s += CS[k * nx + c]! * C[l * nx + c]!;
      covU[k * nu + l] = s;
      covU[l * nu + k] = s;
    }
  const variances = new Float64Array(nu);
  for (let k = 0; k < nu; k++) variances[k] = covU[k * nu + k]!;
  if (!wantCovariance) return { values: u, variances };

  const obs = uIdx.map((_, k) => k).filter((k) => proj.observable[k]);
  const indices = [...xIdx, ...obs.map((k) => uIdx[k]!)];
  const size = indices.length;
  const matrix = Array.from({ length: size }, () => new Array<number>(size).fill(0));
  for (let a = 0; a < nx; a++) for (let c = 0; c < nx; c++) matrix[a]![c] = covX[a * nx + c]!;
  obs.forEach((k, ka) => {
    for (let c = 0; c < nx; c++) {
      matrix[nx + ka]![c] = CS[k * nx + c]!;
      matrix[c]![nx + ka] = CS[k * nx + c]!;
    }
    obs.forEach((l, la) => {
      matrix[nx + ka]![nx + la] = covU[k * nu + l]!;
    });
  });
  return { values: u, variances, covariance: { indices, matrix } };
}

/**
 * Reconciles measurements against linear balances A·x = b by weighted least squares, tests for gross
 * errors (global χ², maximum-power measurement tests and nodal tests, Šidák-corrected) and, while the
 * global test fails, removes the measurement with the largest measurement statistic (serial
 * elimination) until the test passes or no redundancy remains.
 *
 * Throws ReconcileError RECONCILE_INPUT_INVALID (malformed problem) or RECONCILE_RANK_DEFICIENT
 * (dependent balances). Never returns NaN: values that cannot be determined are null.
 */
export function reconcileLinear(problem: LinearProblem, options: ReconcileOptions = {}): ReconcileResult {
  const prep = prepareProblem(problem);
  return reconcilePrepared(prep, options);
}

/** {@link reconcileLinear} on an already prepared problem (the bilinear solver re-uses it). */
export function reconcilePrepared(prep: Prepared, options: ReconcileOptions = {}): ReconcileResult {
  const alpha = options.alpha ?? 0.05;
  if (!(alpha > 0 && alpha < 1)) {
    throw new ReconcileError("RECONCILE_INPUT_INVALID", `alpha must lie in (0, 1) (got ${alpha})`);
  }
  const wantCov = options.covariance ?? false;
  const run = serialElimination((measured) => solveCore(prep, measured, false), prep.measured, {
    alpha,
    maxEliminations: options.maxEliminations ?? Number.POSITIVE_INFINITY,
  });
  const core = wantCov ? solveCore(prep, run.final.measured, true) : run.final;
  return summarize(prep, core, run.initialGamma, run.initialDof, run.removed, alpha);
}

/** Turns a core solution into the public result (nulls instead of NaN, names instead of indices). */
export function summarize(
  prep: Prepared,
  core: CoreSolution,
  initialGamma: number,
  initialDof: number,
  removed: readonly { index: number; statistic: number; tiedWith: readonly number[] }[],
  alpha: number,
): ReconcileResult {
  const { n, names, y, variance } = prep;
  const values: (number | null)[] = [];
  const sds: (number | null)[] = [];
  const adjustments: (number | null)[] = [];
  for (let j = 0; j < n; j++) {
    values.push(core.known[j] ? core.values[j]! : null);
    sds.push(core.known[j] ? Math.sqrt(core.variances[j]!) : null);
    adjustments.push(core.measured[j] ? y[j]! - core.values[j]! : null);
  }
  const grossErrors: GrossError[] = removed.map((e) => {
    const j = e.index;
    // The removed measurement is independent of the estimate that replaced it, so the variances add.
    return {
      name: names[j]!,
      index: j,
      estimatedSize: y[j]! - core.values[j]!,
      estimatedSizeSd: Math.sqrt(variance[j]! + core.variances[j]!),
      statistic: e.statistic,
      tiedWith: e.tiedWith.map((k) => names[k]!),
    };
  });
  const observable: string[] = [];
  const unobservable: string[] = [];
  const redundant: string[] = [];
  const nonRedundant: string[] = [];
  for (let j = 0; j < n; j++) {
    if (prep.measured[j]) (core.redundant[j] || !core.measured[j] ? redundant : nonRedundant).push(names[j]!);
    else (core.known[j] ? observable : unobservable).push(names[j]!);
  }
  return {
    names,
    values,
    sds,
    adjustments,
    measured: core.measured,
    globalTest: globalTest(core.gamma, core.dof, alpha),
    initialGlobalTest: globalTest(initialGamma, initialDof, alpha),
    measurementTests: measurementTests(core, names, alpha),
    nodalTests: nodalTests(core, prep.balanceNames, alpha),
    grossErrors,
    eliminated: grossErrors.map((g) => g.name),
    observability: { observable, unobservable },
    redundancy: { redundant, nonRedundant },
    ...(core.covariance ? { covariance: core.covariance } : {}),
  };
}
