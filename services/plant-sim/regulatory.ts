/**
 * Simulated regulatory loops: how the plant's own control layer follows a setpoint. The target is
 * approached by a ramp-limited working setpoint (the control system's setpoint ramp), and the
 * process variable follows that working setpoint either
 *
 * - `first-order`: as a closed loop with a first-order response of time constant `closedLoopTauS`
 *   (what a well-tuned loop on a self-regulating process looks like from above), integrated exactly
 *   (the working setpoint is piecewise linear in time, so the lag has a closed form on each piece); or
 * - `pi`: as a PI controller on a first-order process `τp·dy/dt = K·m + b − y`, with output limits and
 *   conditional integration against wind-up, integrated with classical RK4 on short fixed sub-steps.
 *   Default tuning is SIMC for a first-order process without delay: Kc = τp / (K·τc), τI = min(τp, 4τc)
 *   (Skogestad 2003, "Simple analytic rules for model reduction and PID controller tuning",
 *   J. Process Control 13(4):291–309, from memory), which makes the unsaturated loop first order with τc.
 *
 * Pure: time advances only through `advance(dtS)`.
 */
import { PlantSimError } from "./errors.js";

/** How one decision's loop is simulated. */
export interface LoopSpec {
  /** Response model. Default "first-order". */
  readonly mode?: "first-order" | "pi";
  /** Closed-loop time constant τc, s. Default 60. */
  readonly closedLoopTauS?: number;
  /** Setpoint ramp limit, decision unit per s; undefined or Infinity = steps. */
  readonly rampPerS?: number;
  /** `pi` only: process gain K, decision unit per controller-output unit. Default 1. */
  readonly processGain?: number;
  /** `pi` only: process time constant τp, s. Default 3 × closedLoopTauS. */
  readonly processTauS?: number;
  /** `pi` only: controller gain; default SIMC τp/(K·τc). */
  readonly kc?: number;
  /** `pi` only: integral time, s; default SIMC min(τp, 4τc). */
  readonly tiS?: number;
  /** `pi` only: controller output limits (e.g. valve 0–100 %). Default ±Infinity. */
  readonly outMin?: number;
  /** `pi` only: see outMin. */
  readonly outMax?: number;
}

/** A snapshot of a loop. */
export interface LoopState {
  /** Where the setpoint is heading. */
  readonly target: number;
  /** Working setpoint, part way along its ramp. */
  readonly sp: number;
  /** Process variable (the decision's value in the plant). */
  readonly pv: number;
  /** Ramp rate in use, unit/s (Infinity: steps). */
  readonly rampPerS: number;
  /** `pi` only: controller output. */
  readonly out?: number;
}

/** One simulated loop. */
export interface Loop {
  /** Sets a new target; `rampPerS` overrides the loop's own rate only when slower. */
  setTarget(value: number, rampPerS?: number): void;
  /** Advances by `dtS` seconds (≥ 0). */
  advance(dtS: number): void;
  state(): LoopState;
}

/** Creates a loop at rest at `initial` (pv = sp = target). */
export function createLoop(spec: LoopSpec, initial: number): Loop {
  const mode = spec.mode ?? "first-order";
  const tauC = spec.closedLoopTauS ?? 60;
  const ownRamp = spec.rampPerS ?? Number.POSITIVE_INFINITY;
  if (!(tauC > 0))
    throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `closedLoopTauS must be > 0, got ${tauC}`);
  if (!(ownRamp > 0))
    throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `rampPerS must be > 0, got ${ownRamp}`);
  let target = initial;
  let sp = initial;
  let pv = initial;
  let ramp = ownRamp;

  // PI on a first-order process.
  const k = spec.processGain ?? 1;
  const tauP = spec.processTauS ?? 3 * tauC;
  const kc = spec.kc ?? tauP / (k * tauC);
  const ti = spec.tiS ?? Math.min(tauP, 4 * tauC);
  const outMin = spec.outMin ?? Number.NEGATIVE_INFINITY;
  const outMax = spec.outMax ?? Number.POSITIVE_INFINITY;
  if (mode === "pi" && !(k !== 0 && tauP > 0 && kc > 0 && ti > 0))
    throw new PlantSimError(
      "PLANT_SIM_CONFIG_INVALID",
      "a pi loop needs processGain ≠ 0, processTauS, kc, tiS > 0",
    );
  // At rest with the output mid-way: the process bias b makes pv = initial a steady state.
  const out0 = Number.isFinite(outMin) && Number.isFinite(outMax) ? (outMin + outMax) / 2 : 0;
  const bias = initial - k * out0;
  let integral = 0;
  let out = out0;

  /** Working setpoint after `s` seconds of ramping from `sp0` (exact, piecewise linear). */
  const spAfter = (sp0: number, s: number): number => {
    const gap = target - sp0;
    const reach = Math.abs(gap) / ramp;
    return s >= reach ? target : sp0 + Math.sign(gap) * ramp * s;
  };

  const advanceFirstOrder = (dtS: number): void => {
    let left = dtS;
    while (left > 0) {
      const gap = target - sp;
      const reach = gap === 0 ? Number.POSITIVE_INFINITY : Math.abs(gap) / ramp;
      const h = Math.min(left, reach);
      const r = gap === 0 || !Number.isFinite(ramp) ? 0 : Math.sign(gap) * ramp;
      if (!Number.isFinite(ramp) && gap !== 0) {
        sp = target;
        continue;
      }
      // τ·y' = u0 + r·s − y  ⇒  y(h) = u(h) − rτ + (y0 − u0 + rτ)·e^(−h/τ).
      const decay = Math.exp(-h / tauC);
      const u1 = sp + r * h;
      pv = u1 - r * tauC + (pv - sp + r * tauC) * decay;
      sp = h >= reach ? target : u1;
      left -= h;
    }
  };

  const piDeriv = (spNow: number, y: number, i: number): { dy: number; di: number; m: number } => {
    const e = spNow - y;
    const raw = out0 + kc * (e + i / ti);
    const m = Math.min(outMax, Math.max(outMin, raw));
    // Conditional integration: freeze the integral while the output sits on a limit and the error pushes further.
    const windup = (raw > outMax && e > 0) || (raw < outMin && e < 0);
    return { dy: (k * m + bias - y) / tauP, di: windup ? 0 : e, m };
  };

  const advancePi = (dtS: number): void => {
    const nSub = Math.max(1, Math.ceil(dtS / Math.min(tauC / 20, tauP / 20)));
    const h = dtS / nSub;
    if (!Number.isFinite(ramp)) sp = target;
    for (let s = 0; s < nSub; s += 1) {
      const sp0 = sp;
      const spMid = spAfter(sp0, h / 2);
      const sp1 = spAfter(sp0, h);
      const a = piDeriv(sp0, pv, integral);
      const b = piDeriv(spMid, pv + (h / 2) * a.dy, integral + (h / 2) * a.di);
      const c = piDeriv(spMid, pv + (h / 2) * b.dy, integral + (h / 2) * b.di);
      const d = piDeriv(sp1, pv + h * c.dy, integral + h * c.di);
      pv += (h / 6) * (a.dy + 2 * b.dy + 2 * c.dy + d.dy);
      integral += (h / 6) * (a.di + 2 * b.di + 2 * c.di + d.di);
      sp = sp1;
      out = piDeriv(sp, pv, integral).m;
    }
  };

  return {
    setTarget(value, rampPerS) {
      if (!Number.isFinite(value))
        throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `setpoint target must be finite, got ${value}`);
      target = value;
      ramp = rampPerS !== undefined && rampPerS > 0 ? Math.min(ownRamp, rampPerS) : ownRamp;
    },
    advance(dtS) {
      if (!(dtS > 0)) return;
      if (mode === "pi") advancePi(dtS);
      else advanceFirstOrder(dtS);
    },
    state() {
      return mode === "pi" ? { target, sp, pv, rampPerS: ramp, out } : { target, sp, pv, rampPerS: ramp };
    },
  };
}
