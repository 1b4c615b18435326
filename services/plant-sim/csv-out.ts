/**
 * Writes what the measuring plant (sim.ts) would publish as a historian CSV in wide format
 * (time, tag1, tag2, ...), so that a simulated week can be replayed offline by ingest's CSV replay and
 * compared with a live run of the same seed.
 *
 * Reproducing a live run: the simulator's random draws happen once per hold (plant.ts) and once per
 * batch (sim.ts), so the values depend on how simulated time was cut into `step` calls. This writer
 * steps one period at a time; a live plant-sim gives the same numbers when its ticks also end on
 * period boundaries (a clock quantised to the period, see test/replay-week.int.test.ts).
 *
 * Times are written as ISO 8601 UTC with milliseconds, stamped as plant-sim stamps them
 * (`timestamps: simulated`): round(startMs + simulated s × 1000). Values are written with the shortest
 * text that reads back to the same double. A dropped-out tag leaves its cell empty; a batch lost to a
 * lost connection writes no row.
 */
import { closeSync, openSync, writeSync } from "node:fs";
import type { SiteModel } from "../model/index.js";
import { PlantSimError } from "./errors.js";
import { createSimulator, type SimulatorOptions } from "./sim.js";

/** What to write. */
export interface SimulatedCsvOptions {
  /** The plant's site model (plant.yaml): its tags are the columns, in declaration order. */
  model: SiteModel;
  /** The measuring plant's options (states, loops, seed, periodS, faults...), as plant-sim's config gives them. */
  simulator: SimulatorOptions;
  /** Simulated seconds to write, > 0. */
  durationS: number;
  /** Epoch ms of simulated time 0. */
  startMs: number;
  /** Output path (created or truncated). */
  file: string;
}

/** What was written. */
export interface SimulatedCsvResult {
  /** Data rows written (batches). */
  rows: number;
  /** Batches not written because the connection was lost. */
  lost: number;
  /** Time of the first and last row, epoch ms (NaN when none). */
  firstMs: number;
  lastMs: number;
}

/**
 * Runs the measuring plant for `durationS` simulated seconds and writes every batch to `file`.
 * Throws PLANT_SIM_CONFIG_INVALID on a bad duration, and whatever createSimulator throws.
 */
export function writeSimulatedCsv(options: SimulatedCsvOptions): SimulatedCsvResult {
  if (!(options.durationS > 0 && Number.isFinite(options.durationS)))
    throw new PlantSimError(
      "PLANT_SIM_CONFIG_INVALID",
      `durationS must be finite and > 0, got ${options.durationS}`,
    );
  const sim = createSimulator(options.model, options.simulator);
  const tags = options.model.tags.map((t) => t.id);
  const column = new Map(tags.map((t, i) => [t, i] as const));
  const result: SimulatedCsvResult = { rows: 0, lost: 0, firstMs: Number.NaN, lastMs: Number.NaN };
  const fd = openSync(options.file, "w");
  try {
    let text = `time,${tags.join(",")}\n`;
    const cells: string[] = new Array<string>(tags.length);
    const periods = Math.floor(options.durationS / sim.periodS + 1e-9);
    for (let k = 0; k < periods; k++) {
      for (const b of sim.step(sim.periodS)) {
        if (b.lost) {
          result.lost++;
          continue;
        }
        cells.fill("");
        for (const v of b.values) {
          const i = column.get(v.tag);
          if (i !== undefined) cells[i] = String(v.value);
        }
        const ms = Math.round(options.startMs + b.timeS * 1000);
        if (result.rows === 0) result.firstMs = ms;
        result.lastMs = ms;
        result.rows++;
        text += `${new Date(ms).toISOString()},${cells.join(",")}\n`;
      }
      if (text.length > 1 << 16) {
        writeSync(fd, text);
        text = "";
      }
    }
    if (text.length > 0) writeSync(fd, text);
  } finally {
    closeSync(fd);
  }
  return result;
}
