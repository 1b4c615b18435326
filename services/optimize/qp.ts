/**
 * Dense strictly convex quadratic programs through `quadprog` (Goldfarb & Idnani 1983 dual method).
 *
 * Traps of the library (LIBRARY-NOTES.md): arrays are 1-based, `Dmat` and `dvec` are overwritten on
 * every call (so they are built fresh here), failures come back in `message` rather than as
 * exceptions, and a problem with no constraint at all trips its dimension checks (a harmless
 * `0·d ≥ −1` row is added then). The library ships no types: it is loaded through `createRequire`
 * behind the small interface below.
 */
import { createRequire } from "node:module";

interface QuadprogResult {
  solution?: number[];
  Lagrangian?: number[];
  value?: number[];
  iact?: number[];
  iterations?: number[];
  message: string;
}
interface QuadprogModule {
  solveQP(Dmat: number[][], dvec: number[], Amat: number[][], bvec: number[], meq?: number): QuadprogResult;
}

const quadprog = createRequire(import.meta.url)("quadprog") as QuadprogModule;

/** Linear constraint rows `A·d (=|≥) b`, one row per constraint. */
export interface QpConstraints {
  /** Row-major coefficients, one array of length n per constraint. */
  rows: ReadonlyArray<ArrayLike<number>>;
  /** Right-hand sides, one per row. */
  rhs: ArrayLike<number>;
}

/**
 * minimize ½·dᵀHd + gᵀd subject to Aeq·d = beq, Ain·d ≥ bin, lower ≤ d ≤ upper.
 * H must be symmetric positive definite (the dual method needs its Cholesky factor).
 */
export interface QpProblem {
  /** Symmetric positive-definite n×n matrix H (row-major). */
  hessian: ReadonlyArray<ArrayLike<number>>;
  /** Linear term g (length n). */
  linear: ArrayLike<number>;
  /** Equality rows Aeq·d = beq; default none. */
  equalities?: QpConstraints;
  /** Inequality rows Ain·d ≥ bin; default none. */
  inequalities?: QpConstraints;
  /** Lower bounds on d; −Infinity (or omitted) for none. */
  lower?: ArrayLike<number>;
  /** Upper bounds on d; +Infinity (or omitted) for none. */
  upper?: ArrayLike<number>;
}

/** Outcome of {@link solveQp}. */
export type QpStatus = "optimal" | "inconsistent" | "not-convex" | "numerical-failure";

/**
 * Solution of a QP. Multipliers follow L = q(d) − λeqᵀ(Aeq·d − beq) − λinᵀ(Ain·d − bin)
 * − μloᵀ(d − lower) − μupᵀ(upper − d): inequality and bound multipliers are ≥ 0, and each one is the
 * rate of change of the optimal value when its right-hand side is raised (∂q* / ∂b; for the upper
 * bound, ∂q* / ∂upper = −μup).
 */
export interface QpResult {
  status: QpStatus;
  /** The minimizer (NaN-filled when the status is not optimal). */
  x: Float64Array;
  /** q(d) at the minimizer. */
  objective: number;
  equalityMultipliers: Float64Array;
  inequalityMultipliers: Float64Array;
  lowerMultipliers: Float64Array;
  upperMultipliers: Float64Array;
  /** The library's message when it failed; empty on success. */
  message: string;
}

/** Solves a dense strictly convex QP; never throws on a bad problem, the status says what went wrong. */
export function solveQp(problem: QpProblem): QpResult {
  const n = problem.linear.length;
  const eq = problem.equalities;
  const ineq = problem.inequalities;
  const mEq = eq?.rows.length ?? 0;
  const mIn = ineq?.rows.length ?? 0;
  const lowerIdx: number[] = [];
  const upperIdx: number[] = [];
  for (let j = 0; j < n; j++) {
    if (problem.lower !== undefined && Number.isFinite(problem.lower[j] ?? Number.NEGATIVE_INFINITY))
      lowerIdx.push(j);
    if (problem.upper !== undefined && Number.isFinite(problem.upper[j] ?? Number.POSITIVE_INFINITY))
      upperIdx.push(j);
  }
  const q = mEq + mIn + lowerIdx.length + upperIdx.length;
  const qCols = Math.max(q, 1);

  const Dmat: number[][] = [[]];
  const dvec: number[] = [0];
  const Amat: number[][] = [[]];
  for (let i = 0; i < n; i++) {
    const hRow = problem.hessian[i];
    const dRow: number[] = [0];
    for (let j = 0; j < n; j++) dRow.push(hRow?.[j] ?? Number.NaN);
    Dmat.push(dRow);
    dvec.push(-(problem.linear[i] ?? Number.NaN));
    const aRow = new Array<number>(qCols + 1).fill(0);
    Amat.push(aRow);
  }
  const bvec = new Array<number>(qCols + 1).fill(0);
  let col = 1;
  for (let k = 0; k < mEq; k++, col++) {
    const row = eq!.rows[k]!;
    for (let j = 0; j < n; j++) Amat[j + 1]![col] = row[j] ?? Number.NaN;
    bvec[col] = eq!.rhs[k] ?? Number.NaN;
  }
  for (let k = 0; k < mIn; k++, col++) {
    const row = ineq!.rows[k]!;
    for (let j = 0; j < n; j++) Amat[j + 1]![col] = row[j] ?? Number.NaN;
    bvec[col] = ineq!.rhs[k] ?? Number.NaN;
  }
  for (const j of lowerIdx) {
    Amat[j + 1]![col] = 1;
    bvec[col++] = problem.lower![j]!;
  }
  for (const j of upperIdx) {
    Amat[j + 1]![col] = -1;
    bvec[col++] = -problem.upper![j]!;
  }
  if (q === 0) bvec[1] = -1;

  const failed = (status: QpStatus, message: string): QpResult => ({
    status,
    x: new Float64Array(n).fill(Number.NaN),
    objective: Number.NaN,
    equalityMultipliers: new Float64Array(mEq),
    inequalityMultipliers: new Float64Array(mIn),
    lowerMultipliers: new Float64Array(n),
    upperMultipliers: new Float64Array(n),
    message,
  });

  let res: QuadprogResult;
  try {
    res = quadprog.solveQP(Dmat, dvec, Amat, bvec, mEq);
  } catch (err) {
    return failed("numerical-failure", `quadprog threw: ${String(err)}`);
  }
  if (res.message !== "") {
    if (res.message.includes("inconsistent")) return failed("inconsistent", res.message);
    if (res.message.includes("positive definite")) return failed("not-convex", res.message);
    return failed("numerical-failure", res.message);
  }
  const x = new Float64Array(n);
  for (let j = 0; j < n; j++) x[j] = res.solution?.[j + 1] ?? Number.NaN;
  if (!x.every(Number.isFinite))
    return failed("numerical-failure", "quadprog returned a non-finite solution");
  const lag = res.Lagrangian ?? [];
  const equalityMultipliers = new Float64Array(mEq);
  const inequalityMultipliers = new Float64Array(mIn);
  const lowerMultipliers = new Float64Array(n);
  const upperMultipliers = new Float64Array(n);
  col = 1;
  for (let k = 0; k < mEq; k++) equalityMultipliers[k] = lag[col++] ?? 0;
  for (let k = 0; k < mIn; k++) inequalityMultipliers[k] = lag[col++] ?? 0;
  for (const j of lowerIdx) lowerMultipliers[j] = lag[col++] ?? 0;
  for (const j of upperIdx) upperMultipliers[j] = lag[col++] ?? 0;
  let objective = 0;
  for (let i = 0; i < n; i++) {
    const hRow = problem.hessian[i]!;
    let hx = 0;
    for (let j = 0; j < n; j++) hx += (hRow[j] ?? 0) * x[j]!;
    objective += x[i]! * (0.5 * hx + (problem.linear[i] ?? 0));
  }
  return {
    status: "optimal",
    x,
    objective,
    equalityMultipliers,
    inequalityMultipliers,
    lowerMultipliers,
    upperMultipliers,
    message: "",
  };
}
