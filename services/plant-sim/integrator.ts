/**
 * Adaptive explicit Runge–Kutta integration with the Dormand–Prince 5(4) pair: 7 stages, the last
 * one re-used as the first of the next step (FSAL), the 5th-order solution propagated (local
 * extrapolation) and the embedded 4th-order one used only for the error estimate.
 *
 * Source: Dormand & Prince (1980), "A family of embedded Runge-Kutta formulae", J. Comp. Appl. Math.
 * 6(1):19–26, table of coefficients (published). Step-size control and the starting-step heuristic:
 * Hairer, Nørsett & Wanner (1993), Solving Ordinary Differential Equations I, 2nd ed., §II.4
 * (from memory): err = RMS of e_i / (atol_i + rtol·max(|y0_i|, |y1_i|)), accept when err ≤ 1,
 * h_new = h·min(facMax, max(facMin, 0.9·err^(−1/5))).
 *
 * Pure: no clock, no allocation per step once created (work arrays live in the integrator).
 */

/** Right-hand side of y' = f(t, y): writes f(t, y) into `dydt`. Must not keep `y` or `dydt`. */
export type OdeRhs = (t: number, y: Float64Array, dydt: Float64Array) => void;

/** Options of the Dormand–Prince integrator. */
export interface Dopri5Options {
  /** Relative tolerance per component. Default 1e-6. */
  readonly rtol?: number;
  /** Absolute tolerance, one value for all components or one per component (state units). Default 1e-9. */
  readonly atol?: number | ArrayLike<number>;
  /** Largest step, in the time unit of t (seconds here). Default: unbounded. */
  readonly maxStep?: number;
  /** Accepted-plus-rejected step limit per `integrate` call. Default 100000. */
  readonly maxSteps?: number;
  /** Smallest step before giving up, relative to |t|+1. Default 1e-12. */
  readonly minStepRel?: number;
}

/** Why an integration stopped; only `done` reached t1. */
export type Dopri5Reason = "done" | "max-steps" | "step-too-small" | "non-finite";

/** Outcome of one `integrate` call. `y` (the caller's array) holds the state at `t`. */
export interface Dopri5Result {
  readonly reason: Dopri5Reason;
  /** Time reached (t1 when `reason` is "done"). */
  readonly t: number;
  /** Accepted steps. */
  readonly steps: number;
  /** Rejected steps (error estimate above tolerance). */
  readonly rejected: number;
  /** Right-hand-side evaluations. */
  readonly evaluations: number;
  /** Step size proposed for the next call (pass it back as `hInit` to avoid a fresh start). */
  readonly hNext: number;
}

// Dormand & Prince (1980), coefficients of RK5(4)7M (published).
const C2 = 1 / 5;
const C3 = 3 / 10;
const C4 = 4 / 5;
const C5 = 8 / 9;
const A21 = 1 / 5;
const A31 = 3 / 40;
const A32 = 9 / 40;
const A41 = 44 / 45;
const A42 = -56 / 15;
const A43 = 32 / 9;
const A51 = 19372 / 6561;
const A52 = -25360 / 2187;
const A53 = 64448 / 6561;
const A54 = -212 / 729;
const A61 = 9017 / 3168;
const A62 = -355 / 33;
const A63 = 46732 / 5247;
const A64 = 49 / 176;
const A65 = -5103 / 18656;
const B1 = 35 / 384;
const B3 = 500 / 1113;
const B4 = 125 / 192;
const B5 = -2187 / 6784;
const B6 = 11 / 84;
// e_i = b_i − b*_i, with b* the 4th-order weights 5179/57600, 0, 7571/16695, 393/640, −92097/339200, 187/2100, 1/40.
const E1 = 71 / 57600;
const E3 = -71 / 16695;
const E4 = 71 / 1920;
const E5 = -17253 / 339200;
const E6 = 22 / 525;
const E7 = -1 / 40;

/** A Dormand–Prince integrator for systems of `n` equations, with its work arrays allocated once. */
export interface Dopri5 {
  readonly n: number;
  /**
   * Advances `y` (in place) from t0 to t1 (t1 > t0). `hInit` is a starting step (e.g. the previous
   * call's `hNext`); without it a step is chosen from the derivatives (Hairer et al. 1993, §II.4).
   * Never throws for numerical trouble: `reason` says why it stopped and `y` holds the last accepted state.
   */
  integrate(f: OdeRhs, t0: number, y: Float64Array, t1: number, hInit?: number): Dopri5Result;
}

/** Creates a Dormand–Prince 5(4) integrator for `n` equations. */
export function createDopri5(n: number, options: Dopri5Options = {}): Dopri5 {
  const rtol = options.rtol ?? 1e-6;
  const atolOpt = options.atol ?? 1e-9;
  const atol = new Float64Array(n);
  for (let i = 0; i < n; i += 1)
    atol[i] = typeof atolOpt === "number" ? atolOpt : (atolOpt[i] ?? (atolOpt[0] as number));
  const maxStep = options.maxStep ?? Number.POSITIVE_INFINITY;
  const maxSteps = options.maxSteps ?? 100_000;
  const minStepRel = options.minStepRel ?? 1e-12;
  const k1 = new Float64Array(n);
  const k2 = new Float64Array(n);
  const k3 = new Float64Array(n);
  const k4 = new Float64Array(n);
  const k5 = new Float64Array(n);
  const k6 = new Float64Array(n);
  const k7 = new Float64Array(n);
  const yt = new Float64Array(n);
  const y1 = new Float64Array(n);

  const finite = (a: Float64Array): boolean => {
    for (let i = 0; i < n; i += 1) if (!Number.isFinite(a[i] as number)) return false;
    return true;
  };

  /** Hairer, Nørsett & Wanner (1993) §II.4 starting step for a method of order 5 (from memory). */
  const initialStep = (f: OdeRhs, t0: number, y: Float64Array, span: number): number => {
    let d0 = 0;
    let d1 = 0;
    for (let i = 0; i < n; i += 1) {
      const sc = (atol[i] as number) + rtol * Math.abs(y[i] as number);
      d0 += ((y[i] as number) / sc) ** 2;
      d1 += ((k1[i] as number) / sc) ** 2;
    }
    d0 = Math.sqrt(d0 / Math.max(1, n));
    d1 = Math.sqrt(d1 / Math.max(1, n));
    let h0 = d0 < 1e-5 || d1 < 1e-5 ? 1e-6 : (0.01 * d0) / d1;
    h0 = Math.min(h0, span, maxStep);
    for (let i = 0; i < n; i += 1) yt[i] = (y[i] as number) + h0 * (k1[i] as number);
    f(t0 + h0, yt, k2);
    let d2 = 0;
    for (let i = 0; i < n; i += 1) {
      const sc = (atol[i] as number) + rtol * Math.abs(y[i] as number);
      d2 += (((k2[i] as number) - (k1[i] as number)) / sc) ** 2;
    }
    d2 = Math.sqrt(d2 / Math.max(1, n)) / h0;
    const dm = Math.max(d1, d2);
    const h1 = dm <= 1e-15 ? Math.max(1e-6, h0 * 1e-3) : (0.01 / dm) ** (1 / 5);
    return Math.min(100 * h0, h1, span, maxStep);
  };

  return {
    n,
    integrate(f, t0, y, t1, hInit) {
      let t = t0;
      let steps = 0;
      let rejected = 0;
      let evaluations = 0;
      if (!(t1 > t0)) return { reason: "done", t, steps, rejected, evaluations, hNext: hInit ?? 0 };
      f(t, y, k1);
      evaluations += 1;
      if (!finite(k1)) return { reason: "non-finite", t, steps, rejected, evaluations, hNext: hInit ?? 0 };
      let h: number;
      if (hInit !== undefined && hInit > 0) h = Math.min(hInit, maxStep);
      else {
        h = initialStep(f, t0, y, t1 - t0);
        evaluations += 1;
      }
      let lastRejected = false;
      while (t < t1) {
        if (steps + rejected >= maxSteps)
          return { reason: "max-steps", t, steps, rejected, evaluations, hNext: h };
        if (h < minStepRel * (Math.abs(t) + 1))
          return { reason: "step-too-small", t, steps, rejected, evaluations, hNext: h };
        // Land exactly on t1 rather than overshoot and interpolate (no dense output needed here).
        const last = t + h >= t1 || t + 1.0001 * h >= t1;
        const hs = last ? t1 - t : h;
        for (let i = 0; i < n; i += 1) yt[i] = (y[i] as number) + hs * A21 * (k1[i] as number);
        f(t + C2 * hs, yt, k2);
        for (let i = 0; i < n; i += 1)
          yt[i] = (y[i] as number) + hs * (A31 * (k1[i] as number) + A32 * (k2[i] as number));
        f(t + C3 * hs, yt, k3);
        for (let i = 0; i < n; i += 1)
          yt[i] =
            (y[i] as number) +
            hs * (A41 * (k1[i] as number) + A42 * (k2[i] as number) + A43 * (k3[i] as number));
        f(t + C4 * hs, yt, k4);
        for (let i = 0; i < n; i += 1)
          yt[i] =
            (y[i] as number) +
            hs *
              (A51 * (k1[i] as number) +
                A52 * (k2[i] as number) +
                A53 * (k3[i] as number) +
                A54 * (k4[i] as number));
        f(t + C5 * hs, yt, k5);
        for (let i = 0; i < n; i += 1)
          yt[i] =
            (y[i] as number) +
            hs *
              (A61 * (k1[i] as number) +
                A62 * (k2[i] as number) +
                A63 * (k3[i] as number) +
                A64 * (k4[i] as number) +
                A65 * (k5[i] as number));
        f(t + hs, yt, k6);
        for (let i = 0; i < n; i += 1)
          y1[i] =
            (y[i] as number) +
            hs *
              (B1 * (k1[i] as number) +
                B3 * (k3[i] as number) +
                B4 * (k4[i] as number) +
                B5 * (k5[i] as number) +
                B6 * (k6[i] as number));
        f(t + hs, y1, k7);
        evaluations += 6;
        let err = 0;
        let ok = finite(y1) && finite(k7);
        if (ok) {
          for (let i = 0; i < n; i += 1) {
            const e =
              hs *
              (E1 * (k1[i] as number) +
                E3 * (k3[i] as number) +
                E4 * (k4[i] as number) +
                E5 * (k5[i] as number) +
                E6 * (k6[i] as number) +
                E7 * (k7[i] as number));
            const sc =
              (atol[i] as number) + rtol * Math.max(Math.abs(y[i] as number), Math.abs(y1[i] as number));
            err += (e / sc) ** 2;
          }
          err = Math.sqrt(err / Math.max(1, n));
          ok = Number.isFinite(err);
        }
        if (!ok) {
          // A non-finite trial (e.g. exp overflow far from the path) is treated as a failed step.
          rejected += 1;
          h = hs * 0.1;
          lastRejected = true;
          continue;
        }
        if (err <= 1) {
          t = last ? t1 : t + hs;
          y.set(y1);
          k1.set(k7);
          steps += 1;
          // After a rejection do not grow the step at once (Hairer et al. 1993, §II.4).
          const grow = err === 0 ? 5 : Math.min(5, Math.max(0.2, 0.9 * err ** -0.2));
          const hProp = Math.min(maxStep, hs * (lastRejected ? Math.min(1, grow) : grow));
          // Keep the unclipped step when the last step was shortened only to land on t1.
          h = last ? Math.max(hProp, h) : hProp;
          lastRejected = false;
        } else {
          rejected += 1;
          h = hs * Math.max(0.2, 0.9 * err ** -0.2);
          lastRejected = true;
        }
      }
      return { reason: "done", t, steps, rejected, evaluations, hNext: Math.min(h, maxStep) };
    },
  };
}
