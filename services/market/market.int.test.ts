import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, afterEach, describe, expect, it } from "vitest";
import { mqttUrl, stopOwnBrokers, testSite, waitFor } from "../../test/support/brokers.js";
import type { Bus } from "../kit/bus.js";
import { loadConfig } from "../kit/config.js";
import { decodeEvent, type Event } from "../kit/envelope.js";
import { silentLogger } from "../kit/log.js";
import { connectMqtt } from "../kit/mqtt.js";
import { schemaRegistry } from "../kit/schemas.js";
import { subject } from "../kit/subjects.js";
import { type MarketConfig, marketConfigSchema } from "./config.js";
import { start } from "./index.js";

const SCHEDULE = `
units:
  pFeed: USD/kg
  pPower: USD/kWh
schedule:
  - at: "00:00"
    prices: { pFeed: 1.10, pPower: 0.08 }
  - at: "06:00"
    prices: { pPower: 0.12 }
  - at: "17:00"
    prices: { pPower: 0.21 }
`;

describe("the market service", () => {
  const cleanup: Array<() => Promise<void> | void> = [];
  afterEach(async () => {
    for (const c of cleanup.splice(0).reverse()) await c();
  });
  afterAll(stopOwnBrokers);

  it("publishes the prices in force at start, retained, then the next change after the accelerated interval", async () => {
    const site = testSite("market");
    const url = await mqttUrl();
    const dir = mkdtempSync(join(tmpdir(), "sf-market-"));
    cleanup.push(() => rmSync(dir, { recursive: true, force: true }));
    const file = join(dir, "prices.yaml");
    writeFileSync(file, SCHEDULE);

    const registry = schemaRegistry();
    const watcher: Bus = await connectMqtt({ url });
    cleanup.push(() => watcher.close());
    const seen: Array<Event<"rto.prices.v1">> = [];
    await watcher.subscribe(subject(site, "prices"), (m) => {
      const d = decodeEvent(registry, m.payload, 1 << 20);
      if (d.ok && d.event.type === "rto.prices.v1") seen.push(d.event);
    });

    // One simulated minute per wall second, starting 90 simulated seconds before the 06:00 change.
    const config = loadConfig<MarketConfig>(marketConfigSchema, {
      site,
      bus: { transport: "mqtt", url },
      http: { enabled: false },
      logLevel: "silent",
      market: { scheduleFile: file, timeScale: 60, startAt: "2026-01-01T05:58:30Z" },
    });
    const wallStart = Date.now();
    const service = await start(config, { log: silentLogger() });
    cleanup.push(() => service.stop());

    expect(await waitFor(() => seen.length >= 1, 5000)).toBe(true);
    const first = seen[0]?.data;
    expect(first?.effectiveFrom).toBe(Date.parse("2026-01-01T00:00:00Z"));
    expect(first?.nextChangeAt).toBe(Date.parse("2026-01-01T06:00:00Z"));
    expect(first?.prices).toEqual([
      { symbol: "pFeed", value: 1.1, unit: "USD/kg" },
      { symbol: "pPower", value: 0.08, unit: "USD/kWh" },
    ]);

    expect(await waitFor(() => seen.length >= 2, 10_000)).toBe(true);
    const wallElapsedMs = Date.now() - wallStart;
    const second = seen[1]?.data;
    expect(second?.effectiveFrom).toBe(Date.parse("2026-01-01T06:00:00Z"));
    expect(second?.prices.find((p) => p.symbol === "pPower")?.value).toBe(0.12);
    expect(second?.prices.find((p) => p.symbol === "pFeed")?.value).toBe(1.1);
    // 90 simulated seconds at 60× is 1.5 wall seconds: the change must not come early.
    expect(wallElapsedMs).toBeGreaterThanOrEqual(1400);
    // The events are stamped in simulated time, as the rest of an accelerated loop stamps its own: the
    // change's event at (or, by the timer's latency × 60, just after) 06:00, not at the wall clock's time.
    const stamped = (k: number) => Date.parse(seen[k]?.time ?? "");
    expect(stamped(0)).toBeGreaterThanOrEqual(Date.parse("2026-01-01T05:58:30Z"));
    expect(stamped(0)).toBeLessThan(Date.parse("2026-01-01T06:00:00Z"));
    expect(stamped(1)).toBeGreaterThanOrEqual(Date.parse("2026-01-01T06:00:00Z"));
    expect(stamped(1)).toBeLessThan(Date.parse("2026-01-01T06:02:00Z"));

    // A late subscriber finds the current prices as the retained state of the stream.
    const late: Bus = await connectMqtt({ url });
    cleanup.push(() => late.close());
    const state = await late.readState(subject(site, "prices"), { timeoutMs: 2000 });
    const retained = state ? decodeEvent(registry, state, 1 << 20) : undefined;
    expect(retained?.ok && retained.event.data).toEqual(second);
  });

  it("stops at start-up with the field at fault when the schedule file is bad", async () => {
    const dir = mkdtempSync(join(tmpdir(), "sf-market-"));
    cleanup.push(() => rmSync(dir, { recursive: true, force: true }));
    const file = join(dir, "prices.yaml");
    writeFileSync(file, 'units: { p: USD }\nschedule:\n  - at: "25:00"\n    prices: { p: 1 }\n');
    const config = loadConfig<MarketConfig>(marketConfigSchema, {
      site: testSite("market"),
      bus: { transport: "mqtt", url: "mqtt://127.0.0.1:1" },
      http: { enabled: false },
      logLevel: "silent",
      market: { scheduleFile: file },
    });
    await expect(start(config, { log: silentLogger() })).rejects.toMatchObject({
      code: "MARKET_SCHEDULE_INVALID",
    });
  });
});
