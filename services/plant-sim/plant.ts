/**
 * The simulated plant, pure: a site model's steady-state equations given dynamics (dynamics.ts),
 * integrated with Dormand–Prince 5(4) (integrator.ts), its decisions moved by simulated regulatory
 * loops (regulatory.ts), its parameters drifting (fouling) and its disturbances following a daily
 * cycle plus coloured noise. Time moves only through `step(dtS)` (simulated seconds), so a test can
 * run a simulated week in a moment and the service can run it against a scaled wall clock.
 *
 * Time is cut into hold intervals of at most `holdS`: the loops are advanced exactly over the
 * interval first, and the states are then integrated with the decisions interpolated linearly
 * between the interval's end values (a first-order hold), the disturbance noise likewise.
 */

import { createRandom, type Random } from "../kit/random.js";
import type { SiteModel } from "../model/index.js";
import { solveAtPoint } from "../model/index.js";
import { affineConversion, newMath, parseUnit, type UnitInfo } from "../model/units.js";
import { createDynamics, type Dynamics, type StateForm } from "./dynamics.js";
import { PlantSimError } from "./errors.js";
import { createDopri5, type Dopri5 } from "./integrator.js";
import { createLoop, type Loop, type LoopSpec, type LoopState } from "./regulatory.js";

/** A slow drift of a parameter or constant (e.g. a heat-transfer coefficient fouling over weeks). */
export type DriftSpec =
  | {
      readonly symbol: string;
      /** value(t) = base · (1 − fraction · (1 − e^(−t/τ))): asymptotic fouling (Kern & Seaton 1959 form, from memory). */
      readonly kind: "fouling";
      /** Fraction of the base value lost at t → ∞, 0–1. */
      readonly fraction: number;
      /** Fouling time constant, s. */
      readonly tauS: number;
    }
  | {
      readonly symbol: string;
      /** value(t) = base + ratePerS · t. */
      readonly kind: "linear";
      /** Rate, symbol unit per s. */
      readonly ratePerS: number;
    };

/** A disturbance's trajectory: base + amplitude·sin(2π(t + phaseS)/periodS) + Ornstein–Uhlenbeck noise. */
export interface DisturbanceSpec {
  readonly symbol: string;
  /** Mean value, symbol unit. Default: the model's default. */
  readonly base?: number;
  /** Amplitude of the cycle, symbol unit. Default 0. */
  readonly amplitude?: number;
  /** Period of the cycle, s. Default 86400 (a day). */
  readonly periodS?: number;
  /** Phase shift, s. Default 0. */
  readonly phaseS?: number;
  /** Stationary standard deviation of the noise, symbol unit. Default 0. */
  readonly noiseSigma?: number;
  /** Correlation time of the noise, s. Default 600. */
  readonly noiseTauS?: number;
}

/** A trip: when `symbol` leaves its limits the plant drives every decision to its safe value. */
export interface TripSpec {
  /** Unknown, decision, disturbance or output symbol watched. */
  readonly symbol: string;
  /** Trips when the value exceeds this (symbol unit). */
  readonly above?: number;
  /** Trips when the value falls below this (symbol unit). */
  readonly below?: number;
  /** Safe setpoints by decision symbol; default each decision's initial value. */
  readonly safe?: Readonly<Record<string, number>>;
}

/** Options of the simulated plant. */
export interface PlantOptions {
  /** One form per model unknown (see dynamics.ts). */
  readonly states: readonly StateForm[];
  /** Loop per decision symbol; default first-order, τc 60 s, ramp = the decision's rampPerS. */
  readonly loops?: Readonly<Record<string, LoopSpec>>;
  readonly drifts?: readonly DriftSpec[];
  readonly disturbances?: readonly DisturbanceSpec[];
  readonly trips?: readonly TripSpec[];
  /** Starting decisions (symbol unit); default each decision's initial. The plant starts at steady state there. */
  readonly initialDecisions?: Readonly<Record<string, number>>;
  /** Longest interval over which decisions are held linear, s. Default 10. */
  readonly holdS?: number;
  /** Integrator relative tolerance. Default 1e-7. */
  readonly rtol?: number;
  /** Integrator absolute tolerance per state, as a fraction of the unknown's `scale`. Default 1e-9. */
  readonly atolFraction?: number;
  /** Seed of the disturbance noise. Default 1. */
  readonly seed?: number;
}

/** A tag's true value (no noise) in the tag's unit. */
export interface TrueTagValue {
  readonly tag: string;
  readonly value: number;
}

/** Integration work done so far. */
export interface PlantStats {
  readonly rkSteps: number;
  readonly rkRejected: number;
  readonly rhsEvaluations: number;
  readonly holds: number;
  readonly lagSolves: number;
}

/** Why a setpoint was refused by the plant itself. */
export interface SetpointRefusal {
  readonly ok: false;
  readonly code: "PLANT_TRIPPED" | "PLANT_LIMIT" | "PLANT_UNIT" | "PLANT_TAG_UNKNOWN";
  readonly reason: string;
}

/** A decision's loop, named. */
export interface PlantLoop extends LoopState {
  readonly symbol: string;
  readonly setpointTag: string;
  readonly unit: string;
}

/** The simulated plant. */
export interface Plant {
  readonly model: SiteModel;
  /** Simulated seconds since start. */
  readonly timeS: number;
  /** Advances by `dtS` simulated seconds. Throws PLANT_SIM_INTEGRATION_FAILED when the integrator cannot. */
  step(dtS: number): void;
  /** Sets a decision's target in its own unit; refused outside the decision's bounds or while tripped. */
  setTarget(symbol: string, value: number, rampPerS?: number): { ok: true } | SetpointRefusal;
  /** As setTarget, by setpoint tag (a trailing `.SP` is ignored) and a value in `unit`. */
  setTargetByTag(
    tag: string,
    value: number,
    unit: string,
    rampPerS?: number,
  ): { ok: true; symbol: string } | SetpointRefusal;
  /** Holds every loop where its working setpoint is now (stops the ramps). */
  holdAll(): void;
  /** The loops' states. */
  loops(): PlantLoop[];
  /** Every symbol's current value (unknowns, decisions, parameters, disturbances, constants, outputs). */
  values(): Record<string, number>;
  /** Each site-model tag's true value in its tag unit. */
  trueTagValues(): TrueTagValue[];
  /** The active trip, if any. */
  readonly tripped: { readonly symbol: string; readonly value: number; readonly timeS: number } | undefined;
  /** Clears a trip so setpoints are accepted again. */
  resetTrip(): void;
  /** Integration work so far. */
  stats(): PlantStats;
}

/** Builds the plant at steady state at its initial decisions. Throws PlantSimError on a misfit config or an unsolvable start. */
export function createPlant(model: SiteModel, options: PlantOptions): Plant {
  const holdS = options.holdS ?? 10;
  if (!(holdS > 0)) throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `holdS must be > 0, got ${holdS}`);
  const dyn: Dynamics = createDynamics(model, options.states);
  const n = dyn.n;
  const L = model.layout;
  const slotOf = (symbol: string, what: string): number => {
    const s = L.slots.get(symbol);
    if (s === undefined)
      throw new PlantSimError(
        "PLANT_SIM_CONFIG_INVALID",
        `${what} '${symbol}' is not an input symbol of ${model.file}`,
      );
    return s;
  };
  const point = model.newPoint();
  // Prices play no part in the plant's physics; a NaN default must not poison a residual that reads one.
  const pb = L.blocks.prices;
  for (let i = 0; i < pb.symbols.length; i += 1)
    if (Number.isNaN(point[pb.offset + i])) point[pb.offset + i] = 0;

  // Decisions and their loops.
  const decisions = model.decisions;
  const decSlots = decisions.map((d) => slotOf(d.symbol, "decision"));
  const start = { ...(options.initialDecisions ?? {}) };
  for (const k of Object.keys(start))
    if (!decisions.some((d) => d.symbol === k))
      throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `initialDecisions: '${k}' is not a decision`);
  for (const k of Object.keys(options.loops ?? {}))
    if (!decisions.some((d) => d.symbol === k))
      throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `loops: '${k}' is not a decision`);
  const loops: Loop[] = decisions.map((d) => {
    const spec = options.loops?.[d.symbol] ?? {};
    return createLoop({ ...spec, rampPerS: spec.rampPerS ?? d.rampPerS }, start[d.symbol] ?? d.initial);
  });

  // Drifts.
  const drifts = (options.drifts ?? []).map((dr) => {
    const slot = slotOf(dr.symbol, "drift symbol");
    const block = L.blocks.parameters.index.has(dr.symbol) || L.blocks.constants.index.has(dr.symbol);
    if (!block)
      throw new PlantSimError(
        "PLANT_SIM_CONFIG_INVALID",
        `drift '${dr.symbol}' must be a parameter or constant`,
      );
    const good =
      dr.kind === "fouling"
        ? dr.fraction >= 0 && dr.fraction <= 1 && dr.tauS > 0
        : Number.isFinite(dr.ratePerS);
    if (!good)
      throw new PlantSimError(
        "PLANT_SIM_CONFIG_INVALID",
        `drift '${dr.symbol}': fouling needs 0 ≤ fraction ≤ 1 and tauS > 0; linear needs a finite ratePerS`,
      );
    return { spec: dr, slot, base: point[slot] as number };
  });
  const driftAt = (d: (typeof drifts)[number], t: number): number =>
    d.spec.kind === "fouling"
      ? d.base * (1 - d.spec.fraction * (1 - Math.exp(-t / d.spec.tauS)))
      : d.base + d.spec.ratePerS * t;

  // Disturbances.
  const rand: Random = createRandom(options.seed ?? 1);
  const dists = (options.disturbances ?? []).map((ds) => {
    if (!L.blocks.disturbances.index.has(ds.symbol))
      throw new PlantSimError(
        "PLANT_SIM_CONFIG_INVALID",
        `disturbance '${ds.symbol}' is not a disturbance of ${model.file}`,
      );
    const slot = slotOf(ds.symbol, "disturbance");
    const base = ds.base ?? (point[slot] as number);
    if (!Number.isFinite(base))
      throw new PlantSimError(
        "PLANT_SIM_CONFIG_INVALID",
        `disturbance '${ds.symbol}' needs a base (the model has no default)`,
      );
    return { spec: ds, slot, base, noise0: 0, noise1: 0 };
  });
  const distBase = (d: (typeof dists)[number], t: number): number =>
    d.base +
    (d.spec.amplitude ?? 0) *
      Math.sin((2 * Math.PI * (t + (d.spec.phaseS ?? 0))) / (d.spec.periodS ?? 86400));
  const db = L.blocks.disturbances;
  for (let i = 0; i < db.symbols.length; i += 1)
    if (Number.isNaN(point[db.offset + i]) && !dists.some((d) => d.slot === db.offset + i))
      throw new PlantSimError(
        "PLANT_SIM_CONFIG_INVALID",
        `disturbance '${db.symbols[i]}' has no default and no trajectory`,
      );

  // Trips.
  const trips = (options.trips ?? []).map((tr) => {
    if (tr.above === undefined && tr.below === undefined)
      throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `trip on '${tr.symbol}' needs above or below`);
    if (!L.slots.has(tr.symbol) && !L.outputIndex.has(tr.symbol))
      throw new PlantSimError(
        "PLANT_SIM_CONFIG_INVALID",
        `trip symbol '${tr.symbol}' is not in ${model.file}`,
      );
    return tr;
  });

  // Inputs at time t, with decisions and noise interpolated over the current hold [h0, h0 + hLen].
  const u0 = new Float64Array(decisions.length);
  const u1 = new Float64Array(decisions.length);
  let h0 = 0;
  let hLen = holdS;
  const setInputs = (t: number): void => {
    const w = hLen > 0 ? Math.min(1, Math.max(0, (t - h0) / hLen)) : 1;
    for (let i = 0; i < decSlots.length; i += 1)
      point[decSlots[i] as number] = (u0[i] as number) + ((u1[i] as number) - (u0[i] as number)) * w;
    for (const d of drifts) point[d.slot] = driftAt(d, t);
    for (const d of dists) point[d.slot] = distBase(d, t) + d.noise0 + (d.noise1 - d.noise0) * w;
  };

  // Start at steady state at the initial inputs.
  let timeS = 0;
  loops.forEach((l, i) => {
    u0[i] = l.state().pv;
    u1[i] = l.state().pv;
  });
  setInputs(0);
  const first = solveAtPoint(model, point);
  if (!first.converged)
    throw new PlantSimError(
      "PLANT_SIM_STEADY_STATE_FAILED",
      `the plant's steady state at its initial decisions did not solve (${first.reason}, scaled residual ${first.scaledResidualNorm.toExponential(2)})`,
    );
  const uOff = L.blocks.unknowns.offset;
  const x = Float64Array.from(point.subarray(uOff, uOff + n));
  dyn.setLagTargets(x);
  dyn.checkSigns(point);
  const lagPoint = Float64Array.from(point);

  const rk: Dopri5 = createDopri5(n, {
    rtol: options.rtol ?? 1e-7,
    atol: model.unknowns.map((u) => (options.atolFraction ?? 1e-9) * u.scale),
    maxSteps: 200_000,
  });
  let hNext: number | undefined;
  const st = { rkSteps: 0, rkRejected: 0, rhsEvaluations: 0, holds: 0, lagSolves: 0 };
  let tripped: Plant["tripped"];

  const rhs = (t: number, y: Float64Array, dy: Float64Array): void => {
    setInputs(t);
    dyn.rhs(point, y, dy);
  };

  const values = (): Record<string, number> => {
    setInputs(timeS);
    for (let j = 0; j < n; j += 1) point[uOff + j] = x[j] as number;
    const out: Record<string, number> = {};
    for (const [s, slot] of L.slots) out[s] = point[slot] as number;
    const o = model.evalOutputs(point);
    for (const [s, i] of L.outputIndex) out[s] = o[i] as number;
    return out;
  };

  const checkTrips = (): void => {
    if (tripped || trips.length === 0) return;
    const v = values();
    for (const tr of trips) {
      const val = v[tr.symbol] as number;
      if ((tr.above !== undefined && val > tr.above) || (tr.below !== undefined && val < tr.below)) {
        tripped = { symbol: tr.symbol, value: val, timeS };
        decisions.forEach((d, i) => {
          loops[i]?.setTarget(tr.safe?.[d.symbol] ?? d.initial);
        });
        return;
      }
    }
  };

  const math = newMath();
  const unitCache = new Map<string, UnitInfo | string>();
  const unitOf = (u: string): UnitInfo | string => {
    let info = unitCache.get(u);
    if (info === undefined) {
      info = parseUnit(math, u);
      unitCache.set(u, info);
    }
    return info;
  };

  const setTarget: Plant["setTarget"] = (symbol, value, rampPerS) => {
    const i = decisions.findIndex((d) => d.symbol === symbol);
    const d = decisions[i];
    const loop = loops[i];
    if (!d || !loop)
      return { ok: false, code: "PLANT_TAG_UNKNOWN", reason: `'${symbol}' is not a decision of this plant` };
    if (tripped)
      return {
        ok: false,
        code: "PLANT_TRIPPED",
        reason: `plant tripped on ${tripped.symbol} = ${tripped.value.toPrecision(5)} at t = ${tripped.timeS.toFixed(0)} s; reset the trip first`,
      };
    if (!(value >= d.min && value <= d.max))
      return {
        ok: false,
        code: "PLANT_LIMIT",
        reason: `${d.setpointTag} (${symbol}) = ${value} ${d.unit} is outside the plant's limits [${d.min}, ${d.max}] ${d.unit}`,
      };
    loop.setTarget(value, rampPerS);
    return { ok: true };
  };

  return {
    model,
    get timeS() {
      return timeS;
    },
    get tripped() {
      return tripped;
    },
    step(dtS) {
      let left = dtS;
      while (left > 1e-12) {
        const h = Math.min(holdS, left);
        h0 = timeS;
        hLen = h;
        loops.forEach((l, i) => {
          u0[i] = l.state().pv;
          l.advance(h);
          u1[i] = l.state().pv;
        });
        for (const d of dists) {
          d.noise0 = d.noise1;
          const sigma = d.spec.noiseSigma ?? 0;
          if (sigma > 0) {
            const a = Math.exp(-h / (d.spec.noiseTauS ?? 600));
            // Exact Ornstein–Uhlenbeck update over h (Gillespie 1996, Phys. Rev. E 54:2084, from memory).
            d.noise1 = d.noise0 * a + sigma * Math.sqrt(1 - a * a) * rand.normal();
          }
        }
        if (dyn.hasLag) {
          hLenTargets(h);
        }
        const r = rk.integrate(rhs, timeS, x, timeS + h, hNext);
        st.rkSteps += r.steps;
        st.rkRejected += r.rejected;
        st.rhsEvaluations += r.evaluations;
        st.holds += 1;
        if (r.reason !== "done")
          throw new PlantSimError(
            "PLANT_SIM_INTEGRATION_FAILED",
            `integration stopped at t = ${r.t.toFixed(3)} s: ${r.reason}`,
          );
        hNext = r.hNext;
        timeS += h;
        left -= h;
        checkTrips();
      }
    },
    setTarget,
    setTargetByTag(tag, value, unit, rampPerS) {
      const base = tag.replace(/\.SP$/i, "");
      const d = decisions.find((x) => x.setpointTag === base || x.setpointTag === tag);
      if (!d)
        return { ok: false, code: "PLANT_TAG_UNKNOWN", reason: `no decision has setpoint tag '${tag}'` };
      let v = value;
      let r = rampPerS;
      if (unit !== d.unit) {
        const from = unitOf(unit);
        const to = unitOf(d.unit);
        if (typeof from === "string" || typeof to === "string" || from.dims.join() !== to.dims.join())
          return {
            ok: false,
            code: "PLANT_UNIT",
            reason: `${tag}: unit '${unit}' cannot be converted to the decision's unit '${d.unit}'`,
          };
        const c = affineConversion(from, to);
        v = c.scale * value + c.offset;
        if (r !== undefined) r *= c.scale;
      }
      const res = setTarget(d.symbol, v, r);
      return res.ok ? { ok: true, symbol: d.symbol } : res;
    },
    holdAll() {
      loops.forEach((l) => {
        const s = l.state();
        l.setTarget(s.sp, s.rampPerS);
      });
    },
    loops() {
      return decisions.map((d, i) => ({
        ...(loops[i] as Loop).state(),
        symbol: d.symbol,
        setpointTag: d.setpointTag,
        unit: d.unit,
      }));
    },
    values,
    trueTagValues() {
      const v = values();
      return model.tags.map((t) => ({
        tag: t.id,
        // toModel maps tag → model unit (model = scale·tag + offset); invert it.
        value: ((v[t.variable] as number) - t.toModel.offset) / t.toModel.scale,
      }));
    },
    resetTrip() {
      tripped = undefined;
    },
    stats() {
      return { ...st };
    },
  };

  /** Re-solves the steady state at the inputs at the end of the coming hold, for the lag states' targets. */
  function hLenTargets(h: number): void {
    const saved = timeS;
    setInputs(saved + h);
    lagPoint.set(point);
    lagPoint.set(x, uOff);
    const r = solveAtPoint(model, lagPoint);
    st.lagSolves += 1;
    if (!r.converged)
      throw new PlantSimError(
        "PLANT_SIM_STEADY_STATE_FAILED",
        `lag targets: steady state at t = ${(saved + h).toFixed(0)} s did not solve (${r.reason})`,
      );
    dyn.setLagTargets(lagPoint.subarray(uOff, uOff + n));
  }
}
