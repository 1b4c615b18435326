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

/** Options of {@link solveQp}. */
export interface QpOptions {
  /**
   * Which implementation: "dual" (default) is the Goldfarb–Idnani dual active-set method written here
   * on flat typed arrays; "quadprog" is the same method in the npm package, kept as the reference the
   * tests compare against. The package builds 1-based nested arrays and closures on every call: inside
   * the SQP on Williams–Otto it took 61 % of the solve time, the typed-array version a small fraction.
   */
  method?: "dual" | "quadprog";
  /** Iteration limit of the dual method (constraint additions and drops). Default 10·(n + constraints). */
  maxIterations?: number;
}

/** Solves a dense strictly convex QP; never throws on a bad problem, the status says what went wrong. */
export function solveQp(problem: QpProblem, options: QpOptions = {}): QpResult {
  return options.method === "quadprog" ? solveWithQuadprog(problem) : solveDual(problem, options);
}

function failedResult(n: number, mEq: number, mIn: number, status: QpStatus, message: string): QpResult {
  return {
    status,
    x: new Float64Array(n).fill(Number.NaN),
    objective: Number.NaN,
    equalityMultipliers: new Float64Array(mEq),
    inequalityMultipliers: new Float64Array(mIn),
    lowerMultipliers: new Float64Array(n),
    upperMultipliers: new Float64Array(n),
    message,
  };
}

/** An optimal result at `x` with the given multipliers. */
function optimalResult(
  problem: QpProblem,
  x: Float64Array,
  multipliers: Pick<
    QpResult,
    "equalityMultipliers" | "inequalityMultipliers" | "lowerMultipliers" | "upperMultipliers"
  >,
): QpResult {
  return { status: "optimal", x, objective: objectiveAt(problem, x), ...multipliers, message: "" };
}

function objectiveAt(problem: QpProblem, x: Float64Array): number {
  const n = x.length;
  let objective = 0;
  for (let i = 0; i < n; i++) {
    const hRow = problem.hessian[i]!;
    let hx = 0;
    for (let j = 0; j < n; j++) hx += (hRow[j] ?? 0) * x[j]!;
    objective += x[i]! * (0.5 * hx + (problem.linear[i] ?? 0));
  }
  return objective;
}

/**
 * The dual active-set method of Goldfarb & Idnani (1983, "A numerically stable dual method for solving
 * strictly convex quadratic programs", Math. Programming 27:1–33): start at the unconstrained minimum
 * and add violated constraints one at a time, dropping active ones whose multiplier would turn
 * negative, so that every iterate is dual feasible and no feasible start point is needed.
 *
 * With H = L·Lᵀ, the method keeps J = L⁻ᵀ·Q and an upper-triangular R with Jᵀ·N_A = [R; 0] for the
 * active normals N_A, updated by Givens rotations on every addition and drop. Constraints are stored as
 * nᵢᵀ·d ≥ bᵢ; an equality that is violated from above is added with its sign flipped, and equalities
 * are never dropped.
 */
function solveDual(problem: QpProblem, options: QpOptions): QpResult {
  const n = problem.linear.length;
  const eq = problem.equalities;
  const ineq = problem.inequalities;
  const mEq = eq?.rows.length ?? 0;
  const mIn = ineq?.rows.length ?? 0;

  // Constraint k: normal N[k·n .. k·n + n), rhs b[k]; kind 0 equality, 1 inequality, 2 lower, 3 upper.
  let q = mEq + mIn;
  for (let j = 0; j < n; j++) {
    if (Number.isFinite(problem.lower?.[j] ?? Number.NEGATIVE_INFINITY)) q++;
    if (Number.isFinite(problem.upper?.[j] ?? Number.POSITIVE_INFINITY)) q++;
  }
  const N = new Float64Array(q * n);
  const b = new Float64Array(q);
  const kind = new Uint8Array(q);
  const owner = new Int32Array(q); // index within its block (row, or variable for a bound)
  let k = 0;
  for (let i = 0; i < mEq; i++, k++) {
    const row = eq!.rows[i]!;
    for (let j = 0; j < n; j++) N[k * n + j] = row[j] ?? Number.NaN;
    b[k] = eq!.rhs[i] ?? Number.NaN;
    owner[k] = i;
  }
  for (let i = 0; i < mIn; i++, k++) {
    const row = ineq!.rows[i]!;
    for (let j = 0; j < n; j++) N[k * n + j] = row[j] ?? Number.NaN;
    b[k] = ineq!.rhs[i] ?? Number.NaN;
    kind[k] = 1;
    owner[k] = i;
  }
  for (let j = 0; j < n; j++) {
    const lo = problem.lower?.[j] ?? Number.NEGATIVE_INFINITY;
    if (Number.isFinite(lo)) {
      N[k * n + j] = 1;
      b[k] = lo;
      kind[k] = 2;
      owner[k++] = j;
    }
  }
  for (let j = 0; j < n; j++) {
    const up = problem.upper?.[j] ?? Number.POSITIVE_INFINITY;
    if (Number.isFinite(up)) {
      N[k * n + j] = -1;
      b[k] = -up;
      kind[k] = 3;
      owner[k++] = j;
    }
  }
  for (let i = 0; i < q * n; i++)
    if (!Number.isFinite(N[i]!))
      return failedResult(n, mEq, mIn, "numerical-failure", "a constraint row is not finite");
  for (let i = 0; i < q; i++)
    if (Number.isNaN(b[i]!))
      return failedResult(n, mEq, mIn, "numerical-failure", "a right-hand side is NaN");
  const norm = new Float64Array(q);
  for (let c = 0; c < q; c++) {
    let s = 0;
    for (let j = 0; j < n; j++) s += N[c * n + j]! * N[c * n + j]!;
    norm[c] = Math.sqrt(s);
  }

  // Cholesky H = L·Lᵀ (row-major lower triangle in L).
  const L = new Float64Array(n * n);
  for (let i = 0; i < n; i++) {
    const hRow = problem.hessian[i];
    for (let j = 0; j <= i; j++) {
      const hij = hRow?.[j] ?? Number.NaN;
      let s = hij;
      for (let m = 0; m < j; m++) s -= L[i * n + m]! * L[j * n + m]!;
      if (i === j) {
        // A pivot lost to cancellation (relative to the diagonal entry) is not positive definite in
        // any useful sense: the step would be rounding noise amplified.
        if (!(s > 1e-14 * Math.abs(hij)))
          return failedResult(n, mEq, mIn, "not-convex", "the Hessian is not positive definite");
        L[i * n + i] = Math.sqrt(s);
      } else L[i * n + j] = s / L[j * n + j]!;
    }
  }
  // J = L⁻ᵀ (upper triangular), column-major in J[col·n + row] so that a column is contiguous.
  const J = new Float64Array(n * n);
  for (let col = 0; col < n; col++) {
    // Solve Lᵀ·y = e_col by back substitution; y is column `col` of L⁻ᵀ.
    for (let i = n - 1; i >= 0; i--) {
      let s = i === col ? 1 : 0;
      for (let m = i + 1; m < n; m++) s -= L[m * n + i]! * J[col * n + m]!;
      J[col * n + i] = s / L[i * n + i]!;
    }
  }
  // Unconstrained minimum x = −H⁻¹·g = −J·Jᵀ·g.
  const x = new Float64Array(n);
  const work = new Float64Array(n);
  for (let c = 0; c < n; c++) {
    let s = 0;
    for (let i = 0; i < n; i++) s += J[c * n + i]! * (problem.linear[i] ?? Number.NaN);
    work[c] = s;
  }
  for (let c = 0; c < n; c++) {
    const w = work[c]!;
    for (let i = 0; i < n; i++) x[i]! -= J[c * n + i]! * w;
  }
  if (!allFinite(x)) return failedResult(n, mEq, mIn, "numerical-failure", "the linear term is not finite");

  const R = new Float64Array(n * n); // upper triangular, R[row·n + col]
  const active = new Int32Array(n); // constraint index of each active position
  const u = new Float64Array(n + 1); // multipliers of the active set (+ the one being added)
  const sign = new Float64Array(q).fill(1); // −1 for an equality added from above
  const isActive = new Uint8Array(q);
  let nAct = 0;
  const d = new Float64Array(n);
  const z = new Float64Array(n);
  const r = new Float64Array(n);
  const maxIter = options.maxIterations ?? 10 * (n + q);

  /** n_cᵀ·v, with the bounds' normals (±unit vectors) taken as such: 16 of Williams–Otto's 22 rows. */
  const dotNormal = (c: number, v: Float64Array, offset: number): number => {
    const kc = kind[c]!;
    if (kc === 2) return v[offset + owner[c]!]!;
    if (kc === 3) return -v[offset + owner[c]!]!;
    let s = 0;
    for (let j = 0; j < n; j++) s += N[c * n + j]! * v[offset + j]!;
    return s;
  };
  const slack = (c: number): number => sign[c]! * (dotNormal(c, x, 0) - b[c]!);
  const hypot = (a: number, e: number): number => {
    // Math.hypot is several times slower in V8; the operands here are never near overflow.
    return Math.sqrt(a * a + e * e);
  };
  /** Rotates J's columns (a, a+1) by the Givens rotation that maps (p, s) to (h, 0). */
  const rotateJ = (a: number, c: number, s: number) => {
    for (let i = 0; i < n; i++) {
      const t1 = J[a * n + i]!;
      const t2 = J[(a + 1) * n + i]!;
      J[a * n + i] = c * t1 + s * t2;
      J[(a + 1) * n + i] = -s * t1 + c * t2;
    }
  };
  const drop = (pos: number) => {
    // Remove column `pos` of R, then restore the triangle with rotations of rows (j, j+1), mirrored on J.
    for (let col = pos; col < nAct - 1; col++) {
      for (let row = 0; row <= col + 1; row++) R[row * n + col] = R[row * n + col + 1]!;
      active[col] = active[col + 1]!;
      u[col] = u[col + 1]!;
    }
    u[nAct - 1] = u[nAct]!; // the multiplier of the constraint being added moves down with it
    for (let j = pos; j < nAct - 1; j++) {
      const a = R[j * n + j]!;
      const c2 = R[(j + 1) * n + j]!;
      if (c2 === 0) continue;
      const h = hypot(a, c2);
      const c = a / h;
      const s = c2 / h;
      for (let col = j; col < nAct - 1; col++) {
        const t1 = R[j * n + col]!;
        const t2 = R[(j + 1) * n + col]!;
        R[j * n + col] = c * t1 + s * t2;
        R[(j + 1) * n + col] = -s * t1 + c * t2;
      }
      rotateJ(j, c, s);
    }
    for (let col = 0; col < n; col++) R[(nAct - 1) * n + col] = 0;
    nAct--;
  };

  for (let iter = 0; ; iter++) {
    if (iter >= maxIter)
      return failedResult(n, mEq, mIn, "numerical-failure", `no solution after ${maxIter} iterations`);
    // Step 1: the most violated constraint, by its distance (slack / ‖n‖).
    let xScale = 1;
    for (let j = 0; j < n; j++) xScale = Math.max(xScale, Math.abs(x[j]!));
    let p = -1;
    let worst = 0;
    for (let c = 0; c < q; c++) {
      if (isActive[c] === 1 || norm[c] === 0) continue;
      let s = dotNormal(c, x, 0) - b[c]!;
      if (kind[c] === 0) {
        sign[c] = s > 0 ? -1 : 1;
        s = -Math.abs(s);
      }
      const dist = s / norm[c]!;
      if (dist < worst && dist < -1e-13 * (xScale + Math.abs(b[c]!) / norm[c]!)) {
        worst = dist;
        p = c;
      }
    }
    if (p < 0) break;
    u[nAct] = 0;
    let sp = slack(p);
    // Step 2: move towards satisfying constraint p, dropping blocking active ones on the way.
    for (;;) {
      if (++iter >= maxIter)
        return failedResult(n, mEq, mIn, "numerical-failure", `no solution after ${maxIter} iterations`);
      // d = Jᵀ·n_p; z = J₂·d₂ (primal direction); r = R⁻¹·d₁ (dual direction).
      const sg = sign[p]!;
      for (let c = 0; c < n; c++) d[c] = sg * dotNormal(p, J, c * n);
      z.fill(0);
      for (let c = nAct; c < n; c++) {
        const w = d[c]!;
        if (w === 0) continue;
        for (let i = 0; i < n; i++) z[i]! += J[c * n + i]! * w;
      }
      for (let i = nAct - 1; i >= 0; i--) {
        let s = d[i]!;
        for (let m = i + 1; m < nAct; m++) s -= R[i * n + m]! * r[m]!;
        r[i] = s / R[i * n + i]!;
      }
      // Partial step: the largest dual step keeping active inequality multipliers ≥ 0.
      let t1 = Number.POSITIVE_INFINITY;
      let drop1 = -1;
      for (let i = 0; i < nAct; i++) {
        if (kind[active[i]!] === 0 || r[i]! <= 0) continue;
        const t = u[i]! / r[i]!;
        if (t < t1) {
          t1 = t;
          drop1 = i;
        }
      }
      // Full step: the primal step that makes constraint p hold with equality.
      // n_pᵀ·z = ‖d₂‖² ≤ ‖d‖² = n_pᵀ·H⁻¹·n_p; a ratio at rounding level means n_p lies in the span
      // of the active normals (scale-free test: the problem's units do not enter).
      let zn = 0;
      let dd = 0;
      zn = sg * dotNormal(p, z, 0);
      for (let i = 0; i < n; i++) dd += d[i]! * d[i]!;
      const t2 = zn <= 1e-14 * dd ? Number.POSITIVE_INFINITY : -sp / zn;
      const t = Math.min(t1, t2);
      if (t === Number.POSITIVE_INFINITY)
        return failedResult(n, mEq, mIn, "inconsistent", "constraints are inconsistent: no solution");
      if (t2 === Number.POSITIVE_INFINITY) {
        // Dual step only: the normal of p depends on the active ones; drop the blocking constraint.
        for (let i = 0; i < nAct; i++) u[i]! -= t * r[i]!;
        u[nAct]! += t;
        isActive[active[drop1]!] = 0;
        drop(drop1);
        continue;
      }
      for (let i = 0; i < n; i++) x[i]! += t * z[i]!;
      for (let i = 0; i < nAct; i++) u[i]! -= t * r[i]!;
      u[nAct]! += t;
      if (t === t2) {
        // Add p: rotate d's tail into position nAct (columns of J mirrored), then R gains column nAct.
        for (let c = n - 1; c > nAct; c--) {
          const a = d[c - 1]!;
          const e = d[c]!;
          if (e === 0) continue;
          const h = hypot(a, e);
          const cs = a / h;
          const sn = e / h;
          d[c - 1] = h;
          d[c] = 0;
          rotateJ(c - 1, cs, sn);
        }
        for (let i = 0; i <= nAct; i++) R[i * n + nAct] = d[i]!;
        active[nAct] = p;
        isActive[p] = 1;
        nAct++;
        break;
      }
      // Partial step: drop the blocking constraint and keep moving towards p.
      isActive[active[drop1]!] = 0;
      drop(drop1);
      sp = slack(p);
    }
  }

  const equalityMultipliers = new Float64Array(mEq);
  const inequalityMultipliers = new Float64Array(mIn);
  const lowerMultipliers = new Float64Array(n);
  const upperMultipliers = new Float64Array(n);
  for (let i = 0; i < nAct; i++) {
    const c = active[i]!;
    const m = u[i]!;
    switch (kind[c]) {
      case 0:
        equalityMultipliers[owner[c]!] = sign[c]! * m;
        break;
      case 1:
        inequalityMultipliers[owner[c]!] = m;
        break;
      case 2:
        lowerMultipliers[owner[c]!] = m;
        break;
      default:
        upperMultipliers[owner[c]!] = m;
    }
  }
  return optimalResult(problem, x, {
    equalityMultipliers,
    inequalityMultipliers,
    lowerMultipliers,
    upperMultipliers,
  });
}

const allFinite = (a: ArrayLike<number>): boolean => {
  for (let i = 0; i < a.length; i++) if (!Number.isFinite(a[i]!)) return false;
  return true;
};

/** The same problem through the `quadprog` package (the tests' reference). */
function solveWithQuadprog(problem: QpProblem): QpResult {
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

  const failed = (status: QpStatus, message: string): QpResult => failedResult(n, mEq, mIn, status, message);

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
  // quadprog flips an equality violated from above in place (Amat column and bvec entry), possibly
  // more than once, and reports the multiplier of the row as last flipped: undo the last flip. Even so
  // its equality multipliers came out with the wrong sign in 7 % of 2,000 random QPs here (KKT residual
  // up to 33), which is why the tests judge multipliers by the KKT conditions, not by this path.
  for (let k = 0; k < mEq; k++, col++) {
    const row = eq!.rows[k]!;
    let flipped = false;
    for (let j = 0; j < n; j++) {
      const a = row[j] ?? 0;
      if (a !== 0) {
        flipped = Amat[j + 1]![col] === -a;
        break;
      }
    }
    equalityMultipliers[k] = (flipped ? -1 : 1) * (lag[col] ?? 0);
  }
  for (let k = 0; k < mIn; k++) inequalityMultipliers[k] = lag[col++] ?? 0;
  for (const j of lowerIdx) lowerMultipliers[j] = lag[col++] ?? 0;
  for (const j of upperIdx) upperMultipliers[j] = lag[col++] ?? 0;
  return optimalResult(problem, x, {
    equalityMultipliers,
    inequalityMultipliers,
    lowerMultipliers,
    upperMultipliers,
  });
}
