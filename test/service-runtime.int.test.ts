import { afterEach, describe, expect, it } from "vitest";
import type { Bus } from "../services/kit/bus.js";
import { type BaseConfig, loadConfig, serviceConfigSchema } from "../services/kit/config.js";
import { silentLogger } from "../services/kit/log.js";
import { connectMqtt } from "../services/kit/mqtt.js";
import { createRandom } from "../services/kit/random.js";
import { type Service, startRuntime } from "../services/kit/service.js";
import { subject } from "../services/kit/subjects.js";
import { mqttUrl, testSite, waitFor } from "./support/brokers.js";

/** Seeded uniform numbers, so that every run sees the same data. */
const mulberry32 = (seed: number): (() => number) => createRandom(seed).uniform;

function malformed(rand: () => number, i: number, site: string): Buffer {
  switch (i % 5) {
    case 0: // random bytes
      return Buffer.from(
        Array.from({ length: 1 + Math.floor(rand() * 200) }, () => Math.floor(rand() * 256)),
      );
    case 1: // truncated JSON
      return Buffer.from(`{"specversion":"1.0","id":"x${i}","data":{`);
    case 2: // valid JSON, not an event
      return Buffer.from(JSON.stringify([i, rand(), null]));
    case 3: // an event with a wrong data field
      return Buffer.from(
        JSON.stringify({
          specversion: "1.0",
          id: `bad${i}`,
          source: `/steadfast/${site}/fuzz/0`,
          type: "rto.measurements.v1",
          time: "2026-12-02T00:00:00Z",
          datacontenttype: "application/json",
          dataschema: "https://steadfast.dev/schemas/rto.measurements.v1.json",
          site,
          data: {
            source: "fuzz",
            values: [{ tag: "TI-1", value: rand() > 0.5 ? "NaN" : {}, quality: "good", time: 1 }],
          },
        }),
      );
    default: // an envelope of an unknown type
      return Buffer.from(
        JSON.stringify({
          specversion: "1.0",
          id: `unk${i}`,
          source: `/steadfast/${site}/fuzz/0`,
          type: "rto.nonsense.v9",
          time: "2026-12-02T00:00:00Z",
          datacontenttype: "application/json",
          dataschema: "https://example.invalid/x",
          site,
          data: {},
        }),
      );
  }
}

describe("service runtime", () => {
  const cleanup: Array<() => Promise<void>> = [];
  afterEach(async () => {
    for (const c of cleanup.splice(0).reverse()) await c();
  });

  it("survives 1,000 malformed messages in a row, dead-letters each, and still handles a good one", async () => {
    const site = testSite("fuzz");
    const url = await mqttUrl();
    const config = loadConfig<BaseConfig>(serviceConfigSchema(), {
      site,
      bus: { transport: "mqtt", url },
      http: { enabled: true, port: 0 },
      logLevel: "silent",
    });
    const rt = await startRuntime("steady", config, { log: silentLogger() });
    const handled: string[] = [];
    rt.track(
      await rt.events.on(
        subject(site, "measurements"),
        ["rto.measurements.v1"],
        (e) => void handled.push(e.id),
      ),
    );
    const service: Service = rt.ready();
    cleanup.push(() => service.stop());

    const watcher: Bus = await connectMqtt({ url });
    cleanup.push(() => watcher.close());
    const reasons = new Map<string, number>();
    await watcher.subscribe(subject(site, "deadletter"), (m) => {
      const r = JSON.parse(Buffer.from(m.payload).toString()).data.reason as string;
      reasons.set(r, (reasons.get(r) ?? 0) + 1);
    });
    const rand = mulberry32(20261202);
    for (let i = 0; i < 1000; i++)
      await watcher.publish(subject(site, "measurements"), malformed(rand, i, site));
    const good = await rt.events.publish("measurements", "rto.measurements.v1", {
      source: "probe",
      values: [{ tag: "TI-101", value: 81.5, quality: "good", time: Date.now() }],
    });
    const total = () => [...reasons.values()].reduce((a, b) => a + b, 0);
    expect(await waitFor(() => total() >= 1000 && handled.length === 1, 30_000)).toBe(true);
    expect(handled).toEqual([good.id]);
    expect(reasons.get("parse-error")).toBe(400);
    expect(reasons.get("schema-invalid")).toBe(400);
    expect(reasons.get("unknown-type")).toBe(200);
    const health = await fetch(`http://127.0.0.1:${service.httpPort}/readyz`);
    expect(health.status).toBe(200);
    const metrics = await (await fetch(`http://127.0.0.1:${service.httpPort}/metrics`)).text();
    expect(metrics).toMatch(
      /steadfast_dead_lettered_total\{stream="measurements",reason="parse-error",service="steady"\} 400/,
    );
  });

  it("refuses a bad config naming the field", () => {
    expect(() =>
      loadConfig<BaseConfig>(serviceConfigSchema(), { site: "r1", bus: { transport: "kafka" } }),
    ).toThrow(/\/bus\/transport/);
    expect(() => loadConfig<BaseConfig>(serviceConfigSchema(), { bus: {} })).toThrow(/config field \/site/);
  });
});
