/**
 * `steadfast simulate --config <plant-sim config> --days N --out week.csv`: runs plant-sim's pure
 * simulator (no broker, no clock) and writes the measurements as a wide historian CSV (time, one
 * column per tag, tag units), e.g. for `replay` and the tests. `--moves-every-h H` steps the
 * decisions at random within their move limits every H simulated hours, so the data hold transients
 * and several steady periods.
 */

import { once } from "node:events";
import { createWriteStream } from "node:fs";
import { loadConfig, readConfigFile } from "../../services/kit/config.js";
import { loadSiteModelFile } from "../../services/model/index.js";
import {
  type PlantSimConfig,
  plantSimConfigSchema,
  simulatorOptions,
} from "../../services/plant-sim/config.js";
import { createSimulator } from "../../services/plant-sim/sim.js";
import { numberFlag, parseCommandArgs, str } from "../args.js";
import { CliError } from "../errors.js";
import type { CommandContext } from "../io.js";
import { resolvePath } from "../paths.js";

const USAGE =
  "steadfast simulate --config <plant-sim config.yaml> --days N --out <file.csv> [--start ISO] [--moves-every-h H] [--seed N]";

/** A small seeded generator (mulberry32): the same seed gives the same moves. */
export function seededRandom(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/** What a simulation wrote. */
export interface SimulateSummary {
  rows: number;
  tags: number;
  moves: number;
  simulatedS: number;
  wallMs: number;
}

/** Runs `simulate`. */
export async function simulateCommand(argv: string[], ctx: CommandContext): Promise<number> {
  const p = parseCommandArgs(
    argv,
    {
      config: { type: "string" },
      site: { type: "string" },
      days: { type: "string" },
      out: { type: "string" },
      start: { type: "string" },
      "moves-every-h": { type: "string" },
      seed: { type: "string" },
    },
    USAGE,
  );
  // --site is accepted as a synonym: the plant-sim config is the simulated site.
  const configFile = str(p, "config") ?? str(p, "site");
  const out = str(p, "out");
  if (!configFile || !out)
    throw new CliError("CLI_USAGE", `--config and --out are required\nusage: ${USAGE}`);
  const days = numberFlag(str(p, "days") ?? "1", "days", { exclusiveMin: 0, max: 366 }) ?? 1;
  const movesEveryH = numberFlag(str(p, "moves-every-h"), "moves-every-h", { exclusiveMin: 0 });
  const startText = str(p, "start") ?? "2026-01-05T00:00:00Z";
  const startMs = Date.parse(startText);
  if (!Number.isFinite(startMs))
    throw new CliError("CLI_USAGE", `--start must be an ISO 8601 time, got '${startText}'`);

  const raw = readConfigFile(resolvePath(configFile));
  const config = loadConfig<PlantSimConfig>(plantSimConfigSchema, raw);
  const o = config.plantSim;
  const seed = numberFlag(str(p, "seed"), "seed", { integer: true, min: 0 }) ?? o.seed;
  const model = await loadSiteModelFile(resolvePath(o.plantModel));
  const sim = createSimulator(model, { ...simulatorOptions(o), seed });
  const tags = model.tags.map((t) => t.id);
  const stream = createWriteStream(out, { encoding: "utf8" });
  const write = async (line: string) => {
    if (!stream.write(line)) await once(stream, "drain");
  };
  await write(`time,${tags.join(",")}\n`);

  const totalS = days * 86_400;
  const chunkS = 3_600;
  const rand = seededRandom(seed + 7);
  const summary: SimulateSummary = { rows: 0, tags: tags.length, moves: 0, simulatedS: 0, wallMs: 0 };
  const t0 = performance.now();
  let nextMoveS = movesEveryH === undefined ? Number.POSITIVE_INFINITY : movesEveryH * 3600;
  while (sim.plant.timeS < totalS - 1e-9) {
    const dt = Math.min(chunkS, totalS - sim.plant.timeS, nextMoveS - sim.plant.timeS);
    for (const b of sim.step(dt)) {
      if (b.lost) continue;
      const byTag = new Map(b.values.map((v) => [v.tag, v.value]));
      const cells = tags.map((t) => {
        const v = byTag.get(t);
        return v === undefined || !Number.isFinite(v) ? "" : String(Number(v.toPrecision(8)));
      });
      await write(`${new Date(startMs + Math.round(b.timeS * 1000)).toISOString()},${cells.join(",")}\n`);
      summary.rows++;
    }
    if (sim.plant.timeS >= nextMoveS - 1e-9) {
      for (const d of model.decisions) {
        const loop = sim.plant.loops().find((l) => l.setpointTag === d.setpointTag);
        const from = loop?.target ?? d.initial;
        const step = (d.maxMovePerCycle ?? (d.max - d.min) / 10) * (2 * rand() - 1);
        const to = Math.min(d.max, Math.max(d.min, from + step));
        if (sim.plant.setTarget(d.symbol, to).ok) summary.moves++;
      }
      nextMoveS += (movesEveryH ?? 0) * 3600;
    }
    if (ctx.signal.aborted) break;
  }
  stream.end();
  await once(stream, "finish");
  summary.simulatedS = sim.plant.timeS;
  summary.wallMs = performance.now() - t0;
  ctx.io.out(
    `wrote ${out}: ${summary.rows} rows × ${summary.tags} tags, ${(summary.simulatedS / 86_400).toFixed(2)} simulated days${summary.moves ? `, ${summary.moves} setpoint moves` : ""} in ${(summary.wallMs / 1000).toFixed(1)} s`,
  );
  return 0;
}
