/**
 * Sensor and link faults injected into the plant's published measurements, so the pipeline's data
 * checks can be exercised on purpose: a stuck sensor, a single spike, a drift, a bias, a dropout, a
 * noise burst, and a lost connection. Faults act on the noisy measured values (as a real failing
 * transmitter would), in tag units, between `startS` and `startS + durationS` simulated seconds.
 *
 * Pure: time and the random source come in as arguments.
 */

import type { Random } from "../kit/random.js";
import { PlantSimError } from "./errors.js";

/** The kinds of fault. */
export const FAULT_KINDS = [
  "stuck",
  "spike",
  "drift",
  "bias",
  "dropout",
  "noise-burst",
  "lost-connection",
] as const;

/** A kind of fault. */
export type FaultKind = (typeof FAULT_KINDS)[number];

/** One fault. */
export interface FaultSpec {
  readonly kind: FaultKind;
  /** Tag id; every kind but `lost-connection` needs one. */
  readonly tag?: string;
  /** Start, simulated seconds since the plant started. */
  readonly startS: number;
  /** Length, simulated s; absent = until cleared. A spike lasts one batch whatever this says. */
  readonly durationS?: number;
  /** `spike`: offset added to one value, tag unit (default 20 σ); `bias`: offset, tag unit (default 10 σ). */
  readonly magnitude?: number;
  /** `drift`: ramp added, tag unit per simulated s (default σ per 60 s). */
  readonly ratePerS?: number;
  /** `noise-burst`: the measurement's σ is multiplied by this (default 5, > 1). */
  readonly factor?: number;
}

/** A measured value on its way out; `value` in the tag's unit. */
export interface MeasuredValue {
  readonly tag: string;
  readonly value: number;
}

/** Holds the faults and applies them to each batch. */
export interface FaultInjector {
  /** Adds a fault. Throws PLANT_SIM_CONFIG_INVALID when it lacks a tag or has a bad number. */
  add(fault: FaultSpec): void;
  /** Removes every fault (of one tag, when given; "lost-connection" faults have no tag: pass "*"). */
  clear(tag?: string): void;
  /** Faults in force at `timeS`. */
  active(timeS: number): FaultSpec[];
  /**
   * Applies the faults in force at `timeS` to a batch. Returns undefined when the connection is
   * lost (nothing is published), else the batch with values altered or dropped.
   */
  apply(
    timeS: number,
    batch: readonly MeasuredValue[],
    sigmaOf: (tag: string) => number,
    rand: Random,
  ): MeasuredValue[] | undefined;
}

interface Held {
  spec: FaultSpec;
  frozen: number | undefined;
  fired: boolean;
}

/** Creates an injector with the given faults. */
export function createFaultInjector(faults: readonly FaultSpec[] = []): FaultInjector {
  const held: Held[] = [];
  const live = (h: Held, t: number): boolean =>
    t >= h.spec.startS && (h.spec.durationS === undefined || t < h.spec.startS + h.spec.durationS);

  const injector: FaultInjector = {
    add(f) {
      if (!FAULT_KINDS.includes(f.kind))
        throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `unknown fault kind '${String(f.kind)}'`);
      if (f.kind !== "lost-connection" && !f.tag)
        throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `a ${f.kind} fault needs a tag`);
      if (!Number.isFinite(f.startS) || (f.durationS !== undefined && !(f.durationS > 0)))
        throw new PlantSimError(
          "PLANT_SIM_CONFIG_INVALID",
          `fault ${f.kind} on ${f.tag ?? "*"}: bad start or duration`,
        );
      if (f.kind === "noise-burst" && f.factor !== undefined && !(f.factor > 1))
        throw new PlantSimError(
          "PLANT_SIM_CONFIG_INVALID",
          `noise-burst factor must be > 1, got ${f.factor}`,
        );
      held.push({ spec: f, frozen: undefined, fired: false });
    },
    clear(tag) {
      for (let i = held.length - 1; i >= 0; i -= 1) {
        const h = held[i] as Held;
        if (tag === undefined || (h.spec.tag ?? "*") === tag) held.splice(i, 1);
      }
    },
    active(t) {
      return held.filter((h) => live(h, t) && !(h.spec.kind === "spike" && h.fired)).map((h) => h.spec);
    },
    apply(t, batch, sigmaOf, rand) {
      const now = held.filter((h) => live(h, t));
      if (now.some((h) => h.spec.kind === "lost-connection")) return undefined;
      const out: MeasuredValue[] = [];
      for (const m of batch) {
        let value = m.value;
        let dropped = false;
        for (const h of now) {
          const f = h.spec;
          if (f.tag !== m.tag) continue;
          const sigma = sigmaOf(m.tag);
          switch (f.kind) {
            case "stuck":
              h.frozen ??= value;
              value = h.frozen;
              break;
            case "spike":
              if (!h.fired) {
                value += f.magnitude ?? 20 * sigma;
                h.fired = true;
              }
              break;
            case "drift":
              value += (f.ratePerS ?? sigma / 60) * (t - f.startS);
              break;
            case "bias":
              value += f.magnitude ?? 10 * sigma;
              break;
            case "dropout":
              dropped = true;
              break;
            case "noise-burst": {
              // Independent extra noise with variance σ²(k² − 1) makes the total σ·k.
              const k = f.factor ?? 5;
              value += sigma * Math.sqrt(k * k - 1) * rand.normal();
              break;
            }
            case "lost-connection":
              break;
            default: {
              const never: never = f.kind;
              throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `unknown fault kind '${String(never)}'`);
            }
          }
        }
        if (!dropped) out.push({ tag: m.tag, value });
      }
      return out;
    },
  };
  for (const f of faults) injector.add(f);
  return injector;
}
