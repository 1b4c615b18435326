/**
 * Warm simplex for a kept LP whose costs, bounds or limits changed since its last optimal basis.
 *
 * Why it exists: an RTO cycle re-solves the same LP with new prices and with the decisions' boxes
 * moved by the move limits. The last optimal basis is a few pivots from the new optimum: after a cost
 * change it is still primal feasible (primal pivots restore optimality), after a bound change still
 * dual feasible (dual pivots restore feasibility). HiGHS does those pivots quickly, but every `run()`
 * of a kept HiGHS model costs a fixed 0.6–0.8 ms at 2,000 variables before its first pivot (measured in
 * bench/optimize.ts, "HiGHS floor"), the whole budget of a warm re-solve there. This module does the
 * pivots on a factorization it keeps between cycles: the primal phase for the new costs on the bounds
 * in force, then the new bounds and a dual phase. It declines (the caller then runs HiGHS) whenever it
 * meets anything outside the easy case: a basis it cannot factor, an unbounded ray, an infeasible LP, a
 * nonbasic variable whose bound was removed, or too many pivots.
 *
 * The LP is taken in HiGHS's row form: minimize cᵀx subject to r = A·x, colLower ≤ x ≤ colUpper and
 * rowLower ≤ r ≤ rowUpper. Variables 0..n−1 are the columns x, variables n..n+m−1 the row activities r;
 * the equations A·x − r = 0 give the basis matrix its columns a_j (structural) and −e_i (row activity).
 * Duals follow HiGHS's sign convention: c − Aᵀy = d for the columns, and the reduced cost of row
 * activity i is y_i.
 *
 * Method (Chvátal 1983, "Linear Programming", ch. 8 "the revised simplex method" and ch. 10 "the dual
 * simplex method" and "sensitivity analysis": a cost change keeps primal feasibility, a bound change
 * dual feasibility; Harris 1973, "Pivot selection methods of the Devex LP code", Math. Programming 5,
 * for the primal two-pass ratio test):
 * - the basis matrix is factorized as a sequence of pivots: first the column and row singletons found
 *   by triangularization (no fill, no arithmetic), then a dense LU with partial pivoting of what is
 *   left (the "bump"); a warm cycle's bases are nearly triangular (bench LPs at 2,000 variables: 272
 *   basic structurals, a bump of 17);
 * - basis changes append product-form eta columns; the basis is refactorized every
 *   {@link WarmSimplexOptions.refactorEvery} pivots;
 * - duals computed once per solve (and after each refactorization), then updated by each pivot's row;
 *   Dantzig pricing over the variables whose reduced costs were seen to violate optimality; a
 *   bounded-variable ratio test with bound flips;
 * - the dual phase takes the most violating basic variable out and the textbook dual ratio test's
 *   variable in, on the same pivot-row machinery.
 *
 * Internal failures (a singular basis) are thrown as `SingularBasis` inside the factorization and come
 * out of the public methods only as a declined outcome with its reason; nothing here throws to a caller.
 */

/** An LP in HiGHS's row form, columns stored compressed (CSC). Bounds may be ±Infinity. */
export interface ColumnLp {
  nCols: number;
  nRows: number;
  /** Start of column j's entries in `rowIndex`/`value`; length nCols + 1. */
  colStart: Int32Array;
  rowIndex: Int32Array;
  value: Float64Array;
  colLower: Float64Array;
  colUpper: Float64Array;
  rowLower: Float64Array;
  rowUpper: Float64Array;
}

/** Options of {@link WarmSimplex}. */
export interface WarmSimplexOptions {
  /** Pivots allowed per solve before declining; default 100. */
  maxPivots?: number;
  /** Eta columns kept before the basis is factorized afresh; default 32. */
  refactorEvery?: number;
  /** Largest dense bump accepted by the factorization; default 400 (larger bases are declined). */
  maxBump?: number;
  /** Reduced-cost tolerance of the optimality test (objective units per variable unit); default 1e-9. */
  dualTolerance?: number;
  /** Primal feasibility tolerance (variable units); default 1e-7, as HiGHS's default. */
  primalTolerance?: number;
}

/** New bounds for {@link WarmSimplex.solve}, of the same lengths as the LP's (±Infinity allowed). */
export interface BoundsUpdate {
  colLower: ArrayLike<number>;
  colUpper: ArrayLike<number>;
  rowLower: ArrayLike<number>;
  rowUpper: ArrayLike<number>;
}

/** Outcome of {@link WarmSimplex.solve}. */
export type WarmOutcome =
  | {
      status: "optimal";
      /** Pivots in all (bound flips included). */
      pivots: number;
      /**
       * Pivots of the dual phase, and primal pivots made after it. A dual phase keeps the basis dual
       * feasible, so after a change of bounds only the second count stays 0 but for rounding.
       */
      phases: { primal: number; dual: number; primalAfterDual: number };
    }
  | { status: "declined"; pivots: number; reason: string };

/** Basis status codes, HiGHS's (`highs.constants.basisStatus`): lower, basic, upper, zero, nonbasic. */
const LOWER = 0;
const BASIC = 1;
const UPPER = 2;
const ZERO = 3;

/**
 * Smallest |α| accepted as a pivot: relative to the largest entry of the entering column in the primal
 * ratio test, as it stands in the dual ratio test (pivot-row entries) and for the dual phase's pivot.
 */
const PIVOT_TOLERANCE = 1e-9;
/** Smallest pivot of the bump's LU, relative to the largest entry of the bump. */
const SINGULAR_TOLERANCE = 1e-11;

/** {@link WarmSimplex.ratioTest} results that are not a position. */
const FLIP = -1;
const UNBOUNDED = -2;

/** Thrown inside the factorization only; turned into a declined outcome. */
class SingularBasis extends Error {}

/** A copy of `a` in a larger array of the same kind. */
function grow<T extends Int32Array | Float64Array>(a: T, length: number): T {
  const out = new (a.constructor as new (n: number) => T)(length);
  out.set(a);
  return out;
}

/**
 * The transpose of a compressed sparse matrix (CSR to CSC or back): entries listed per outer index k
 * (`start[k]..start[k+1]` of `index`/`value`, k < start.length − 1) regrouped per inner index
 * i < `innerCount`, each entry carrying `label[k]` (default k) as its new index.
 */
export function transposeCompressed(
  innerCount: number,
  start: Int32Array,
  index: Int32Array,
  value: Float64Array,
  label?: Int32Array,
): { start: Int32Array; index: Int32Array; value: Float64Array } {
  const outerCount = start.length - 1;
  const nnz = start[outerCount]!;
  const out = new Int32Array(innerCount + 1);
  for (let q = 0; q < nnz; q++) out[index[q]! + 1]!++;
  for (let i = 0; i < innerCount; i++) out[i + 1]! += out[i]!;
  const next = out.slice(0, innerCount);
  const outIndex = new Int32Array(nnz);
  const outValue = new Float64Array(nnz);
  for (let k = 0; k < outerCount; k++)
    for (let q = start[k]!; q < start[k + 1]!; q++) {
      const at = next[index[q]!]!++;
      outIndex[at] = label ? label[k]! : k;
      outValue[at] = value[q]!;
    }
  return { start: out, index: outIndex, value: outValue };
}

/**
 * LU factors of a basis as a pivot sequence with product-form updates. Position p of the basis holds
 * one variable; `ftran` solves B·x = b (b by row, x by position) and `btran` solves Bᵀ·y = c (c by
 * position, y by row), both in place on a work array of length m and a result array.
 */
class BasisFactor {
  private readonly m: number;
  private pivRow: Int32Array;
  private pivPos: Int32Array;
  private pivVal: Float64Array;
  private uStart: Int32Array;
  private uPos = new Int32Array(0);
  private uVal = new Float64Array(0);
  private lStart: Int32Array;
  private lRow = new Int32Array(0);
  private lVal = new Float64Array(0);
  private ucStart: Int32Array = new Int32Array(0);
  private ucTarget: Int32Array = new Int32Array(0);
  private ucVal: Float64Array = new Float64Array(0);
  private lrStart: Int32Array = new Int32Array(0);
  private lrTarget: Int32Array = new Int32Array(0);
  private lrVal: Float64Array = new Float64Array(0);
  private lPivots: Int32Array = new Int32Array(0);
  private lrPivots: Int32Array = new Int32Array(0);
  // Eta file: eta e replaces position etaPos[e] by the column α (pivot etaPivot[e], the other nonzeros
  // at etaIdx/etaVal[etaStart[e] .. etaStart[e+1])); typed arrays grown by doubling.
  private etaCountValue = 0;
  private readonly maxEtas: number;
  private readonly etaPos: Int32Array;
  private readonly etaPivot: Float64Array;
  private readonly etaStart: Int32Array;
  private etaIdx = new Int32Array(1024);
  private etaVal = new Float64Array(1024);
  /** The eta columns again, dense (maxEtas × m), for {@link btranUnit}. */
  private readonly etaDense: Float64Array;
  /** `btranUnit`'s right-hand side (all zero between calls) and its nonzero positions. */
  private readonly unitWork: Float64Array;
  private readonly unitNonzeros: Int32Array;
  private readonly unitListed: Uint8Array;

  /** `maxEtas`: eta columns kept at most before a new factorization (the simplex's refactorEvery). */
  constructor(m: number, maxEtas: number) {
    this.m = m;
    this.maxEtas = maxEtas;
    this.etaPos = new Int32Array(maxEtas);
    this.etaPivot = new Float64Array(maxEtas);
    this.etaStart = new Int32Array(maxEtas + 1);
    this.etaDense = new Float64Array(maxEtas * m);
    this.unitWork = new Float64Array(m);
    this.unitNonzeros = new Int32Array(maxEtas + 1);
    this.unitListed = new Uint8Array(m);
    this.pivRow = new Int32Array(m);
    this.pivPos = new Int32Array(m);
    this.pivVal = new Float64Array(m);
    this.uStart = new Int32Array(m + 1);
    this.lStart = new Int32Array(m + 1);
  }

  get etaCount(): number {
    return this.etaCountValue;
  }

  /**
   * Factorizes the basis whose column p has entries (bRow, bVal)[bStart[p] .. bStart[p+1]).
   * @throws SingularBasis when the basis is singular or its bump is larger than `maxBump`.
   */
  factor(bStart: Int32Array, bRow: Int32Array, bVal: Float64Array, maxBump: number): void {
    const m = this.m;
    // Row-wise copy of B, for row singletons and the U rows.
    const byRow = transposeCompressed(m, bStart, bRow, bVal);
    const { start: rStart, index: rPos, value: rVal } = byRow;
    const colCount = new Int32Array(m);
    const rowCount = new Int32Array(m);
    for (let p = 0; p < m; p++) colCount[p] = bStart[p + 1]! - bStart[p]!;
    for (let i = 0; i < m; i++) rowCount[i] = rStart[i + 1]! - rStart[i]!;
    const rowDone = new Uint8Array(m);
    const colDone = new Uint8Array(m);
    const colStack: number[] = [];
    const rowStack: number[] = [];
    for (let p = 0; p < m; p++) {
      if (colCount[p] === 0) throw new SingularBasis("empty basis column");
      if (colCount[p] === 1) colStack.push(p);
    }
    for (let i = 0; i < m; i++) {
      if (rowCount[i] === 0) throw new SingularBasis("empty basis row");
      if (rowCount[i] === 1) rowStack.push(i);
    }
    const uPos: number[] = [];
    const uVal: number[] = [];
    const lRow: number[] = [];
    const lVal: number[] = [];
    let k = 0;
    const pivot = (i: number, p: number, a: number) => {
      this.pivRow[k] = i;
      this.pivPos[k] = p;
      this.pivVal[k] = a;
      rowDone[i] = 1;
      colDone[p] = 1;
      k++;
      this.uStart[k] = uPos.length;
      this.lStart[k] = lRow.length;
    };
    for (;;) {
      const p = colStack.pop();
      if (p !== undefined) {
        if (colDone[p] || colCount[p] !== 1) continue;
        // Column singleton: its one active row becomes a U row; no L entries, no fill.
        let i = -1;
        let a = 0;
        for (let q = bStart[p]!; q < bStart[p + 1]!; q++)
          if (!rowDone[bRow[q]!]) {
            i = bRow[q]!;
            a = bVal[q]!;
          }
        for (let q = rStart[i]!; q < rStart[i + 1]!; q++) {
          const c = rPos[q]!;
          if (c === p || colDone[c]) continue;
          uPos.push(c);
          uVal.push(rVal[q]!);
          if (--colCount[c]! === 1) colStack.push(c);
          else if (colCount[c] === 0) throw new SingularBasis("basis column lost its rows");
        }
        pivot(i, p, a);
        continue;
      }
      const i = rowStack.pop();
      if (i === undefined) break;
      if (rowDone[i] || rowCount[i] !== 1) continue;
      // Row singleton: the other active rows of its column get L multipliers; no U entries, no fill.
      let pc = -1;
      let a = 0;
      for (let q = rStart[i]!; q < rStart[i + 1]!; q++)
        if (!colDone[rPos[q]!]) {
          pc = rPos[q]!;
          a = rVal[q]!;
        }
      for (let q = bStart[pc]!; q < bStart[pc + 1]!; q++) {
        const r = bRow[q]!;
        if (r === i || rowDone[r]) continue;
        lRow.push(r);
        lVal.push(bVal[q]! / a);
        if (--rowCount[r]! === 1) rowStack.push(r);
        else if (rowCount[r] === 0) throw new SingularBasis("basis row lost its columns");
      }
      pivot(i, pc, a);
    }
    const s = m - k;
    if (s > maxBump) throw new SingularBasis(`bump of ${s} exceeds ${maxBump}`);
    if (s > 0) {
      const rows: number[] = [];
      const cols: number[] = [];
      const rowAt = new Int32Array(m).fill(-1);
      for (let r = 0; r < m; r++) if (!rowDone[r]) rowAt[r] = rows.push(r) - 1;
      for (let p = 0; p < m; p++) if (!colDone[p]) cols.push(p);
      if (rows.length !== s || cols.length !== s) throw new SingularBasis("structurally singular basis");
      const d = new Float64Array(s * s);
      let scale = 0;
      cols.forEach((p, c) => {
        for (let q = bStart[p]!; q < bStart[p + 1]!; q++) {
          const r = rowAt[bRow[q]!]!;
          if (r >= 0) {
            d[r * s + c] = bVal[q]!;
            scale = Math.max(scale, Math.abs(bVal[q]!));
          }
        }
      });
      const used = new Uint8Array(s);
      for (let c = 0; c < s; c++) {
        let best = -1;
        let big = 0;
        for (let r = 0; r < s; r++)
          if (!used[r] && Math.abs(d[r * s + c]!) > big) {
            big = Math.abs(d[r * s + c]!);
            best = r;
          }
        if (best < 0 || big <= SINGULAR_TOLERANCE * scale)
          throw new SingularBasis("numerically singular bump");
        used[best] = 1;
        const a = d[best * s + c]!;
        for (let r = 0; r < s; r++) {
          if (used[r]) continue;
          const l = d[r * s + c]! / a;
          if (l === 0) continue;
          lRow.push(rows[r]!);
          lVal.push(l);
          for (let u = c + 1; u < s; u++) d[r * s + u]! -= l * d[best * s + u]!;
        }
        for (let u = c + 1; u < s; u++)
          if (d[best * s + u] !== 0) {
            uPos.push(cols[u]!);
            uVal.push(d[best * s + u]!);
          }
        pivot(rows[best]!, cols[c]!, a);
      }
    }
    this.uPos = Int32Array.from(uPos);
    this.uVal = Float64Array.from(uVal);
    this.lRow = Int32Array.from(lRow);
    this.lVal = Float64Array.from(lVal);
    // Transposed copies, so that both solves scatter and skip zeros (sparse right-hand sides stay cheap):
    // U by position (FTRAN's back substitution), L by row (BTRAN's last pass); targets are pivot rows.
    const uc = transposeCompressed(m, this.uStart, this.uPos, this.uVal, this.pivRow);
    this.ucStart = uc.start;
    this.ucTarget = uc.index;
    this.ucVal = uc.value;
    const lr = transposeCompressed(m, this.lStart, this.lRow, this.lVal, this.pivRow);
    this.lrStart = lr.start;
    this.lrTarget = lr.index;
    this.lrVal = lr.value;
    // The pivots that have L entries at all (in pivot order): a nearly triangular basis has few, and
    // both L passes then visit those instead of all m pivots.
    const withL: number[] = [];
    for (let q = 0; q < m; q++) if (this.lStart[q + 1]! > this.lStart[q]!) withL.push(q);
    this.lPivots = Int32Array.from(withL);
    const withLr: number[] = [];
    for (let q = 0; q < m; q++) {
      const r = this.pivRow[q]!;
      if (this.lrStart[r + 1]! > this.lrStart[r]!) withLr.push(q);
    }
    this.lrPivots = Int32Array.from(withLr);
    this.etaCountValue = 0;
  }

  /** Solves B·x = b: `b` (by row) is overwritten, `x` (by position) receives the solution. */
  ftran(b: Float64Array, x: Float64Array): void {
    const m = this.m;
    const { pivRow, pivPos, pivVal, lStart, lRow, lVal, ucStart, ucTarget, ucVal, lPivots } = this;
    for (let t = 0; t < lPivots.length; t++) {
      const k = lPivots[t]!;
      const bk = b[pivRow[k]!]!;
      if (bk === 0) continue;
      for (let q = lStart[k]!; q < lStart[k + 1]!; q++) b[lRow[q]!]! -= lVal[q]! * bk;
    }
    for (let k = m - 1; k >= 0; k--) {
      const p = pivPos[k]!;
      const bk = b[pivRow[k]!]!;
      if (bk === 0) {
        x[p] = 0;
        continue;
      }
      const xk = bk / pivVal[k]!;
      x[p] = xk;
      for (let q = ucStart[p]!; q < ucStart[p + 1]!; q++) b[ucTarget[q]!]! -= ucVal[q]! * xk;
    }
    const { etaPos, etaPivot, etaStart, etaIdx, etaVal } = this;
    for (let e = 0; e < this.etaCountValue; e++) {
      const p = etaPos[e]!;
      const xp = x[p]! / etaPivot[e]!;
      x[p] = xp;
      if (xp === 0) continue;
      for (let q = etaStart[e]!; q < etaStart[e + 1]!; q++) x[etaIdx[q]!]! -= etaVal[q]! * xp;
    }
  }

  /** Solves Bᵀ·y = c: `c` (by position) is overwritten, `y` (by row) receives the solution. */
  btran(c: Float64Array, y: Float64Array): void {
    const { etaPos, etaPivot, etaStart, etaIdx, etaVal } = this;
    for (let e = this.etaCountValue - 1; e >= 0; e--) {
      const p = etaPos[e]!;
      let s = c[p]!;
      for (let q = etaStart[e]!; q < etaStart[e + 1]!; q++) s -= etaVal[q]! * c[etaIdx[q]!]!;
      c[p] = s / etaPivot[e]!;
    }
    this.btranLu(c, y);
  }

  /**
   * Solves Bᵀ·y = e_r (y is row r of B⁻¹, the simplex's pivot row). Each eta changes one entry of the
   * right-hand side, so it has at most 1 + (number of etas) nonzeros while the etas are applied; the
   * dot products run over those through the dense copies of the eta columns, not over each column's
   * nonzeros (profiled: the eta pass had been most of this solve's time at 250 rows).
   */
  btranUnit(r: number, y: Float64Array): void {
    const { m, etaPos, etaPivot, etaDense } = this;
    const c = this.unitWork;
    const nz = this.unitNonzeros;
    const listed = this.unitListed;
    c[r] = 1;
    nz[0] = r;
    listed[r] = 1;
    let count = 1;
    for (let e = this.etaCountValue - 1; e >= 0; e--) {
      const p = etaPos[e]!;
      const base = e * m;
      let s = c[p]!;
      for (let k = 0; k < count; k++) {
        const i = nz[k]!;
        if (i !== p) s -= etaDense[base + i]! * c[i]!;
      }
      // Listed by a mark, not by c[p] === 0: an entry can cancel to exactly zero and come back.
      if (!listed[p]) {
        listed[p] = 1;
        nz[count++] = p;
      }
      c[p] = s / etaPivot[e]!;
    }
    for (let k = 0; k < count; k++) listed[nz[k]!] = 0;
    this.btranLu(c, y);
    c.fill(0);
  }

  /** Bᵀ = (L·U)ᵀ part of {@link btran}: Uᵀ by forward scatter, then Lᵀ by backward scatter. */
  private btranLu(c: Float64Array, y: Float64Array): void {
    const m = this.m;
    const { pivRow, pivPos, pivVal, uStart, uPos, uVal, lrStart, lrTarget, lrVal, lrPivots } = this;
    for (let k = 0; k < m; k++) {
      const ck = c[pivPos[k]!]!;
      if (ck === 0) {
        y[pivRow[k]!] = 0;
        continue;
      }
      const z = ck / pivVal[k]!;
      y[pivRow[k]!] = z;
      for (let q = uStart[k]!; q < uStart[k + 1]!; q++) c[uPos[q]!]! -= uVal[q]! * z;
    }
    for (let t = lrPivots.length - 1; t >= 0; t--) {
      const r = pivRow[lrPivots[t]!]!;
      const yr = y[r]!;
      if (yr === 0) continue;
      for (let q = lrStart[r]!; q < lrStart[r + 1]!; q++) y[lrTarget[q]!]! -= lrVal[q]! * yr;
    }
  }

  /**
   * Records that position p now holds the variable whose FTRAN'd column is `alpha`, whose nonzeros
   * are at the first `count` entries of `nonzeros`.
   */
  update(p: number, alpha: Float64Array, nonzeros: Int32Array, count: number): void {
    const e = this.etaCountValue++;
    if (e >= this.maxEtas) throw new RangeError(`more than ${this.maxEtas} eta columns`);
    let at = this.etaStart[e]!;
    if (at + count > this.etaIdx.length) {
      this.etaIdx = grow(this.etaIdx, 2 * (at + count));
      this.etaVal = grow(this.etaVal, 2 * (at + count));
    }
    const dense = this.etaDense.subarray(e * this.m, (e + 1) * this.m);
    dense.fill(0);
    for (let k = 0; k < count; k++) dense[nonzeros[k]!] = alpha[nonzeros[k]!]!;
    this.etaPos[e] = p;
    this.etaPivot[e] = alpha[p]!;
    for (let k = 0; k < count; k++) {
      const i = nonzeros[k]!;
      if (i === p) continue;
      this.etaIdx[at] = i;
      this.etaVal[at++] = alpha[i]!;
    }
    this.etaStart[e + 1] = at;
  }
}

/**
 * A simplex that starts from a given basis (normally HiGHS's last optimal one) and re-optimizes after
 * changes of costs and bounds. Load a basis with {@link load} (which reads the LP's bounds), then call
 * {@link solve} with each cycle's costs and, when they moved, its bounds; the basis, values and
 * factorization carry over between solves.
 */
export class WarmSimplex {
  private readonly lp: ColumnLp;
  private readonly n: number;
  private readonly m: number;
  private readonly lower: Float64Array;
  private readonly upper: Float64Array;
  private readonly status: Int8Array;
  private readonly basicVar: Int32Array;
  private readonly factor: BasisFactor;
  private readonly options: Required<WarmSimplexOptions>;
  private loaded = false;
  // Work arrays, reused by every solve.
  private readonly rowWork: Float64Array;
  private readonly posWork: Float64Array;
  private readonly alpha: Float64Array;
  private readonly rhoWork: Float64Array;
  /** Positions of α's nonzeros (the first `alphaCount`), from the last ratio test. */
  private readonly alphaNonzeros: Int32Array;
  private alphaCount = 0;
  /** A by rows (CSR), for the pivot row ρᵀ·A. */
  private readonly rows: { start: Int32Array; col: Int32Array; value: Float64Array };
  /** ρᵀ·a_j accumulated for the columns in `touched`; all zero between pivots. */
  private readonly rowAlpha: Float64Array;
  private readonly touched: Int32Array;
  private readonly mark: Uint8Array;
  /** Variables whose reduced cost may violate optimality (see `choose`). */
  private readonly candidates: Int32Array;
  private readonly inCandidates: Uint8Array;
  private candidateCount = 0;
  /** Values of all n + m variables (columns, then row activities). */
  readonly x: Float64Array;
  /** Row duals y (c − Aᵀy = d), length m. */
  readonly y: Float64Array;
  /** Reduced costs of all n + m variables (0 for basic ones). */
  readonly d: Float64Array;

  constructor(lp: ColumnLp, options: WarmSimplexOptions = {}) {
    this.lp = lp;
    this.n = lp.nCols;
    this.m = lp.nRows;
    const total = this.n + this.m;
    this.lower = new Float64Array(total);
    this.upper = new Float64Array(total);
    this.lower.set(lp.colLower);
    this.lower.set(lp.rowLower, this.n);
    this.upper.set(lp.colUpper);
    this.upper.set(lp.rowUpper, this.n);
    this.status = new Int8Array(total);
    this.basicVar = new Int32Array(this.m);
    this.options = {
      maxPivots: options.maxPivots ?? 100,
      refactorEvery: options.refactorEvery ?? 32,
      maxBump: options.maxBump ?? 400,
      dualTolerance: options.dualTolerance ?? 1e-9,
      primalTolerance: options.primalTolerance ?? 1e-7,
    };
    this.factor = new BasisFactor(this.m, this.options.refactorEvery);
    this.rowWork = new Float64Array(this.m);
    this.posWork = new Float64Array(this.m);
    this.alpha = new Float64Array(this.m);
    this.rhoWork = new Float64Array(this.m);
    this.alphaNonzeros = new Int32Array(this.m);
    this.rowAlpha = new Float64Array(this.n);
    this.touched = new Int32Array(this.n);
    this.mark = new Uint8Array(this.n);
    this.candidates = new Int32Array(total);
    this.inCandidates = new Uint8Array(total);
    const byRow = transposeCompressed(this.m, lp.colStart, lp.rowIndex, lp.value);
    this.rows = { start: byRow.start, col: byRow.index, value: byRow.value };
    this.x = new Float64Array(total);
    this.y = new Float64Array(this.m);
    this.d = new Float64Array(total);
  }

  /** True when a basis is loaded and factorized. */
  get ready(): boolean {
    return this.loaded;
  }

  /**
   * Takes a basis given by HiGHS-style status codes (length nCols and nRows; 1 = basic), reads the LP's
   * bounds afresh (a caller that changed them between loads sees them used), factorizes the basis
   * and computes the basic values from the nonbasic ones. Returns a reason when the basis cannot be
   * used (wrong count of basic variables, singular, too large a bump, or primal infeasible), undefined
   * when it is loaded.
   */
  load(colStatus: ArrayLike<number>, rowStatus: ArrayLike<number>): string | undefined {
    this.loaded = false;
    const { n, m, lp, status, lower, upper, x } = this;
    lower.set(lp.colLower);
    lower.set(lp.rowLower, n);
    upper.set(lp.colUpper);
    upper.set(lp.rowUpper, n);
    let count = 0;
    for (let j = 0; j < n + m; j++) {
      const s = j < n ? colStatus[j]! : rowStatus[j - n]!;
      if (s === BASIC) {
        if (count === m) return "more basic variables than rows";
        this.basicVar[count++] = j;
        status[j] = BASIC;
        continue;
      }
      // Nonbasic: at the bound the status names, or at the finite one, or at zero when free.
      const lo = lower[j]!;
      const hi = upper[j]!;
      if (s === UPPER && hi < Number.POSITIVE_INFINITY) status[j] = UPPER;
      else if (s === LOWER && lo > Number.NEGATIVE_INFINITY) status[j] = LOWER;
      else if (lo > Number.NEGATIVE_INFINITY) status[j] = LOWER;
      else if (hi < Number.POSITIVE_INFINITY) status[j] = UPPER;
      else status[j] = ZERO;
      x[j] = status[j] === LOWER ? lo : status[j] === UPPER ? hi : 0;
    }
    if (count !== m) return `${count} basic variables for ${m} rows`;
    const reason = this.refactor();
    if (reason) return reason;
    const tol = this.options.primalTolerance;
    for (let p = 0; p < m; p++) {
      const v = this.basicVar[p]!;
      if (x[v]! < lower[v]! - tol || x[v]! > upper[v]! + tol) return "the basis is not primal feasible";
    }
    this.loaded = true;
    return undefined;
  }

  /** Factorizes the current basis and recomputes the basic values; returns a reason on failure. */
  private refactor(): string | undefined {
    const { n, m, lp, basicVar } = this;
    // The basis matrix's columns: a_j for a structural, −e_i for row activity i (explicit zeros dropped).
    const bStart = new Int32Array(m + 1);
    const bRow: number[] = [];
    const bVal: number[] = [];
    for (let p = 0; p < m; p++) {
      const v = basicVar[p]!;
      if (v >= n) {
        bRow.push(v - n);
        bVal.push(-1);
      } else
        for (let q = lp.colStart[v]!; q < lp.colStart[v + 1]!; q++)
          if (lp.value[q] !== 0) {
            bRow.push(lp.rowIndex[q]!);
            bVal.push(lp.value[q]!);
          }
      bStart[p + 1] = bRow.length;
    }
    try {
      this.factor.factor(bStart, Int32Array.from(bRow), Float64Array.from(bVal), this.options.maxBump);
    } catch (err) {
      if (err instanceof SingularBasis) return err.message;
      throw err;
    }
    this.computeBasicValues();
    return undefined;
  }

  /** The basic values from the nonbasic ones: B·x_B = −Σ_N a_j·x_j (row activity columns are −e_i). */
  private computeBasicValues(): void {
    const { n, m, lp, basicVar, x } = this;
    const rhs = this.rowWork.fill(0);
    for (let j = 0; j < n + m; j++) {
      if (this.status[j] === BASIC || x[j] === 0) continue;
      if (j >= n) rhs[j - n]! += x[j]!;
      else
        for (let q = lp.colStart[j]!; q < lp.colStart[j + 1]!; q++)
          rhs[lp.rowIndex[q]!]! -= lp.value[q]! * x[j]!;
    }
    this.factor.ftran(rhs, this.posWork);
    for (let p = 0; p < m; p++) x[basicVar[p]!] = this.posWork[p]!;
  }

  /**
   * Moves to new bounds with the basis kept: each nonbasic variable goes to its new bound on the same
   * side, and the basic values follow. The reduced costs do not change, so an optimal basis stays
   * dual feasible (Chvátal 1983, ch. 10): only the basic values may now be out of bounds, which the dual
   * phase of {@link solve} repairs. Returns a reason when a nonbasic variable's side has no bound any
   * more, or a free nonbasic variable gained one.
   */
  private applyBounds(bounds: BoundsUpdate): string | undefined {
    const { n, m, status, lower, upper, x } = this;
    lower.set(bounds.colLower);
    lower.set(bounds.rowLower, n);
    upper.set(bounds.colUpper);
    upper.set(bounds.rowUpper, n);
    for (let j = 0; j < n + m; j++) {
      const st = status[j];
      if (st === BASIC) continue;
      const v = st === LOWER ? lower[j]! : st === UPPER ? upper[j]! : 0;
      if (!Number.isFinite(v) || (st === ZERO && (lower[j]! > -Infinity || upper[j]! < Infinity)))
        return `nonbasic variable ${j} lost the bound it sat at`;
      x[j] = v;
    }
    this.computeBasicValues();
    return undefined;
  }

  /**
   * The dual simplex phase from a dual feasible basis: while a basic variable is out of its bounds by
   * more than the primal tolerance, the most violating one leaves at the bound it violates, and the
   * entering variable is the one whose reduced cost reaches zero first along the pivot row (the dual
   * ratio test; Chvátal 1983, ch. 10). Returns the pivot count reached (starting from `pivots`), or a
   * declined outcome.
   */
  private dualPhase(cost: ArrayLike<number>, pivots: number): number | WarmOutcome {
    const { m, status, basicVar, x, d, lower, upper, alpha, rowAlpha, touched } = this;
    const { maxPivots, refactorEvery, primalTolerance } = this.options;
    const rho = this.rhoWork;
    for (; ; pivots++) {
      let r = -1;
      let worst = primalTolerance;
      for (let p = 0; p < m; p++) {
        const v = basicVar[p]!;
        const violation = Math.max(lower[v]! - x[v]!, x[v]! - upper[v]!);
        if (violation > worst) {
          worst = violation;
          r = p;
        }
      }
      if (r < 0) return pivots;
      if (pivots >= maxPivots) return this.decline(pivots, `no optimum after ${maxPivots} pivots`);
      const out = basicVar[r]!;
      const below = x[out]! < lower[out]!;
      // x_r changes by −α_rj·Δx_j: a variable at its lower bound can rise, one at its upper bound fall.
      const count = this.pivotRow(r);
      let q = -1;
      let best = Number.POSITIVE_INFINITY;
      let bestAbs = 0;
      const consider = (j: number, a: number) => {
        const st = status[j];
        if (st === BASIC || lower[j] === upper[j] || Math.abs(a) <= PIVOT_TOLERANCE) return;
        const towards = below ? -a : a; // > 0: raising x_j moves x_r the right way
        if ((st === LOWER && towards <= 0) || (st === UPPER && towards >= 0)) return;
        const ratio = Math.abs(d[j]!) / Math.abs(a);
        if (ratio < best || (ratio === best && Math.abs(a) > bestAbs)) {
          best = ratio;
          bestAbs = Math.abs(a);
          q = j;
        }
      };
      for (let k = 0; k < count; k++) consider(touched[k]!, rowAlpha[touched[k]!]!);
      for (let i = 0; i < m; i++) if (rho[i] !== 0) consider(this.n + i, -rho[i]!);
      if (q < 0) {
        this.clearPivotRow(count);
        return this.decline(pivots, "primal infeasible: no entering variable in the dual ratio test");
      }
      this.enteringColumn(q);
      const alphaRq = alpha[r]!;
      if (Math.abs(alphaRq) <= PIVOT_TOLERANCE) {
        this.clearPivotRow(count);
        return this.decline(pivots, "pivot too small in the dual phase");
      }
      // Primal step: x_out reaches the bound it violated.
      const target = below ? lower[out]! : upper[out]!;
      const step = (x[out]! - target) / alphaRq;
      x[q]! += step;
      const nz = this.alphaNonzeros;
      for (let k = 0; k < this.alphaCount; k++) x[basicVar[nz[k]!]!]! -= step * alpha[nz[k]!]!;
      this.applyPivotRow(count, q, out, alphaRq);
      status[out] = below ? LOWER : UPPER;
      x[out] = target;
      this.consider(out);
      status[q] = BASIC;
      basicVar[r] = q;
      this.factor.update(r, alpha, nz, this.alphaCount);
      if (this.factor.etaCount >= refactorEvery) {
        const reason = this.refactor();
        if (reason) return this.decline(pivots + 1, reason);
        this.computeDuals(cost);
      }
    }
  }

  private decline(pivots: number, reason: string): WarmOutcome {
    this.loaded = false;
    return { status: "declined", pivots, reason };
  }

  /**
   * Re-optimizes from the loaded basis for the costs `cost` (minimization, length nCols; the row
   * activities cost nothing) and, when `bounds` are given, for new bounds too: first the primal phase
   * for the new costs on the bounds in force, then the new bounds and a dual phase. On "optimal", `x`, `y` and `d` hold the answer and the basis is kept for
   * the next call; on "declined" the object must be re-loaded before it is used again.
   *
   * The duals are computed afresh at the start (and after each refactorization) and then updated by
   * each pivot's row of B⁻¹·[A −I], which is sparse for these bases: y += δ·ρ and d −= δ·ρᵀ[A −I]
   * with ρ = B⁻ᵀ·e_r and δ = d_q / α_r (Chvátal 1983, ch. 8). Recomputing every reduced cost at every
   * pivot cost twice as much at 2,000 variables (profiled).
   */
  solve(cost: ArrayLike<number>, bounds?: BoundsUpdate): WarmOutcome {
    if (!this.loaded) return { status: "declined", pivots: 0, reason: "no basis loaded" };
    const { status, basicVar, x, d, lower, upper, alpha } = this;
    const { maxPivots, refactorEvery } = this.options;
    const decline = (pivots: number, reason: string) => this.decline(pivots, reason);
    this.computeDuals(cost);
    let pending = bounds;
    let primal = -1;
    let dualPivots = 0;
    for (let pivots = 0; ; pivots++) {
      let q = this.choose();
      if (q < 0 && pending) {
        // Optimal for the new costs on the old bounds: now the new bounds, and the dual phase. Should
        // the dual phase end with a reduced cost past the tolerance (rounding), the primal phase goes on.
        const reason = this.applyBounds(pending);
        pending = undefined;
        if (reason) return decline(pivots, reason);
        primal = pivots;
        const dual = this.dualPhase(cost, pivots);
        if (typeof dual !== "number") return dual;
        dualPivots = dual - pivots;
        pivots = dual;
        q = this.choose();
      }
      if (q < 0) {
        const before = primal < 0 ? pivots : primal;
        return {
          status: "optimal",
          pivots,
          phases: { primal: before, dual: dualPivots, primalAfterDual: pivots - before - dualPivots },
        };
      }
      if (pivots >= maxPivots) return decline(pivots, `no optimum after ${maxPivots} pivots`);
      const dir = d[q]! < 0 ? 1 : -1;
      const leave = this.ratioTest(q, dir);
      if (leave === UNBOUNDED) return decline(pivots, "unbounded ray");
      const step = this.lastStep;
      x[q]! += dir * step;
      const nz = this.alphaNonzeros;
      if (step !== 0)
        for (let k = 0; k < this.alphaCount; k++) x[basicVar[nz[k]!]!]! -= dir * step * alpha[nz[k]!]!;
      if (leave === FLIP) {
        // The entering variable reached its other bound first: the basis and the duals stay.
        status[q] = status[q] === LOWER ? UPPER : LOWER;
        x[q] = status[q] === LOWER ? lower[q]! : upper[q]!;
        continue;
      }
      const out = basicVar[leave]!;
      const down = -dir * alpha[leave]! < 0;
      this.applyPivotRow(this.pivotRow(leave), q, out, alpha[leave]!);
      status[out] = down ? LOWER : UPPER;
      x[out] = down ? lower[out]! : upper[out]!;
      this.consider(out);
      status[q] = BASIC;
      basicVar[leave] = q;
      this.factor.update(leave, alpha, nz, this.alphaCount);
      if (this.factor.etaCount >= refactorEvery) {
        const reason = this.refactor();
        if (reason) return decline(pivots + 1, reason);
        this.computeDuals(cost);
      }
    }
  }

  /** y from Bᵀ·y = c_B, then every reduced cost (0 for basic variables). */
  private computeDuals(cost: ArrayLike<number>): void {
    const { n, m, status, basicVar, y, d } = this;
    const { colStart, rowIndex, value } = this.lp;
    const cB = this.posWork;
    for (let p = 0; p < m; p++) {
      const v = basicVar[p]!;
      cB[p] = v < n ? cost[v]! : 0;
    }
    this.factor.btran(cB, y);
    for (let j = 0; j < n; j++) {
      if (status[j] === BASIC) {
        d[j] = 0;
        continue;
      }
      let dj = cost[j]!;
      const end = colStart[j + 1]!;
      for (let q = colStart[j]!; q < end; q++) dj -= value[q]! * y[rowIndex[q]!]!;
      d[j] = dj;
    }
    for (let i = 0; i < m; i++) d[n + i] = status[n + i] === BASIC ? 0 : y[i]!;
    // The candidate list afresh: every nonbasic variable whose reduced cost violates optimality.
    const { candidates, inCandidates, lower, upper } = this;
    const tol = this.options.dualTolerance;
    inCandidates.fill(0);
    let count = 0;
    for (let j = 0; j < n + m; j++) {
      const st = status[j];
      if (st === BASIC || lower[j] === upper[j]) continue;
      const dj = d[j]!;
      if ((st === LOWER ? -dj : st === UPPER ? dj : Math.abs(dj)) > tol) {
        inCandidates[j] = 1;
        candidates[count++] = j;
      }
    }
    this.candidateCount = count;
  }

  /** How far variable j's reduced cost violates optimality (≤ 0 when it does not, or j cannot move). */
  private violation(j: number): number {
    const st = this.status[j];
    if (st === BASIC || this.lower[j] === this.upper[j]) return 0;
    const dj = this.d[j]!;
    return st === LOWER ? -dj : st === UPPER ? dj : Math.abs(dj);
  }

  /** Adds j to the candidate list when its reduced cost violates optimality. */
  private consider(j: number): void {
    if (this.inCandidates[j] === 0 && this.violation(j) > this.options.dualTolerance) {
      this.inCandidates[j] = 1;
      this.candidates[this.candidateCount++] = j;
    }
  }

  /**
   * Dantzig's rule over the candidate list (every variable whose reduced cost was seen to violate
   * optimality since the duals were last computed; reduced costs change only where a pivot row
   * touches): the most violating one, or −1. Candidates that no longer violate are dropped.
   */
  private choose(): number {
    const { candidates, inCandidates } = this;
    const tol = this.options.dualTolerance;
    let entering = -1;
    let worst = tol;
    for (let k = 0; k < this.candidateCount; ) {
      const j = candidates[k]!;
      const v = this.violation(j);
      if (v <= tol) {
        inCandidates[j] = 0;
        candidates[k] = candidates[--this.candidateCount]!;
        continue;
      }
      if (v > worst) {
        worst = v;
        entering = j;
      }
      k++;
    }
    return entering;
  }

  /** The step of the last {@link ratioTest}, in units of the entering variable. */
  private lastStep = 0;

  /**
   * FTRANs the entering column into `alpha` (a unit step of x_q moves x_B by −dir·α) and picks the
   * leaving position by Harris's two passes: the largest step allowed with the bounds relaxed by the
   * primal tolerance, then among the blocking variables within that step the one with the largest |α|
   * (the stablest pivot). Returns the position, FLIP when the entering variable's own range is the
   * shorter, or UNBOUNDED; the step is left in `lastStep`.
   */
  private ratioTest(q: number, dir: number): number {
    const { basicVar, x, lower, upper, alpha } = this;
    const tol = this.options.primalTolerance;
    const alphaMax = this.enteringColumn(q);
    const nz = this.alphaNonzeros;
    const count = this.alphaCount;
    const pivotTol = PIVOT_TOLERANCE * Math.max(1, alphaMax);
    const range = upper[q]! - lower[q]!;
    let relaxed = range;
    for (let k = 0; k < count; k++) {
      const p = nz[k]!;
      const a = alpha[p]!;
      if (Math.abs(a) <= pivotTol) continue;
      const v = basicVar[p]!;
      const rate = -dir * a;
      const t = rate < 0 ? (x[v]! - lower[v]! + tol) / -rate : (upper[v]! - x[v]! + tol) / rate;
      if (t < relaxed) relaxed = t;
    }
    if (relaxed === Number.POSITIVE_INFINITY) return UNBOUNDED;
    let leave = -1;
    let step = range;
    let bestAlpha = 0;
    for (let k = 0; k < count; k++) {
      const p = nz[k]!;
      const a = alpha[p]!;
      if (Math.abs(a) <= pivotTol) continue;
      const v = basicVar[p]!;
      const rate = -dir * a;
      const t = rate < 0 ? (x[v]! - lower[v]!) / -rate : (upper[v]! - x[v]!) / rate;
      if (t <= relaxed && Math.abs(a) > bestAlpha) {
        bestAlpha = Math.abs(a);
        leave = p;
        step = Math.max(0, t);
      }
    }
    if (range <= relaxed && (leave < 0 || range <= step)) {
      this.lastStep = range;
      return FLIP;
    }
    this.lastStep = step;
    return leave;
  }

  /**
   * FTRANs the column of variable q (a_q, or −e_i for row activity i) into `alpha` and lists its
   * nonzeros once in `alphaNonzeros`: every later pass over α (the ratio test, the values' update and
   * the eta column) walks the list instead of all m positions. Returns max |α|.
   */
  private enteringColumn(q: number): number {
    const { n, m, alpha } = this;
    const { colStart, rowIndex, value } = this.lp;
    const col = this.rowWork.fill(0);
    if (q >= n) col[q - n] = -1;
    else for (let k = colStart[q]!; k < colStart[q + 1]!; k++) col[rowIndex[k]!] = value[k]!;
    this.factor.ftran(col, alpha);
    const nz = this.alphaNonzeros;
    let count = 0;
    let alphaMax = 0;
    for (let p = 0; p < m; p++) {
      const a = alpha[p]!;
      if (a === 0) continue;
      nz[count++] = p;
      if (Math.abs(a) > alphaMax) alphaMax = Math.abs(a);
    }
    this.alphaCount = count;
    return alphaMax;
  }

  /**
   * Row r of B⁻¹·[A −I], the pivot row, before the factorization changes: ρ = B⁻ᵀ·e_r into `rhoWork`,
   * and ρᵀa_j into `rowAlpha` for the columns that meet ρ's nonzeros (listed in `touched`, row-wise
   * through `rows`); for row activity i the entry is −ρ_i. Returns the count of touched columns.
   */
  private pivotRow(r: number): number {
    const { rows, rowAlpha, touched, mark } = this;
    const rho = this.rhoWork;
    this.factor.btranUnit(r, rho);
    let count = 0;
    for (let i = 0; i < this.m; i++) {
      const ri = rho[i]!;
      if (ri === 0) continue;
      for (let k = rows.start[i]!; k < rows.start[i + 1]!; k++) {
        const j = rows.col[k]!;
        if (mark[j] === 0) {
          mark[j] = 1;
          touched[count++] = j;
        }
        rowAlpha[j]! += ri * rows.value[k]!;
      }
    }
    return count;
  }

  /**
   * Updates y and d with the pivot row of the last {@link pivotRow} for the pivot that brings q in and
   * takes `out` out of the basis, and clears the row: δ = d_q / α_rq, y += δ·ρ, d_j −= δ·α_rj, so
   * d_q = 0 and d_out = −δ (Chvátal 1983, ch. 8).
   */
  private applyPivotRow(touchedCount: number, q: number, out: number, alphaRq: number): void {
    const { n, status, y, d, rowAlpha, touched } = this;
    const rho = this.rhoWork;
    const delta = d[q]! / alphaRq;
    for (let i = 0; i < this.m; i++) {
      const ri = rho[i]!;
      if (ri === 0) continue;
      y[i]! += delta * ri;
      if (status[n + i] !== BASIC) {
        d[n + i] = y[i]!;
        this.consider(n + i);
      }
    }
    for (let k = 0; k < touchedCount; k++) {
      const j = touched[k]!;
      if (status[j] !== BASIC) {
        d[j]! -= delta * rowAlpha[j]!;
        this.consider(j);
      }
    }
    this.clearPivotRow(touchedCount);
    d[q] = 0;
    d[out] = -delta;
  }

  /** Zeroes the pivot row's accumulators (`rowAlpha`, `mark`) for its `touchedCount` columns. */
  private clearPivotRow(touchedCount: number): void {
    const { rowAlpha, touched, mark } = this;
    for (let k = 0; k < touchedCount; k++) {
      rowAlpha[touched[k]!] = 0;
      mark[touched[k]!] = 0;
    }
  }
}
