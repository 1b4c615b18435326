import { describe, expect, it } from "vitest";
import { parse as parseYaml } from "yaml";
import { ManualClock, ScaledClock } from "../kit/clock.js";
import { MarketError, parsePriceSchedule, pricesAt, wallDelayUntil } from "./schedule.js";

const YAML = `
units: { pFeed: USD/kg, pPower: USD/kWh }
schedule:
  - at: "22:00"
    prices: { pPower: 0.08 }
  - at: "06:00"
    prices: { pFeed: 1.0, pPower: 0.10 }
  - at: "17:00"
    prices: { pPower: 0.25 }
`;
const schedule = parsePriceSchedule(parseYaml(YAML), "prices.yaml");
const day = Date.UTC(2026, 0, 1);
const at = (h: number, m = 0, dayOffset = 0) => day + dayOffset * 86_400_000 + (h * 60 + m) * 60_000;

function priceOf(symbol: string, timeMs: number): number | undefined {
  return pricesAt(schedule, timeMs).prices.find((p) => p.symbol === symbol)?.value;
}

describe("a price schedule with step interpolation", () => {
  it("holds the latest entry's prices between changes, with when they began and when they end", () => {
    const p = pricesAt(schedule, at(12));
    expect(p.prices).toEqual([
      { symbol: "pFeed", value: 1.0, unit: "USD/kg" },
      { symbol: "pPower", value: 0.1, unit: "USD/kWh" },
    ]);
    expect(p.effectiveFromMs).toBe(at(6));
    expect(p.nextChangeMs).toBe(at(17));
  });

  it("changes exactly at the entry's minute, and keeps a symbol the entry does not name", () => {
    expect(priceOf("pPower", at(16, 59))).toBe(0.1);
    expect(priceOf("pPower", at(17))).toBe(0.25);
    expect(priceOf("pFeed", at(17))).toBe(1.0);
    expect(pricesAt(schedule, at(17)).nextChangeMs).toBe(at(22));
  });

  it("before the day's first entry, holds the previous day's last prices", () => {
    const p = pricesAt(schedule, at(3));
    expect(priceOf("pPower", at(3))).toBe(0.08);
    expect(priceOf("pFeed", at(3))).toBe(1.0);
    expect(p.effectiveFromMs).toBe(at(22, 0, -1));
    expect(p.nextChangeMs).toBe(at(6));
  });

  it("after the day's last entry, names tomorrow's first entry as the next change", () => {
    const p = pricesAt(schedule, at(23, 30));
    expect(p.effectiveFromMs).toBe(at(22));
    expect(p.nextChangeMs).toBe(at(6, 0, 1));
  });

  it("has no next change when the schedule has a single entry", () => {
    const flat = parsePriceSchedule({
      units: { pFeed: "USD/kg" },
      schedule: [{ at: "00:00", prices: { pFeed: 2 } }],
    });
    const p = pricesAt(flat, at(9));
    expect(p.nextChangeMs).toBeUndefined();
    expect(p.effectiveFromMs).toBe(at(0));
  });
});

describe("reading a schedule file", () => {
  const bad = (doc: unknown) => () => parsePriceSchedule(doc, "prices.yaml");

  it("refuses a time of day that is not HH:MM, naming the entry", () => {
    const doc = { units: { p: "USD" }, schedule: [{ at: "24:00", prices: { p: 1 } }] };
    expect(bad(doc)).toThrow(/schedule\[0\]\.at/);
    expect(bad({ ...doc, schedule: [{ at: 1020, prices: { p: 1 } }] })).toThrow(MarketError);
  });

  it("refuses a price for a symbol without a unit, and a unit for a symbol never priced", () => {
    expect(bad({ units: { p: "USD" }, schedule: [{ at: "00:00", prices: { p: 1, q: 2 } }] })).toThrow(
      /prices\.q: the symbol has no unit/,
    );
    expect(bad({ units: { p: "USD", q: "USD" }, schedule: [{ at: "00:00", prices: { p: 1 } }] })).toThrow(
      /units\.q: the symbol is never given a price/,
    );
  });

  it("refuses the same time twice, a non-numeric price, and unknown fields", () => {
    const twice = [
      { at: "06:00", prices: { p: 1 } },
      { at: "06:00", prices: { p: 2 } },
    ];
    expect(bad({ units: { p: "USD" }, schedule: twice })).toThrow(/appears twice/);
    expect(bad({ units: { p: "USD" }, schedule: [{ at: "06:00", prices: { p: "1.2" } }] })).toThrow(
      /finite number/,
    );
    expect(bad({ units: { p: "USD" }, schedule: [], extra: 1 })).toThrow(/unknown field 'extra'/);
  });
});

describe("accelerated time", () => {
  it("runs 60 simulated seconds per wall second at timeScale 60 (the service's ScaledClock over the wall clock)", () => {
    const wall = new ManualClock(1_000_000);
    const clock = new ScaledClock(60, at(6), wall);
    wall.advance(1000);
    expect(clock.now()).toBe(at(6, 1));
  });

  it("waits one wall second for a change one simulated minute ahead at timeScale 60, and never negative", () => {
    expect(wallDelayUntil(at(6, 1), at(6), 60)).toBe(1000);
    expect(wallDelayUntil(at(6), at(6, 1), 60)).toBe(0);
  });
});
