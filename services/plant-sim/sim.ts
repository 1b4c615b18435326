/**
 * The measuring plant, pure: the simulated plant (plant.ts) sampled every `periodS` simulated
 * seconds, each tag's true value plus Gaussian noise of the tag's sigma (seeded), then the injected
 * faults (faults.ts). `step(dtS)` runs any stretch of simulated time without a broker or a clock
 * and returns the batches that fell due, so a test can run a simulated week in seconds.
 */

import { createRandom } from "../kit/random.js";
import type { SiteModel } from "../model/index.js";
import { PlantSimError } from "./errors.js";
import { createFaultInjector, type FaultInjector, type FaultSpec, type MeasuredValue } from "./faults.js";
import { createPlant, type Plant, type PlantOptions } from "./plant.js";

/** Options of the measuring plant. */
export interface SimulatorOptions extends PlantOptions {
  /** Simulated seconds between measurement batches. Default 10. */
  readonly periodS?: number;
  /** Faults from the start (startS in simulated seconds since start). Default none. */
  readonly faults?: readonly FaultSpec[];
  /** Seed of the measurement noise (the plant's own noise uses `seed`). Default seed + 1. */
  readonly measurementSeed?: number;
  /** Multiplies every tag's sigma (0 gives noise-free values). Default 1. */
  readonly noiseScale?: number;
}

/** One batch that fell due: its simulated time and the values, or `lost` when the link was down. */
export type SimBatch =
  | { readonly timeS: number; readonly lost: false; readonly values: MeasuredValue[] }
  | { readonly timeS: number; readonly lost: true };

/** The measuring plant. */
export interface Simulator {
  readonly plant: Plant;
  readonly faults: FaultInjector;
  readonly periodS: number;
  /** Advances `dtS` simulated seconds; returns the batches due on the way (at multiples of periodS). */
  step(dtS: number): SimBatch[];
  /** A batch at the current time (noise and faults applied), outside the period schedule. */
  sample(): SimBatch;
}

/** Creates the measuring plant at steady state. Throws PlantSimError on a misfit config. */
export function createSimulator(model: SiteModel, options: SimulatorOptions): Simulator {
  const periodS = options.periodS ?? 10;
  if (!(periodS > 0))
    throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", `periodS must be > 0, got ${periodS}`);
  const plant = createPlant(model, options);
  const faults = createFaultInjector();
  for (const f of options.faults ?? []) {
    if (f.tag !== undefined && !model.tagById.has(f.tag))
      throw new PlantSimError(
        "PLANT_SIM_CONFIG_INVALID",
        `fault on '${f.tag}': no such tag in ${model.file}`,
      );
    faults.add(f);
  }
  const rand = createRandom(options.measurementSeed ?? (options.seed ?? 1) + 1);
  const noiseScale = options.noiseScale ?? 1;
  const sigma = new Map(model.tags.map((t) => [t.id, t.sigma * noiseScale]));
  const sigmaOf = (tag: string): number => sigma.get(tag) ?? 0;
  let next = periodS;

  const sample = (): SimBatch => {
    const t = plant.timeS;
    const noisy = plant
      .trueTagValues()
      .map((v) => ({ tag: v.tag, value: v.value + sigmaOf(v.tag) * rand.normal() }));
    const out = faults.apply(t, noisy, sigmaOf, rand);
    return out === undefined ? { timeS: t, lost: true } : { timeS: t, lost: false, values: out };
  };

  return {
    plant,
    faults,
    periodS,
    step(dtS) {
      const end = plant.timeS + dtS;
      const batches: SimBatch[] = [];
      // Step exactly onto each period boundary so batches are stamped on the grid.
      while (next <= end + 1e-9) {
        plant.step(next - plant.timeS);
        batches.push(sample());
        next += periodS;
      }
      if (end > plant.timeS) plant.step(end - plant.timeS);
      return batches;
    },
    sample,
  };
}
