/**
 * Per-value data checks for ingestion: range, rate of change (spike), frozen, stale, source quality,
 * not-a-number, unknown tag and clock skew. Pure and O(1) per value: per-tag state is a few numbers,
 * time comes in as arguments (epoch ms), and nothing reads a clock.
 */
import { IngestError } from "./errors.js";

/** Every verdict a value can get, in the order the checks run (the first failing check wins). */
export const TAG_STATUSES = [
  "good",
  "unknown-tag",
  "bad-quality",
  "not-a-number",
  "clock-skew",
  "stale",
  "out-of-range",
  "spike",
  "frozen",
] as const;

/** A value's verdict; matches the `status` enum of rto.measurements.v1. */
export type TagStatus = (typeof TAG_STATUSES)[number];

/** Checks for one tag. Optional limits that are absent are not checked. */
export interface TagSpec {
  id: string;
  /** Lowest valid value, in the tag's unit (inclusive). */
  rangeMin: number;
  /** Highest valid value, in the tag's unit (inclusive). */
  rangeMax: number;
  /** Largest believable rate of change, in the tag's unit per second, against the last good value. */
  maxRatePerS?: number;
  /** Seconds a value may stay exactly unchanged before it counts as frozen. */
  frozenAfterS?: number;
  /** Seconds a value's source time may lag `nowMs` before it counts as stale (also used by `health`). */
  staleAfterS?: number;
  /** Seconds a source time may lie ahead of `nowMs` before it counts as clock skew. */
  maxClockSkewS?: number;
}

/** One raw value from a source. */
export interface RawValue {
  tagId: string;
  /** The value in the tag's unit; null when the source had none. */
  value: number | null;
  /** Source time, epoch ms. */
  timeMs: number;
  /** Source quality: "good", "uncertain" or "bad" (rto.measurements.v1); absent means good. */
  quality?: string;
}

/** Health of one tag, for the console and /healthz. */
export interface TagHealth {
  tagId: string;
  /**
   * The tag's state at `nowMs`: "stale" when it never arrived or its latest value is older than
   * `staleAfterS`; otherwise the verdict of its latest value.
   */
  status: TagStatus;
  /** Verdict of the latest value; null when none arrived. */
  lastStatus: TagStatus | null;
  /** Source time of the latest value (epoch ms); null when none arrived. */
  lastTimeMs: number | null;
  /** Source time of the latest good value (epoch ms); null when none was good. */
  lastGoodTimeMs: number | null;
  /** Values seen per verdict. */
  counts: Record<TagStatus, number>;
}

/** Options of the rule set. */
export interface TagRulesOptions {
  /** Whether source quality "uncertain" passes as good. Default false: only "good" (or none) passes. */
  acceptUncertain?: boolean;
}

/** A stateful rule set over a fixed list of tags. */
export interface TagRules {
  /** Checks one value at the caller's time `nowMs` (epoch ms), updates the tag's state, returns the verdict. */
  check(value: RawValue, nowMs: number): TagStatus;
  /** Health of every configured tag at `nowMs` (epoch ms), in spec order. */
  health(nowMs: number): TagHealth[];
  /** Values seen per verdict over all tags, unknown ones included. */
  counts(): Record<TagStatus, number>;
}

interface TagState {
  spec: TagSpec;
  lastStatus: TagStatus | null;
  lastTimeMs: number;
  lastGoodTimeMs: number;
  lastGoodValue: number;
  lastValue: number;
  lastChangeMs: number;
  counts: Record<TagStatus, number>;
}

function zeroCounts(): Record<TagStatus, number> {
  const c = {} as Record<TagStatus, number>;
  for (const s of TAG_STATUSES) c[s] = 0;
  return c;
}

function checkSpec(spec: TagSpec): void {
  const bad = (what: string) => {
    throw new IngestError("INGEST_TAG_SPEC_INVALID", `tag '${spec.id}': ${what}`);
  };
  if (!(Number.isFinite(spec.rangeMin) && Number.isFinite(spec.rangeMax) && spec.rangeMin <= spec.rangeMax)) {
    bad(
      `rangeMin (${spec.rangeMin}) and rangeMax (${spec.rangeMax}) must be finite with rangeMin ≤ rangeMax`,
    );
  }
  for (const key of ["maxRatePerS", "frozenAfterS", "staleAfterS", "maxClockSkewS"] as const) {
    const v = spec[key];
    if (v !== undefined && !(v > 0)) bad(`${key} must be > 0 when given, got ${v}`);
  }
}

/**
 * Creates the rule set. Throws INGEST_TAG_SPEC_INVALID on a bad spec or a repeated id.
 *
 * Choices: a spike is judged against the last GOOD value, so one wild value does not make the return
 * to normal look like a second spike; the rate test is skipped when the time has not advanced.
 * Frozen means exactly equal to the previous numeric value for longer than `frozenAfterS`, counted
 * from the last change of value. Stale compares the source time with `nowMs`; clock skew flags
 * source times ahead of `nowMs`.
 */
export function createTagRules(specs: readonly TagSpec[], options: TagRulesOptions = {}): TagRules {
  const acceptUncertain = options.acceptUncertain ?? false;
  const tags = new Map<string, TagState>();
  for (const spec of specs) {
    checkSpec(spec);
    if (tags.has(spec.id))
      throw new IngestError("INGEST_TAG_SPEC_INVALID", `tag '${spec.id}' is listed twice`);
    tags.set(spec.id, {
      spec,
      lastStatus: null,
      lastTimeMs: Number.NaN,
      lastGoodTimeMs: Number.NaN,
      lastGoodValue: Number.NaN,
      lastValue: Number.NaN,
      lastChangeMs: Number.NaN,
      counts: zeroCounts(),
    });
  }
  const totals = zeroCounts();

  function verdict(st: TagState, v: RawValue, nowMs: number): TagStatus {
    const spec = st.spec;
    const q = v.quality;
    if (q !== undefined && q !== "good" && !(acceptUncertain && q === "uncertain")) return "bad-quality";
    const x = v.value;
    if (x === null || !Number.isFinite(x)) return "not-a-number";
    const t = v.timeMs;
    if (spec.maxClockSkewS !== undefined && t - nowMs > spec.maxClockSkewS * 1000) return "clock-skew";
    if (spec.staleAfterS !== undefined && nowMs - t > spec.staleAfterS * 1000) return "stale";
    // Track changes of value before the range test, so a value pinned out of range still ages as frozen.
    if (x !== st.lastValue || Number.isNaN(st.lastChangeMs)) {
      st.lastValue = x;
      st.lastChangeMs = t;
    }
    if (x < spec.rangeMin || x > spec.rangeMax) return "out-of-range";
    if (spec.maxRatePerS !== undefined && t > st.lastGoodTimeMs) {
      const rate = Math.abs(x - st.lastGoodValue) / ((t - st.lastGoodTimeMs) / 1000);
      if (rate > spec.maxRatePerS) return "spike";
    }
    if (spec.frozenAfterS !== undefined && t - st.lastChangeMs > spec.frozenAfterS * 1000) return "frozen";
    return "good";
  }

  return {
    check(v: RawValue, nowMs: number): TagStatus {
      const st = tags.get(v.tagId);
      if (st === undefined) {
        totals["unknown-tag"]++;
        return "unknown-tag";
      }
      const status = verdict(st, v, nowMs);
      st.lastStatus = status;
      if (!(v.timeMs <= st.lastTimeMs)) st.lastTimeMs = v.timeMs;
      if (status === "good" && !(v.timeMs < st.lastGoodTimeMs)) {
        st.lastGoodTimeMs = v.timeMs;
        st.lastGoodValue = v.value as number;
      }
      st.counts[status]++;
      totals[status]++;
      return status;
    },
    health(nowMs: number): TagHealth[] {
      const out: TagHealth[] = [];
      for (const st of tags.values()) {
        const seen = !Number.isNaN(st.lastTimeMs);
        const staleLimitMs =
          st.spec.staleAfterS === undefined ? Number.POSITIVE_INFINITY : st.spec.staleAfterS * 1000;
        const status: TagStatus =
          !seen || nowMs - st.lastTimeMs > staleLimitMs ? "stale" : (st.lastStatus ?? "stale");
        out.push({
          tagId: st.spec.id,
          status,
          lastStatus: st.lastStatus,
          lastTimeMs: seen ? st.lastTimeMs : null,
          lastGoodTimeMs: Number.isNaN(st.lastGoodTimeMs) ? null : st.lastGoodTimeMs,
          counts: { ...st.counts },
        });
      }
      return out;
    },
    counts: () => ({ ...totals }),
  };
}
