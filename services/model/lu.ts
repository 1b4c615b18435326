/**
 * Dense LU with partial pivoting on a row-major Float64Array, in place. Steady-state models here have
 * tens to a few hundred unknowns, where a hand-written LU beats building ml-matrix objects per step.
 */

/**
 * Factors the n×n row-major matrix `a` in place (L below the diagonal with unit diagonal, U on and
 * above) and writes the row permutation into `pivot`. Returns false when a pivot is below
 * `singularTol` times the largest absolute entry of the original matrix (singular for our purposes).
 */
export function luFactor(a: Float64Array, n: number, pivot: Int32Array, singularTol = 1e-13): boolean {
  let largest = 0;
  for (let k = 0; k < n * n; k += 1) largest = Math.max(largest, Math.abs(a[k] as number));
  if (!(largest > 0) || !Number.isFinite(largest)) return false;
  const floor = singularTol * largest;
  for (let i = 0; i < n; i += 1) pivot[i] = i;
  for (let k = 0; k < n; k += 1) {
    let p = k;
    let best = Math.abs(a[k * n + k] as number);
    for (let i = k + 1; i < n; i += 1) {
      const v = Math.abs(a[i * n + k] as number);
      if (v > best) {
        best = v;
        p = i;
      }
    }
    if (!(best > floor)) return false;
    if (p !== k) {
      for (let j = 0; j < n; j += 1) {
        const t = a[k * n + j] as number;
        a[k * n + j] = a[p * n + j] as number;
        a[p * n + j] = t;
      }
      const t = pivot[k] as number;
      pivot[k] = pivot[p] as number;
      pivot[p] = t;
    }
    const d = a[k * n + k] as number;
    for (let i = k + 1; i < n; i += 1) {
      const f = (a[i * n + k] as number) / d;
      if (f === 0) continue;
      a[i * n + k] = f;
      for (let j = k + 1; j < n; j += 1)
        a[i * n + j] = (a[i * n + j] as number) - f * (a[k * n + j] as number);
    }
  }
  return true;
}

/** Solves A·x = b with the factors from `luFactor`; `b` is overwritten with x and returned. */
export function luSolve(lu: Float64Array, n: number, pivot: Int32Array, b: Float64Array): Float64Array {
  const y = new Float64Array(n);
  for (let i = 0; i < n; i += 1) {
    let s = b[pivot[i] as number] as number;
    for (let j = 0; j < i; j += 1) s -= (lu[i * n + j] as number) * (y[j] as number);
    y[i] = s;
  }
  for (let i = n - 1; i >= 0; i -= 1) {
    let s = y[i] as number;
    for (let j = i + 1; j < n; j += 1) s -= (lu[i * n + j] as number) * (b[j] as number);
    b[i] = s / (lu[i * n + i] as number);
  }
  return b;
}
