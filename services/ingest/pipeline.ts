/**
 * The ingest pipeline, pure: raw values from any source (JSON batches, Sparkplug B metrics, historian
 * CSV rows) → tag resolution and unit conversion → a verdict per value from the tag rules → values for
 * rto.measurements.v1 with `status`, plus the per-tag health summary (rto.tag-health.v1).
 *
 * Live ingest and CSV replay call the same functions, so a replay judges data exactly as live ingest
 * would. No bus, no clock: time comes in as `nowMs` (epoch ms).
 *
 * Name resolution, for a value named `name` arriving from source `sourceKey` (the `<source>` word of
 * `rto.<site>.raw.<source>`, `<group>/<edge node>[/<device>]` for Sparkplug, or the replay's label):
 *   1. a tag whose `source.topic` equals `sourceKey` and whose `source.name` equals `name`;
 *   2. a tag with no `source.topic` whose `source.name` equals `name`;
 *   3. a tag whose id equals `name` — the value is then taken as already in the tag's unit.
 * Rules 1–2 apply the tag's source conversion (`source.unit` or `scale`/`offset`). Anything else is an
 * unknown tag: still published (status unknown-tag) so that it is counted, never silently dropped.
 */
import type { Measurements, TagHealth as TagHealthData } from "../kit/generated/messages.js";
import type { SiteModel, SiteTag } from "../model/index.js";
import { affineConversion, newMath, parseUnit, sameDims } from "../model/units.js";
import { createTagRules, TAG_STATUSES, type TagRules, type TagSpec, type TagStatus } from "./rules.js";

/** A measured value as published on rto.<site>.measurements. */
export type MeasuredValue = Measurements["values"][number];

/** One value as a source delivered it, before resolution. */
export interface RawInput {
  /** Tag id or source name. */
  name: string;
  /** Numbers pass; booleans become 1/0; anything else becomes null (status not-a-number). */
  value: number | boolean | string | null;
  /** Source time, epoch ms. */
  timeMs: number;
  /** "good" (default), "uncertain" or "bad"; anything else counts as bad. */
  quality?: string;
  /** Unit the source says the value is in; converted to the expected unit when it differs. */
  unit?: string;
}

/** Pipeline options; all optional. */
export interface PipelineOptions {
  /** Let source quality "uncertain" pass as good. Default false. */
  acceptUncertain?: boolean;
  /**
   * Seconds a source time may lie ahead of ingest's clock before the value counts as clock skew.
   * Default 300 s (common practice, no source: generous for unsynchronised field devices).
   */
  maxClockSkewS?: number;
  /** Least time between two sweeps for silent tags inside `process`, ms. Default 1000 ms. */
  sweepEveryMs?: number;
  /** Distinct unknown names kept for the health report. Default 200 (the schema's limit). */
  maxUnknownNames?: number;
}

interface Resolved {
  tag: SiteTag;
  index: number;
  /** Conversion from the source value to the tag's unit. */
  scale: number;
  offset: number;
  /** Unit the source is expected to send in (for the optional `unit` field), or undefined when only scale/offset is known. */
  expectUnit: string | undefined;
}

interface Rejection {
  status: TagStatus;
  value: number | null;
  timeMs: number;
  detail: string;
}

interface TagTrack {
  counts: Record<TagStatus, number>;
  window: Record<TagStatus, number>;
  lastRejection: Rejection | null;
  /** Latest good value and its time, to explain spikes. */
  lastGoodValue: number;
  lastGoodMs: number;
  /** A stale marker was published and no value arrived since. */
  markedStale: boolean;
}

interface UnknownName {
  name: string;
  source: string;
  count: number;
  lastTimeMs: number;
}

/** What one call of `process` gives back. */
export interface ProcessResult {
  /** The batch's values with their verdicts, in input order, then any stale markers. */
  values: MeasuredValue[];
  /** Values that were not good (unknown tags included). */
  rejected: number;
}

/** The running pipeline of one site. */
export interface Pipeline {
  /** Resolves, converts and judges a batch from `sourceKey` at ingest's time `nowMs` (epoch ms). */
  process(sourceKey: string, values: readonly RawInput[], nowMs: number): ProcessResult;
  /**
   * Stale markers (value null, quality bad, status stale) for tags whose latest value is older than
   * their `staleAfterS` at `nowMs`, once per silence: downstream stages learn that a tag went quiet,
   * which no value of its own can tell them.
   */
  sweep(nowMs: number): MeasuredValue[];
  /** Marks resolved names from `sourceKey` stale now (Sparkplug death, broker loss): markers to publish. */
  markStale(sourceKey: string, names: readonly string[], reason: string, nowMs: number): MeasuredValue[];
  /** The health summary at `nowMs`; resets the window counts. `intervalS` is the report period. */
  health(nowMs: number, intervalS: number): TagHealthData;
}

function zero(): Record<TagStatus, number> {
  const c = {} as Record<TagStatus, number>;
  for (const s of TAG_STATUSES) c[s] = 0;
  return c;
}

/** Drops zero counts (the schema lets a verdict with no values be left out). */
function sparse(c: Record<TagStatus, number>): Record<string, number> {
  const out: Record<string, number> = {};
  for (const s of TAG_STATUSES) if (c[s] > 0) out[s] = c[s];
  return out;
}

const fmt = (x: number) => (Number.isInteger(x) ? String(x) : x.toPrecision(6).replace(/\.?0+$/, ""));

/** Creates the pipeline for a site model. Throws INGEST_TAG_SPEC_INVALID when a tag's limits are unusable. */
export function createPipeline(model: SiteModel, options: PipelineOptions = {}): Pipeline {
  const maxSkewS = options.maxClockSkewS ?? 300;
  const sweepEveryMs = options.sweepEveryMs ?? 1000;
  const maxUnknown = options.maxUnknownNames ?? 200;
  const tags = model.tags;
  const specs: TagSpec[] = tags.map((t) => {
    const s: TagSpec = { id: t.id, rangeMin: t.range.min, rangeMax: t.range.max, maxClockSkewS: maxSkewS };
    if (t.maxRatePerS !== undefined) s.maxRatePerS = t.maxRatePerS;
    if (t.frozenAfterS !== undefined) s.frozenAfterS = t.frozenAfterS;
    if (t.staleAfterS !== undefined) s.staleAfterS = t.staleAfterS;
    return s;
  });
  const rules: TagRules = createTagRules(specs, { acceptUncertain: options.acceptUncertain ?? false });
  const track: TagTrack[] = tags.map(() => ({
    counts: zero(),
    window: zero(),
    lastRejection: null,
    lastGoodValue: Number.NaN,
    lastGoodMs: Number.NaN,
    markedStale: false,
  }));
  const docTags = model.document.tags ?? [];

  // Resolution tables: (topic, name) and (name) from source mappings, then tag ids.
  const byTopicName = new Map<string, Resolved>();
  const byName = new Map<string, Resolved>();
  const byId = new Map<string, Resolved>();
  tags.forEach((tag, index) => {
    byId.set(tag.id, { tag, index, scale: 1, offset: 0, expectUnit: tag.unit });
    if (tag.source === undefined) return;
    const docSource = docTags[index]?.source;
    const expectUnit = docSource?.unit ?? (docSource?.scale === undefined ? tag.unit : undefined);
    const r: Resolved = {
      tag,
      index,
      scale: tag.source.toTag.scale,
      offset: tag.source.toTag.offset,
      expectUnit,
    };
    if (tag.source.topic === undefined) byName.set(tag.source.name, r);
    else byTopicName.set(`${tag.source.topic}\u0000${tag.source.name}`, r);
  });
  const lookup = (sourceKey: string, name: string): Resolved | undefined =>
    byTopicName.get(`${sourceKey}\u0000${name}`) ?? byName.get(name) ?? byId.get(name);
  // Per-source memo of the lookup: a live source sends the same names batch after batch, and the
  // lookup builds a key string per value. Bounded: unknown names are not memoised.
  const memo = new Map<string, Map<string, Resolved>>();
  const resolve = (sourceKey: string, name: string): Resolved | undefined => {
    let bySource = memo.get(sourceKey);
    const hit = bySource?.get(name);
    if (hit !== undefined) return hit;
    const r = lookup(sourceKey, name);
    if (r === undefined) return undefined;
    if (bySource === undefined && memo.size < 1000) {
      bySource = new Map();
      memo.set(sourceKey, bySource);
    }
    if (bySource !== undefined && bySource.size < 10 * tags.length + 100) bySource.set(name, r);
    return r;
  };

  // Conversions for a `unit` field that differs from the expected one, computed once per pair.
  let math: ReturnType<typeof newMath> | undefined;
  const unitCache = new Map<string, { scale: number; offset: number } | string>();
  function unitConversion(from: string, tag: SiteTag): { scale: number; offset: number } | string {
    const key = `${from}\u0000${tag.unit}`;
    let c = unitCache.get(key);
    if (c !== undefined) return c;
    math ??= newMath();
    const a = parseUnit(math, from);
    const b = parseUnit(math, tag.unit);
    if (typeof a === "string") c = `unit '${from}' is not understood: ${a}`;
    else if (typeof b === "string") c = `tag unit '${tag.unit}' is not understood: ${b}`;
    else if (!sameDims(a.dims, b.dims))
      c = `unit '${from}' cannot be converted to the tag unit '${tag.unit}'`;
    else c = affineConversion(a, b);
    if (unitCache.size < 1000) unitCache.set(key, c);
    return c;
  }

  const totals = zero();
  const windowTotals = zero();
  const unknown = new Map<string, UnknownName>();
  let unknownDropped = 0;
  let lastSweepMs = Number.NEGATIVE_INFINITY;
  /** The first time the pipeline was asked anything: a tag never seen is given staleAfterS from here. */
  let firstNowMs: number | null = null;
  let lastHealthMs: number | null = null;

  function count(status: TagStatus, t: TagTrack | undefined): void {
    totals[status]++;
    windowTotals[status]++;
    if (t) {
      t.counts[status]++;
      t.window[status]++;
    }
  }

  function explain(
    status: TagStatus,
    tag: SiteTag,
    t: TagTrack,
    value: number | null,
    timeMs: number,
    nowMs: number,
    quality: string | undefined,
  ): string {
    switch (status) {
      case "bad-quality":
        return `source quality '${quality}'`;
      case "not-a-number":
        return `value ${String(value)} is not a finite number`;
      case "clock-skew":
        return `source time is ${fmt((timeMs - nowMs) / 1000)} s ahead of ingest's clock; limit ${fmt(maxSkewS)} s`;
      case "stale":
        return `source time is ${fmt((nowMs - timeMs) / 1000)} s old; limit ${fmt(tag.staleAfterS ?? 0)} s`;
      case "out-of-range":
        return `${fmt(value as number)} ${tag.unit} is outside [${fmt(tag.range.min)}, ${fmt(tag.range.max)}]`;
      case "spike": {
        const rate = Math.abs((value as number) - t.lastGoodValue) / ((timeMs - t.lastGoodMs) / 1000);
        return `changed ${fmt(rate)} ${tag.unit}/s since the last good value; limit ${fmt(tag.maxRatePerS ?? 0)} ${tag.unit}/s`;
      }
      case "frozen":
        return `unchanged for more than ${fmt(tag.frozenAfterS ?? 0)} s`;
      default:
        return status;
    }
  }

  function noteUnknown(name: string, sourceKey: string, timeMs: number): void {
    const key = `${sourceKey}\u0000${name}`;
    const u = unknown.get(key);
    if (u) {
      u.count++;
      u.lastTimeMs = Math.max(u.lastTimeMs, timeMs);
      // Most recent first when listed: move to the end of the insertion order.
      unknown.delete(key);
      unknown.set(key, u);
      return;
    }
    if (unknown.size >= maxUnknown) {
      const oldest = unknown.keys().next().value;
      if (oldest !== undefined) unknown.delete(oldest);
      unknownDropped++;
    }
    unknown.set(key, {
      name: name.slice(0, 200),
      source: sourceKey.slice(0, 200),
      count: 1,
      lastTimeMs: timeMs,
    });
  }

  function staleMarker(tag: SiteTag, nowMs: number): MeasuredValue {
    return {
      tag: tag.id,
      value: null,
      unit: tag.unit,
      quality: "bad",
      time: Math.max(0, Math.floor(nowMs)),
      status: "stale",
    };
  }

  function sweep(nowMs: number): MeasuredValue[] {
    lastSweepMs = nowMs;
    firstNowMs ??= nowMs;
    const out: MeasuredValue[] = [];
    const health = rules.health(nowMs);
    for (let i = 0; i < tags.length; i++) {
      const tag = tags[i]!;
      const t = track[i]!;
      if (tag.staleAfterS === undefined || t.markedStale) continue;
      const h = health[i]!;
      if (h.status !== "stale" || h.lastStatus === "stale") continue;
      if (h.lastTimeMs === null && nowMs - firstNowMs <= tag.staleAfterS * 1000) continue;
      t.markedStale = true;
      const age = h.lastTimeMs === null ? null : (nowMs - h.lastTimeMs) / 1000;
      t.lastRejection = {
        status: "stale",
        value: null,
        timeMs: Math.max(0, Math.floor(nowMs)),
        detail:
          age === null
            ? "no value has arrived yet"
            : `no value for ${fmt(age)} s; limit ${fmt(tag.staleAfterS)} s`,
      };
      count("stale", t);
      out.push(staleMarker(tag, nowMs));
    }
    return out;
  }

  function process(sourceKey: string, values: readonly RawInput[], nowMs: number): ProcessResult {
    firstNowMs ??= nowMs;
    const out: MeasuredValue[] = [];
    let rejected = 0;
    for (const v of values) {
      const time = Math.max(0, Math.floor(v.timeMs));
      const quality =
        v.quality === "good" || v.quality === "uncertain" || v.quality === "bad"
          ? v.quality
          : v.quality === undefined
            ? "good"
            : "bad";
      let raw: number | null =
        typeof v.value === "number" ? v.value : typeof v.value === "boolean" ? (v.value ? 1 : 0) : null;
      const r = resolve(sourceKey, v.name);
      if (r === undefined) {
        rules.check({ tagId: v.name, value: raw, timeMs: time, quality }, nowMs);
        count("unknown-tag", undefined);
        noteUnknown(v.name, sourceKey, time);
        rejected++;
        const m: MeasuredValue = {
          tag: v.name.slice(0, 64),
          value: raw !== null && Number.isFinite(raw) ? raw : null,
          quality,
          time,
          status: "unknown-tag",
        };
        if (v.unit !== undefined) m.unit = v.unit.slice(0, 32);
        out.push(m);
        continue;
      }
      const tag = r.tag;
      const t = track[r.index]!;
      t.markedStale = false;
      let scale = r.scale;
      let offset = r.offset;
      let unitProblem: string | null = null;
      if (v.unit !== undefined && v.unit !== r.expectUnit && v.unit !== tag.unit) {
        const c = unitConversion(v.unit, tag);
        if (typeof c === "string") unitProblem = c;
        else ({ scale, offset } = c);
      } else if (v.unit !== undefined && v.unit === tag.unit) {
        scale = 1;
        offset = 0;
      }
      if (raw !== null && Number.isFinite(raw)) raw = scale * raw + offset;
      // A unit that cannot be converted makes the value unusable: judged as bad quality, explained.
      const status: TagStatus = rules.check(
        { tagId: tag.id, value: raw, timeMs: time, quality: unitProblem === null ? quality : "bad" },
        nowMs,
      );
      count(status, t);
      const value = raw !== null && Number.isFinite(raw) ? raw : null;
      if (status === "good") {
        if (!(time < t.lastGoodMs)) {
          t.lastGoodMs = time;
          t.lastGoodValue = value as number;
        }
      } else {
        rejected++;
        t.lastRejection = {
          status,
          value,
          timeMs: time,
          detail: (unitProblem ?? explain(status, tag, t, value, time, nowMs, quality)).slice(0, 500),
        };
      }
      out.push({ tag: tag.id, value, unit: tag.unit, quality, time, status });
    }
    if (nowMs - lastSweepMs >= sweepEveryMs) out.push(...sweep(nowMs));
    return { values: out, rejected };
  }

  function markStale(
    sourceKey: string,
    names: readonly string[],
    reason: string,
    nowMs: number,
  ): MeasuredValue[] {
    const out: MeasuredValue[] = [];
    for (const name of names) {
      const r = resolve(sourceKey, name);
      if (r === undefined) continue;
      const t = track[r.index]!;
      if (t.markedStale) continue;
      t.markedStale = true;
      t.lastRejection = {
        status: "stale",
        value: null,
        timeMs: Math.max(0, Math.floor(nowMs)),
        detail: reason.slice(0, 500),
      };
      count("stale", t);
      out.push(staleMarker(r.tag, nowMs));
    }
    return out;
  }

  function health(nowMs: number, intervalS: number): TagHealthData {
    const h = rules.health(nowMs);
    const list: TagHealthData["tags"] = h.map((x, i) => {
      const t = track[i]!;
      // A tag marked stale (silence, Sparkplug death) stays stale until a value arrives.
      const status: TagStatus = t.markedStale ? "stale" : x.status;
      // Own counts rather than the rules' ones: they include the stale markers, which no source sent.
      const counts = sparse(t.counts);
      const item: TagHealthData["tags"][number] = {
        tag: x.tagId,
        unit: tags[i]!.unit,
        healthy: status === "good",
        status,
        lastStatus: t.markedStale ? "stale" : x.lastStatus,
        lastTimeMs: x.lastTimeMs,
        lastGoodTimeMs: x.lastGoodTimeMs,
        counts,
        window: sparse(t.window),
      };
      if (t.lastRejection) item.lastRejection = { ...t.lastRejection };
      t.window = zero();
      return item;
    });
    const out: TagHealthData = {
      timeMs: Math.max(0, Math.floor(nowMs)),
      intervalS,
      totals: sparse(totals),
      window: sparse(windowTotals),
      tags: list,
      unknown: [...unknown.values()].reverse().map((u) => ({ ...u })),
    };
    if (lastHealthMs !== null) out.sinceMs = Math.max(0, Math.floor(lastHealthMs));
    if (unknownDropped > 0) out.unknownDropped = unknownDropped;
    lastHealthMs = nowMs;
    for (const s of TAG_STATUSES) windowTotals[s] = 0;
    return out;
  }

  return { process, sweep, markStale, health };
}
