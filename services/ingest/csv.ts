/**
 * Historian CSV replay: long format (time, tag, value[, quality]) and wide format (time, tag1, tag2, ...),
 * read line by line from a stream and yielded as batches of values that share one timestamp.
 *
 * Times: ISO 8601 with an offset ("2024-03-10T02:30:00-05:00", "...Z") are exact; naive times
 * ("2024-03-10 02:30:00") are wall-clock times in a configured IANA zone, converted with
 * Intl.DateTimeFormat (no time-zone library). Wall-clock times have two traps, handled as documented
 * on `CsvOptions.nonexistent` and `CsvOptions.ambiguous`: the hour skipped when clocks go forward (a
 * gap) and the hour repeated when they go back (an overlap). Plain numbers are epoch times.
 */
import { IngestError } from "./errors.js";

/** Source quality of a CSV value, in the terms of rto.measurements.v1. */
export type CsvQuality = "good" | "uncertain" | "bad";

/** One value read from the file. */
export interface CsvValue {
  tagId: string;
  /** The value in the tag's unit. */
  value: number;
  quality: CsvQuality;
}

/** Values that share one timestamp, from consecutive rows. */
export interface CsvBatch {
  /** Epoch ms. */
  time: number;
  /** 1-based line of the first row of the batch. */
  line: number;
  values: CsvValue[];
}

/** Reader options; all optional. */
export interface CsvOptions {
  /** "long" (time, tag, value[, quality]), "wide" (time, tag1, tag2, ...) or "auto" (long when the header has tag and value columns). Default "auto". */
  format?: "auto" | "long" | "wide";
  /** IANA zone for times without an offset, e.g. "Europe/Berlin". Default "UTC". */
  timeZone?: string;
  /** Field separator, one character. Default ",". */
  delimiter?: string;
  /** Unit of plain-number times: epoch milliseconds or seconds. Default "ms". */
  epochUnit?: "ms" | "s";
  /**
   * A wall-clock time that occurs twice (clocks went back): "earlier" or "later" instant, "error", or
   * "infer" — the earlier unless that would go back in time from the previous row while the later
   * would not, which reads a file written in local time through the repeated hour in order.
   * Default "infer".
   */
  ambiguous?: "infer" | "earlier" | "later" | "error";
  /**
   * A wall-clock time that does not occur (clocks went forward): "shift-forward" reads it with the
   * offset in force before the change, which lands it after the gap by the gap's length
   * (02:30 on a spring-forward night in New York becomes 03:30 EDT), or "error". Default "shift-forward".
   */
  nonexistent?: "shift-forward" | "error";
  /** What to do with a value cell that is not a number: "error" (naming line and column) or "skip". Default "error". Empty cells are always skipped. */
  badValue?: "error" | "skip";
  /** Column names for the long format, matched case-insensitively. Defaults: time|timestamp, tag|tagid|tag_id|name, value|val, quality|status. */
  columns?: { time?: string; tag?: string; value?: string; quality?: string };
}

/** Splits one CSV line (RFC 4180 quoting within the line; quoted line breaks are not supported). */
export function splitCsvLine(line: string, delimiter: string, lineNo: number): string[] {
  const out: string[] = [];
  let i = 0;
  const n = line.length;
  for (;;) {
    if (line[i] === '"') {
      let field = "";
      i++;
      for (;;) {
        const q = line.indexOf('"', i);
        if (q < 0)
          throw new IngestError("INGEST_CSV_ROW", `line ${lineNo}: unterminated quoted field`, lineNo);
        field += line.slice(i, q);
        if (line[q + 1] === '"') {
          field += '"';
          i = q + 2;
        } else {
          i = q + 1;
          break;
        }
      }
      out.push(field);
      if (i >= n) return out;
      if (line[i] !== delimiter) {
        throw new IngestError("INGEST_CSV_ROW", `line ${lineNo}: text after a closing quote`, lineNo);
      }
      i++;
    } else {
      const d = line.indexOf(delimiter, i);
      if (d < 0) {
        out.push(line.slice(i).trim());
        return out;
      }
      out.push(line.slice(i, d).trim());
      i = d + 1;
    }
  }
}

const formatters = new Map<string, Intl.DateTimeFormat>();

function formatterFor(timeZone: string): Intl.DateTimeFormat {
  let f = formatters.get(timeZone);
  if (f === undefined) {
    try {
      f = new Intl.DateTimeFormat("en-US", {
        timeZone,
        hourCycle: "h23",
        year: "numeric",
        month: "2-digit",
        day: "2-digit",
        hour: "2-digit",
        minute: "2-digit",
        second: "2-digit",
      });
    } catch (e) {
      throw new IngestError("INGEST_TIME_ZONE", `'${timeZone}' is not an IANA time zone`, undefined, {
        cause: e,
      });
    }
    formatters.set(timeZone, f);
  }
  return f;
}

/** Offset of `timeZone` from UTC at instant `utcMs` (epoch ms), in ms (positive east of Greenwich). */
export function timeZoneOffsetMs(timeZone: string, utcMs: number): number {
  const parts = formatterFor(timeZone).formatToParts(new Date(utcMs));
  const get = (type: string) => Number(parts.find((p) => p.type === type)?.value);
  const wall = Date.UTC(get("year"), get("month") - 1, get("day"), get("hour"), get("minute"), get("second"));
  // formatToParts drops milliseconds; compare at whole seconds.
  return wall - (utcMs - (((utcMs % 1000) + 1000) % 1000));
}

/** How a wall-clock time maps to instants in a zone: one, two (overlap) or none (gap). */
export type WallTimeResolution =
  | { kind: "unique"; utcMs: number }
  | { kind: "ambiguous"; earlierMs: number; laterMs: number }
  | { kind: "gap"; shiftedMs: number };

/**
 * Resolves a wall-clock time, given as epoch ms of the same calendar fields read as UTC, in `timeZone`.
 * Probes the offsets a day before and after (zones change offset at most once in two days), keeps the
 * candidates whose own offset agrees, and reports a gap when none does.
 */
export function resolveWallTime(timeZone: string, wallMs: number): WallTimeResolution {
  const day = 86_400_000;
  const before = timeZoneOffsetMs(timeZone, wallMs - day);
  const after = timeZoneOffsetMs(timeZone, wallMs + day);
  const valid: number[] = [];
  for (const off of before === after ? [before] : [before, after]) {
    const t = wallMs - off;
    if (timeZoneOffsetMs(timeZone, t) === off) valid.push(t);
  }
  if (valid.length === 0) {
    // Both probes may still be wrong if the offset changed twice nearby; try the offset at the guess.
    const off = timeZoneOffsetMs(timeZone, wallMs - before);
    const t = wallMs - off;
    if (timeZoneOffsetMs(timeZone, t) === off) return { kind: "unique", utcMs: t };
    return { kind: "gap", shiftedMs: wallMs - before };
  }
  if (valid.length === 1) return { kind: "unique", utcMs: valid[0]! };
  const [a, b] = valid as [number, number];
  return a === b
    ? { kind: "unique", utcMs: a }
    : { kind: "ambiguous", earlierMs: Math.min(a, b), laterMs: Math.max(a, b) };
}

const ISO =
  /^(\d{4})-(\d{2})-(\d{2})(?:[T ](\d{2}):(\d{2})(?::(\d{2})(?:[.,](\d{1,9}))?)?)?\s*(Z|[+-]\d{2}(?::?\d{2})?)?$/i;
const EPOCH = /^-?\d+(?:\.\d+)?$/;

/** A time parser with the state that wall-clock inference needs (the previous instant). */
export interface TimeParser {
  /** Parses one time cell to epoch ms; throws INGEST_CSV_TIME naming `lineNo`. */
  parse(text: string, lineNo: number): number;
}

/** Creates a time parser for the given options (zone, epoch unit, gap and overlap policies). */
export function createTimeParser(options: CsvOptions = {}): TimeParser {
  const timeZone = options.timeZone ?? "UTC";
  formatterFor(timeZone);
  const epochScale = (options.epochUnit ?? "ms") === "s" ? 1000 : 1;
  const ambiguous = options.ambiguous ?? "infer";
  const nonexistent = options.nonexistent ?? "shift-forward";
  // Offsets only change on whole quarter hours of wall time in every current zone; cache per quarter hour.
  const cache = new Map<number, WallTimeResolution & { wallMs: number }>();
  let prevMs = Number.NEGATIVE_INFINITY;

  function resolve(wallMs: number): WallTimeResolution {
    const bucket = Math.floor(wallMs / 900_000);
    let hit = cache.get(bucket);
    if (hit === undefined) {
      if (cache.size > 20_000) cache.clear();
      hit = { ...resolveWallTime(timeZone, wallMs), wallMs };
      cache.set(bucket, hit);
    }
    const shift = wallMs - hit.wallMs;
    switch (hit.kind) {
      case "unique":
        return { kind: "unique", utcMs: hit.utcMs + shift };
      case "ambiguous":
        return { kind: "ambiguous", earlierMs: hit.earlierMs + shift, laterMs: hit.laterMs + shift };
      case "gap":
        return { kind: "gap", shiftedMs: hit.shiftedMs + shift };
    }
  }

  function fail(text: string, lineNo: number, why: string): never {
    throw new IngestError("INGEST_CSV_TIME", `line ${lineNo}: time '${text}' ${why}`, lineNo);
  }

  return {
    parse(text: string, lineNo: number): number {
      let t: number;
      if (EPOCH.test(text)) {
        t = Number(text) * epochScale;
      } else {
        const m = ISO.exec(text);
        if (m === null) fail(text, lineNo, "is neither ISO 8601 nor an epoch number");
        const [, y, mo, d, h = "0", mi = "0", s = "0", frac = "", zone] = m;
        const ms = frac === "" ? 0 : Math.round(Number(`0.${frac}`) * 1000);
        const wall = Date.UTC(Number(y), Number(mo) - 1, Number(d), Number(h), Number(mi), Number(s), ms);
        const check = new Date(wall);
        if (
          check.getUTCFullYear() !== Number(y) ||
          check.getUTCMonth() !== Number(mo) - 1 ||
          check.getUTCDate() !== Number(d) ||
          check.getUTCHours() !== Number(h) ||
          check.getUTCMinutes() !== Number(mi) ||
          check.getUTCSeconds() !== Number(s)
        ) {
          fail(text, lineNo, "is not a valid calendar time");
        }
        if (zone !== undefined) {
          if (zone.toUpperCase() === "Z") t = wall;
          else {
            const sign = zone[0] === "-" ? -1 : 1;
            const digits = zone.slice(1).replace(":", "");
            const offMin = Number(digits.slice(0, 2)) * 60 + Number(digits.slice(2) || "0");
            t = wall - sign * offMin * 60_000;
          }
        } else {
          const r = resolve(wall);
          if (r.kind === "unique") t = r.utcMs;
          else if (r.kind === "gap") {
            if (nonexistent === "error")
              fail(text, lineNo, `does not exist in ${timeZone} (clocks went forward)`);
            t = r.shiftedMs;
          } else if (ambiguous === "earlier") t = r.earlierMs;
          else if (ambiguous === "later") t = r.laterMs;
          else if (ambiguous === "error")
            fail(text, lineNo, `occurs twice in ${timeZone} (clocks went back)`);
          else t = r.earlierMs < prevMs && r.laterMs >= prevMs ? r.laterMs : r.earlierMs;
        }
      }
      if (!Number.isFinite(t)) fail(text, lineNo, "is out of range");
      prevMs = t;
      return t;
    },
  };
}

function qualityOf(cell: string | undefined): CsvQuality {
  if (cell === undefined) return "good";
  const q = cell.trim().toLowerCase();
  if (q === "" || q === "good" || q === "ok" || q === "192") return "good";
  if (q === "uncertain") return "uncertain";
  return "bad";
}

/** Yields the non-blank lines of a byte or text stream with their 1-based line numbers. */
async function* lines(source: AsyncIterable<string | Uint8Array>): AsyncGenerator<[string, number]> {
  const decoder = new TextDecoder("utf-8");
  let rest = "";
  let lineNo = 0;
  for await (const chunk of source) {
    rest += typeof chunk === "string" ? chunk : decoder.decode(chunk, { stream: true });
    let nl = rest.indexOf("\n");
    while (nl >= 0) {
      lineNo++;
      const line = rest.slice(0, nl).replace(/\r$/, "");
      rest = rest.slice(nl + 1);
      if (line.trim() !== "") yield [lineNo === 1 ? line.replace(/^\uFEFF/, "") : line, lineNo];
      nl = rest.indexOf("\n");
    }
  }
  rest += decoder.decode();
  if (rest.trim() !== "")
    yield [lineNo === 0 ? rest.replace(/^\uFEFF/, "") : rest.replace(/\r$/, ""), lineNo + 1];
}

/**
 * Reads a historian CSV from a stream (a Node Readable, or any async iterable of text or bytes) and
 * yields batches of values; consecutive rows with the same time form one batch. Rows are expected in
 * time order; a row whose time differs from the previous row's starts a new batch, so an unsorted
 * file yields more, smaller batches rather than merged ones. Throws IngestError (INGEST_CSV_HEADER,
 * INGEST_CSV_ROW, INGEST_CSV_TIME, INGEST_CSV_VALUE, INGEST_TIME_ZONE) with `line` set.
 */
export async function* readHistorianCsv(
  source: AsyncIterable<string | Uint8Array>,
  options: CsvOptions = {},
): AsyncGenerator<CsvBatch> {
  const delimiter = options.delimiter ?? ",";
  if (delimiter.length !== 1 || delimiter === '"') {
    throw new IngestError(
      "INGEST_CSV_HEADER",
      `delimiter must be one character other than '"', got '${delimiter}'`,
    );
  }
  const times = createTimeParser(options);
  const badValue = options.badValue ?? "error";
  let header: string[] | null = null;
  let long = false;
  let iTime = 0;
  let iTag = -1;
  let iValue = -1;
  let iQuality = -1;
  let batch: CsvBatch | null = null;

  const find = (names: string[], given: string | undefined): number => {
    const want = given === undefined ? names : [given.toLowerCase()];
    return header!.findIndex((h) => want.includes(h.toLowerCase()));
  };

  for await (const [line, lineNo] of lines(source)) {
    const cells = splitCsvLine(line, delimiter, lineNo);
    if (header === null) {
      header = cells;
      const cols = options.columns ?? {};
      iTag = find(["tag", "tagid", "tag_id", "name"], cols.tag);
      iValue = find(["value", "val"], cols.value);
      const format = options.format ?? "auto";
      long = format === "long" || (format === "auto" && iTag >= 0 && iValue >= 0);
      const t = find(["time", "timestamp"], cols.time);
      iTime = t >= 0 ? t : long ? -1 : 0;
      if (long) {
        iQuality = find(["quality", "status"], cols.quality);
        if (iTime < 0 || iTag < 0 || iValue < 0) {
          throw new IngestError(
            "INGEST_CSV_HEADER",
            `line ${lineNo}: a long-format header needs time, tag and value columns, got '${line}'`,
            lineNo,
          );
        }
      } else {
        if (header.length < 2) {
          throw new IngestError(
            "INGEST_CSV_HEADER",
            `line ${lineNo}: a wide-format header needs a time column and at least one tag`,
            lineNo,
          );
        }
        const seen = new Set<string>();
        for (const [k, h] of header.entries()) {
          if (k === iTime) continue;
          if (h === "" || seen.has(h)) {
            throw new IngestError(
              "INGEST_CSV_HEADER",
              `line ${lineNo}: tag column ${k + 1} is empty or repeated ('${h}')`,
              lineNo,
            );
          }
          seen.add(h);
        }
      }
      continue;
    }
    if (cells.length !== header.length) {
      throw new IngestError(
        "INGEST_CSV_ROW",
        `line ${lineNo}: ${cells.length} fields where the header has ${header.length}`,
        lineNo,
      );
    }
    const time = times.parse(cells[iTime]!, lineNo);
    if (batch !== null && batch.time !== time) {
      if (batch.values.length > 0) yield batch;
      batch = null;
    }
    batch ??= { time, line: lineNo, values: [] };
    const push = (tagId: string, cell: string, column: number, quality: CsvQuality) => {
      if (cell === "") return;
      const value = Number(cell);
      if (!Number.isFinite(value)) {
        if (badValue === "skip") return;
        throw new IngestError(
          "INGEST_CSV_VALUE",
          `line ${lineNo}, column ${column + 1} ('${header![column]}'): '${cell}' is not a number`,
          lineNo,
        );
      }
      batch!.values.push({ tagId, value, quality });
    };
    if (long) {
      const tagId = cells[iTag]!;
      if (tagId === "") throw new IngestError("INGEST_CSV_ROW", `line ${lineNo}: empty tag`, lineNo);
      push(tagId, cells[iValue]!, iValue, qualityOf(iQuality >= 0 ? cells[iQuality] : undefined));
    } else {
      for (let k = 0; k < cells.length; k++) if (k !== iTime) push(header[k]!, cells[k]!, k, "good");
    }
  }
  if (header === null) throw new IngestError("INGEST_CSV_HEADER", "the CSV has no header line");
  if (batch !== null && batch.values.length > 0) yield batch;
}
