/**
 * The demo price feed's schedule: a daily list of price changes, parsed and queried without any
 * clock of its own. A schedule file reads
 *
 *   units: { pFeedA: USD/kg, pPower: USD/kWh }
 *   schedule:
 *     - { at: "00:00", prices: { pFeedA: 1.10, pPower: 0.08 } }
 *     - { at: "17:00", prices: { pPower: 0.21 } }
 *
 * Interpolation is a step: a price holds from its `at` until the next entry that names the same
 * symbol, and the day repeats, so before the first entry of a day the last values of the previous
 * day hold. An entry may name only the symbols that change. Times of day are UTC.
 */
import { SteadfastError } from "../kit/errors.js";

/** Registry of the market service's error codes, with the one-line meaning shown in the docs. */
export const MARKET_ERROR_CODES = {
  MARKET_SCHEDULE_INVALID: "the price schedule file is malformed; the message names the field",
} as const;

export type MarketErrorCode = keyof typeof MARKET_ERROR_CODES;

/** An error raised by the market service (services/market). */
export class MarketError extends SteadfastError {
  override readonly name = "MarketError";
  constructor(
    readonly code: MarketErrorCode,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}

/** One change of the schedule. */
export interface ScheduleEntry {
  /** Minutes after 00:00 UTC, 0–1439. */
  atMin: number;
  /** The prices that change at this time, symbol → value in the symbol's unit. */
  prices: Record<string, number>;
}

/** A parsed, checked schedule: entries sorted by time of day. */
export interface PriceSchedule {
  /** Unit of each symbol, e.g. "USD/kg". */
  units: Record<string, string>;
  entries: ScheduleEntry[];
}

/** A price as published. */
export interface Price {
  symbol: string;
  value: number;
  unit: string;
}

/** The prices in force at one instant. */
export interface PricesInForce {
  /** When this set of prices took effect (the latest schedule entry at or before the instant), epoch ms. */
  effectiveFromMs: number;
  /** When the next entry takes effect, epoch ms; undefined when the schedule has a single entry. */
  nextChangeMs: number | undefined;
  /** Every symbol with its value, sorted by symbol (never empty: a schedule names at least one). */
  prices: [Price, ...Price[]];
}

const DAY_MS = 86_400_000;
const MIN_MS = 60_000;
const SYMBOL = /^[A-Za-z][A-Za-z0-9_]*$/;
const HHMM = /^([01][0-9]|2[0-3]):([0-5][0-9])$/;
/** Most symbols in one schedule: rto.prices.v1 carries at most 50 prices. */
const MAX_SYMBOLS = 50;

function fail(where: string, message: string): never {
  throw new MarketError("MARKET_SCHEDULE_INVALID", `${where}: ${message}`);
}

function isRecord(v: unknown): v is Record<string, unknown> {
  return !!v && typeof v === "object" && !Array.isArray(v);
}

/**
 * Checks and parses a schedule document `{ units: {symbol: unit}, schedule: [{at: "HH:MM",
 * prices: {symbol: number}}] }` (already read from YAML). `where` names the file in messages.
 * Throws MarketError MARKET_SCHEDULE_INVALID naming the field at fault.
 */
export function parsePriceSchedule(doc: unknown, where = "schedule"): PriceSchedule {
  if (!isRecord(doc)) fail(where, "must be a mapping with 'units' and 'schedule'");
  for (const k of Object.keys(doc))
    if (k !== "units" && k !== "schedule") fail(where, `unknown field '${k}'`);
  const rawUnits = doc.units;
  if (!isRecord(rawUnits)) fail(`${where} units`, "must map each symbol to its unit");
  const units: Record<string, string> = {};
  for (const [symbol, unit] of Object.entries(rawUnits)) {
    if (!SYMBOL.test(symbol) || symbol.length > 64)
      fail(`${where} units.${symbol}`, "a symbol is a letter, then letters, digits or _");
    if (typeof unit !== "string" || unit.length === 0 || unit.length > 80)
      fail(`${where} units.${symbol}`, "the unit must be a string of 1–80 characters");
    units[symbol] = unit;
  }
  const symbols = Object.keys(units);
  if (symbols.length === 0 || symbols.length > MAX_SYMBOLS)
    fail(`${where} units`, `must name 1–${MAX_SYMBOLS} symbols`);
  const rawSchedule = doc.schedule;
  if (!Array.isArray(rawSchedule) || rawSchedule.length === 0)
    fail(`${where} schedule`, "must be a non-empty list");
  const entries: ScheduleEntry[] = [];
  const seenTimes = new Set<number>();
  const priced = new Set<string>();
  rawSchedule.forEach((raw: unknown, i) => {
    const at = `${where} schedule[${i}]`;
    if (!isRecord(raw)) fail(at, "must be a mapping with 'at' and 'prices'");
    for (const k of Object.keys(raw)) if (k !== "at" && k !== "prices") fail(at, `unknown field '${k}'`);
    // YAML 1.1 would read an unquoted 17:00 as a sexagesimal number; the yaml package (1.2) keeps
    // it a string, but a number here means the author relied on that: say so.
    const m = typeof raw.at === "string" ? HHMM.exec(raw.at) : null;
    if (!m) fail(`${at}.at`, `must be a quoted "HH:MM" time of day (got ${JSON.stringify(raw.at)})`);
    const atMin = Number(m[1]) * 60 + Number(m[2]);
    if (seenTimes.has(atMin)) fail(`${at}.at`, `time ${raw.at} appears twice`);
    seenTimes.add(atMin);
    if (!isRecord(raw.prices) || Object.keys(raw.prices).length === 0)
      fail(`${at}.prices`, "must map at least one symbol to a number");
    const prices: Record<string, number> = {};
    for (const [symbol, value] of Object.entries(raw.prices)) {
      if (!Object.hasOwn(units, symbol))
        fail(`${at}.prices.${symbol}`, "the symbol has no unit under 'units'");
      if (typeof value !== "number" || !Number.isFinite(value))
        fail(`${at}.prices.${symbol}`, "must be a finite number");
      prices[symbol] = value;
      priced.add(symbol);
    }
    entries.push({ atMin, prices });
  });
  for (const s of symbols)
    if (!priced.has(s)) fail(`${where} units.${s}`, "the symbol is never given a price");
  entries.sort((a, b) => a.atMin - b.atMin);
  return { units, entries };
}

/**
 * The prices in force at `timeMs` (epoch ms) under step interpolation over a repeating UTC day,
 * with the instant the set took effect and the next change.
 */
export function pricesAt(schedule: PriceSchedule, timeMs: number): PricesInForce {
  const { entries, units } = schedule;
  const dayStartMs = Math.floor(timeMs / DAY_MS) * DAY_MS;
  const minOfDay = Math.floor((timeMs - dayStartMs) / MIN_MS);
  // Index of the latest entry at or before the instant; -1 means "before the first entry today".
  let current = -1;
  for (let i = 0; i < entries.length; i++) if ((entries[i] as ScheduleEntry).atMin <= minOfDay) current = i;
  const n = entries.length;
  const currentIdx = current === -1 ? n - 1 : current;
  const currentEntry = entries[currentIdx] as ScheduleEntry;
  const effectiveFromMs =
    current === -1
      ? dayStartMs - DAY_MS + currentEntry.atMin * MIN_MS
      : dayStartMs + currentEntry.atMin * MIN_MS;
  let nextChangeMs: number | undefined;
  if (n > 1) {
    const nextIdx = (currentIdx + 1) % n;
    const next = entries[nextIdx] as ScheduleEntry;
    // The next entry is later today unless it wraps past midnight.
    const base = current === -1 || nextIdx > currentIdx ? dayStartMs : dayStartMs + DAY_MS;
    nextChangeMs = base + next.atMin * MIN_MS;
  }
  // Walk back from the current entry over one whole day so every symbol finds its latest value.
  const values: Record<string, number> = {};
  for (let k = 0; k < n; k++) {
    const e = entries[(currentIdx - k + n) % n] as ScheduleEntry;
    for (const [s, v] of Object.entries(e.prices)) if (!Object.hasOwn(values, s)) values[s] = v;
  }
  const prices = Object.keys(units)
    .sort()
    .map((symbol) => ({ symbol, value: values[symbol] as number, unit: units[symbol] as string }));
  return { effectiveFromMs, nextChangeMs, prices: prices as [Price, ...Price[]] };
}

/** Wall-clock milliseconds until simulated time `simTargetMs` (never negative). */
export function wallDelayUntil(simTargetMs: number, simNowMs: number, timeScale: number): number {
  return Math.max(0, (simTargetMs - simNowMs) / timeScale);
}
