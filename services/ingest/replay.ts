/**
 * Historian CSV replay: reads a long- or wide-format CSV (csv.ts, time-zone aware) and feeds every
 * batch through the same pure pipeline as live ingest, as fast as it can (or at a chosen speed-up).
 * The pipeline's clock is the data's own time, so staleness is judged as it was when the data were
 * recorded. Results go to a callback (offline use) and/or out on the bus as rto.measurements.v1 on
 * rto.<site>.measurements, exactly as live ingest would publish them.
 */
import { createReadStream, statSync } from "node:fs";
import cliProgress from "cli-progress";
import type { Bus } from "../kit/bus.js";
import { createEvent, type Emitter, encodeEvent } from "../kit/envelope.js";
import type { Measurements, TagHealth } from "../kit/generated/messages.js";
import { schemaRegistry } from "../kit/schemas.js";
import { subject } from "../kit/subjects.js";
import type { SiteModel } from "../model/index.js";
import { type CsvBatch, type CsvOptions, readHistorianCsv } from "./csv.js";
import { IngestError } from "./errors.js";
import { createPipeline, type MeasuredValue, type PipelineOptions } from "./pipeline.js";
import { TAG_STATUSES, type TagStatus } from "./rules.js";

/** Replay options. */
export interface ReplayOptions {
  /** The site model whose tags, limits and source mappings judge the data. */
  model: SiteModel;
  /** CSV file path (its size drives the progress bar). Give this or `input`. */
  file?: string;
  /** Any stream of CSV text or bytes, instead of `file`. */
  input?: AsyncIterable<string | Uint8Array>;
  /** CSV reader options (format, time zone, DST handling...). Default: csv.ts defaults (auto format, UTC). */
  csv?: CsvOptions;
  /** Pipeline options. Default: the pipeline's defaults. */
  pipeline?: PipelineOptions;
  /** Source name: the key for source mappings with a `topic`, and the `source` of published batches. Default "csv-replay". */
  sourceName?: string;
  /** Called with each judged batch, in file order (offline replay). Default none. */
  onBatch?: (data: Measurements, batch: CsvBatch) => void | Promise<void>;
  /** Publish each batch as rto.measurements.v1 on rto.<site>.measurements of this bus. Default none. */
  publish?: { bus: Bus; site: string; instance?: string };
  /**
   * Plant time per wall time: 60 replays an hour in a minute. Default Infinity: as fast as possible.
   */
  speedup?: number;
  /** Show a progress bar (needs `file`, whose size is the bar's total). Default: when `progressStream` is a TTY. */
  progress?: boolean;
  /** Where the progress bar is drawn. Default process.stderr, so that stdout stays clean for data. */
  progressStream?: NodeJS.WritableStream & { isTTY?: boolean };
}

/** What a replay did. */
export interface ReplayResult {
  batches: number;
  values: number;
  /** Values that were not good (unknown tags included). */
  rejected: number;
  /** Values per verdict. */
  counts: Record<TagStatus, number>;
  /** Time of the first and last batch, epoch ms (NaN when the file had none). */
  firstMs: number;
  lastMs: number;
  /** Tag health at the end of the replay (at the last batch's time). */
  health: TagHealth;
}

async function* countingBytes(
  source: AsyncIterable<string | Uint8Array>,
  onBytes: (n: number) => void,
): AsyncGenerator<string | Uint8Array> {
  for await (const chunk of source) {
    onBytes(typeof chunk === "string" ? Buffer.byteLength(chunk) : chunk.byteLength);
    yield chunk;
  }
}

const sleep = (ms: number) => new Promise((r) => setTimeout(r, ms));

/**
 * Replays a historian CSV through the ingest pipeline. Throws IngestError INGEST_REPLAY_OPTIONS when
 * neither `onBatch` nor `publish` is given (nothing would see the result) or `speedup` is not > 0,
 * and the CSV reader's errors (INGEST_CSV_*, with the line) on a bad file.
 */
export async function replayCsv(options: ReplayOptions): Promise<ReplayResult> {
  if (!options.onBatch && !options.publish) {
    throw new IngestError("INGEST_REPLAY_OPTIONS", "replayCsv needs onBatch, publish, or both");
  }
  const speedup = options.speedup ?? Number.POSITIVE_INFINITY;
  if (!(speedup > 0)) throw new IngestError("INGEST_REPLAY_OPTIONS", `speedup must be > 0, got ${speedup}`);
  if ((options.file === undefined) === (options.input === undefined)) {
    throw new IngestError("INGEST_REPLAY_OPTIONS", "give exactly one of file and input");
  }
  const sourceName = options.sourceName ?? "csv-replay";
  const pipeline = createPipeline(options.model, options.pipeline);
  let dataNowMs = 0;
  const emitter: Emitter | undefined = options.publish && {
    site: options.publish.site,
    service: "replay",
    instance: options.publish.instance ?? "0",
    // Events are stamped with the data's time, so a replayed day reads like the day it was.
    clock: { now: () => dataNowMs },
    registry: schemaRegistry(),
  };
  const to = options.publish && subject(options.publish.site, "measurements");

  let bar: cliProgress.SingleBar | undefined;
  let bytes = 0;
  let input: AsyncIterable<string | Uint8Array>;
  if (options.file !== undefined) {
    const total = statSync(options.file).size;
    const stream = options.progressStream ?? process.stderr;
    if (options.progress ?? stream.isTTY === true) {
      bar = new cliProgress.SingleBar(
        {
          format: "replay |{bar}| {percentage}% | {batches} batches | {rejected} rejected | {time}",
          hideCursor: true,
          stream,
          // Without a TTY the bar still prints a line now and then (every notTTYSchedule ms) and at the end.
          noTTYOutput: true,
        },
        cliProgress.Presets.shades_classic,
      );
      bar.start(total, 0, { batches: 0, rejected: 0, time: "" });
    }
    input = countingBytes(createReadStream(options.file), (n) => {
      bytes += n;
    });
  } else {
    input = options.input as AsyncIterable<string | Uint8Array>;
  }

  const counts = {} as Record<TagStatus, number>;
  for (const s of TAG_STATUSES) counts[s] = 0;
  const result = { batches: 0, values: 0, rejected: 0, firstMs: Number.NaN, lastMs: Number.NaN };
  let wallStart = 0;
  try {
    for await (const batch of readHistorianCsv(input, options.csv)) {
      dataNowMs = batch.time;
      if (result.batches === 0) {
        result.firstMs = batch.time;
        wallStart = performance.now();
      } else if (Number.isFinite(speedup)) {
        const dueMs = (batch.time - result.firstMs) / speedup - (performance.now() - wallStart);
        if (dueMs > 1) await sleep(dueMs);
      }
      result.lastMs = batch.time;
      const out = pipeline.process(
        sourceName,
        batch.values.map((v) => ({ name: v.tagId, value: v.value, timeMs: batch.time, quality: v.quality })),
        batch.time,
      );
      result.batches++;
      result.rejected += out.rejected;
      for (const v of out.values) {
        result.values++;
        counts[(v.status ?? "good") as TagStatus]++;
      }
      for (let k = 0; k < out.values.length; k += 5000) {
        const chunk = out.values.slice(k, k + 5000) as [MeasuredValue, ...MeasuredValue[]];
        const data: Measurements = { source: sourceName.slice(0, 80), values: chunk };
        if (options.onBatch) await options.onBatch(data, batch);
        if (emitter && to && options.publish) {
          const event = createEvent(emitter, "rto.measurements.v1", data);
          await options.publish.bus.publish(to, encodeEvent(event), { msgId: event.id });
        }
      }
      bar?.update(bytes, {
        batches: result.batches,
        rejected: result.rejected,
        time: new Date(batch.time).toISOString(),
      });
    }
  } finally {
    bar?.stop();
  }
  // The report covers the whole replay: its "interval" is the span of the data (at least 1 s).
  const spanS = Number.isFinite(result.lastMs - result.firstMs) ? (result.lastMs - result.firstMs) / 1000 : 0;
  return { ...result, counts, health: pipeline.health(dataNowMs, Math.max(1, Math.min(86_400, spanS))) };
}
