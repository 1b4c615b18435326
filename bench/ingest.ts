/**
 * Ingest + steady throughput against the raw broker rate, measured in the same run on the same
 * messages: 50-tag rto.measurements.v1 batches published on rto.<site>.raw.bench.
 *
 *   raw      a subscriber that only counts the messages (the broker-and-client limit);
 *   pipeline ingest (parse, validate, resolve, judge, build + validate + publish measurements) and
 *            steady (parse, validate, R-statistic per tag) running in this process; the clock stops
 *            when steady has handled the last batch.
 *
 * The peer here is the broker itself, not SciPy: the question is how much of the broker's rate the
 * services keep. Target ≥ 70 %. Run: npx tsx bench/ingest.ts [batches]
 * Needs Mosquitto and nats-server (found as the tests find them).
 */

import { type IngestConfig, ingestConfigSchema } from "../services/ingest/config.js";
import { start as startIngest } from "../services/ingest/index.js";
import type { Bus, RawHandler, SubscribeOptions } from "../services/kit/bus.js";
import { loadConfig } from "../services/kit/config.js";
import { createEvent, encodeEvent } from "../services/kit/envelope.js";
import type { Measurements } from "../services/kit/generated/messages.js";
import { silentLogger } from "../services/kit/log.js";
import { connectMqtt } from "../services/kit/mqtt.js";
import { connectNats } from "../services/kit/nats.js";
import { schemaRegistry } from "../services/kit/schemas.js";
import { subject } from "../services/kit/subjects.js";
import { loadSiteModel } from "../services/model/index.js";
import { type SteadyConfig, steadyConfigSchema } from "../services/steady/config.js";
import { start as startSteady } from "../services/steady/index.js";
import { natsUrl, startMosquitto, stopOwnBrokers, testSite } from "../test/support/brokers.js";

const TAGS = 50;
const BATCHES = Number(process.argv[2] ?? 4000);

/** A site of 50 temperature tags, 5 of them key tags (invented for the benchmark). */
function benchModel() {
  const tags = Array.from({ length: TAGS }, (_, i) => {
    const key = i < 5 ? ", key: true" : "";
    return `  - { id: TI-${i + 1}, variable: T${i + 1}, unit: degC, sigma: 0.2, range: { min: 0, max: 200 }, maxRatePerS: 50, frozenAfterS: 600, staleAfterS: 600${key} }`;
  });
  const params = Array.from(
    { length: TAGS },
    (_, i) => `  - { symbol: T${i + 1}, unit: degC, initial: 80, min: 0, max: 200 }`,
  );
  const yaml = [
    "site: { id: bench, name: Bench }",
    "constants: [{ symbol: tres, unit: s, value: 1 }]",
    "tags:",
    ...tags,
    "parameters:",
    ...params,
    "decisions:",
    "  - { symbol: F, unit: kg/s, setpointTag: TI-1, min: 0, max: 10 }",
    "model:",
    "  unknowns: [{ symbol: M, unit: kg, initial: 1 }]",
    "  equations: [{ name: m, expression: F - M / tres = 0, unit: kg/s }]",
    "objective: { sense: max, expression: M, unit: kg }",
  ].join("\n");
  return loadSiteModel(yaml, "bench.yaml");
}

/** Wraps a bus so that every handled message on `filter` is counted after its handler finished. */
function counting(bus: Bus, filter: string, onHandled: () => void): Bus {
  return new Proxy(bus, {
    get(target, prop, receiver) {
      if (prop === "subscribe") {
        return (f: string, handler: RawHandler, options?: SubscribeOptions) =>
          target.subscribe(
            f,
            async (msg) => {
              await handler(msg);
              if (f === filter) onHandled();
            },
            options,
          );
      }
      const v = Reflect.get(target, prop, receiver);
      return typeof v === "function" ? v.bind(target) : v;
    },
  });
}

function messages(site: string, n: number): Buffer[] {
  const registry = schemaRegistry();
  let now = Date.now();
  const emitter = { site, service: "bench", instance: "0", clock: { now: () => now }, registry };
  const out: Buffer[] = [];
  for (let k = 0; k < n; k++) {
    now = Date.now();
    const values = Array.from({ length: TAGS }, (_, i) => ({
      tag: `TI-${i + 1}`,
      value: 80 + i * 0.5 + Math.sin(k * 0.7 + i) * 0.3,
      quality: "good" as const,
      time: now,
    }));
    out.push(
      encodeEvent(
        createEvent(emitter, "rto.measurements.v1", {
          source: "bench",
          values: values as Measurements["values"],
        }),
      ),
    );
  }
  return out;
}

async function publishAll(bus: Bus, to: string, payloads: Buffer[]): Promise<void> {
  // Up to 256 publishes in flight: the publisher should not be what limits the rate.
  const window = 256;
  for (let k = 0; k < payloads.length; k += window) {
    await Promise.all(payloads.slice(k, k + window).map((p) => bus.publish(to, p)));
  }
}

async function waitCount(get: () => number, n: number, timeoutMs: number): Promise<boolean> {
  const until = Date.now() + timeoutMs;
  while (get() < n) {
    if (Date.now() > until) return false;
    await new Promise((r) => setTimeout(r, 2));
  }
  return true;
}

interface Row {
  transport: string;
  rawBatchesPerS: number;
  pipeBatchesPerS: number;
  pipeValuesPerS: number;
  ok: boolean;
}

async function run(transport: "nats" | "mqtt"): Promise<Row> {
  // Our own Mosquitto with max_queued_messages 0: the default of 1000 drops QoS 1 messages for a
  // subscriber that lags, which a backlog of thousands of batches makes certain (LIBRARY-NOTES).
  const own = transport === "mqtt" ? await startMosquitto() : undefined;
  const url = own ? own.url : await natsUrl();
  const connect = (): Promise<Bus> =>
    transport === "nats" ? connectNats({ servers: url, streams: [] }) : connectMqtt({ url });
  const site = testSite("bench");
  const raw = subject(site, "raw.bench");
  const payloads = messages(site, BATCHES);
  const publisher = await connect();

  // Phase 1: the raw rate. A subscriber that only counts.
  const counter = await connect();
  let rawCount = 0;
  await counter.subscribe(`${subject(site, "raw")}.>`, () => {
    rawCount++;
  });
  const t0 = performance.now();
  await publishAll(publisher, raw, payloads);
  const rawOk = await waitCount(() => rawCount, BATCHES, 60_000);
  const rawS = (performance.now() - t0) / 1000;
  await counter.close();

  // Phase 2: the same messages through ingest and steady.
  const model = benchModel();
  const base = { site, bus: { transport, url }, http: { enabled: false }, logLevel: "silent" as const };
  const ingestConfig = loadConfig<IngestConfig>(ingestConfigSchema, {
    ...base,
    heartbeatS: 60,
    ingest: { siteModelFile: "(given)", tagHealthIntervalS: 60 },
  });
  const steadyConfig = loadConfig<SteadyConfig>(steadyConfigSchema, {
    ...base,
    heartbeatS: 60,
    steady: { siteModelFile: "(given)", followCommands: false },
  });
  let handled = 0;
  const steadyBus = counting(await connect(), subject(site, "measurements"), () => {
    handled++;
  });
  const ingestBus = await connect();
  const steady = await startSteady(steadyConfig, { bus: steadyBus, model, log: silentLogger() });
  const ingest = await startIngest(ingestConfig, { bus: ingestBus, model, log: silentLogger() });
  const t1 = performance.now();
  await publishAll(publisher, raw, payloads);
  const pipeOk = await waitCount(() => handled, BATCHES, 120_000);
  const pipeS = (performance.now() - t1) / 1000;
  await ingest.stop();
  await steady.stop();
  await Promise.all([ingestBus.close(), steadyBus.close(), publisher.close()]);
  await own?.stop();
  return {
    transport: transport === "nats" ? "NATS core" : "Mosquitto (MQTT 5, QoS 1)",
    rawBatchesPerS: BATCHES / rawS,
    pipeBatchesPerS: handled / pipeS,
    pipeValuesPerS: (handled * TAGS) / pipeS,
    ok: rawOk && pipeOk,
  };
}

const rows: Row[] = [];
const only = process.argv[3];
for (const t of ["nats", "mqtt"] as const) if (!only || only === t) rows.push(await run(t));
await stopOwnBrokers();

const f = (x: number) => x.toFixed(0).padStart(9);
console.log(
  `\n${BATCHES} batches of ${TAGS} tags; raw = a counting subscriber on the same broker, same messages\n`,
);
console.log(
  "transport                     raw batch/s  raw values/s  ingest+steady batch/s  values/s   ratio  complete",
);
for (const r of rows) {
  console.log(
    `${r.transport.padEnd(29)} ${f(r.rawBatchesPerS)}    ${f(r.rawBatchesPerS * TAGS)}    ${f(r.pipeBatchesPerS)}            ${f(r.pipeValuesPerS)}  ${((100 * r.pipeBatchesPerS) / r.rawBatchesPerS).toFixed(0).padStart(4)} %  ${r.ok ? "yes" : "NO"}`,
  );
}
process.exit(0);
