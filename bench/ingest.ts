/**
 * Ingest + steady throughput against the raw broker rate, measured in the same run on the same
 * messages: 50-tag rto.measurements.v1 batches published on rto.<site>.raw.bench.
 *
 * Every party is its own process, as deployed (each service is its own process):
 *   raw      publisher process → broker → a counting subscriber process (the broker-and-client limit);
 *   pipeline publisher process → broker → ingest process (parse, validate, resolve, judge, build +
 *            validate + publish measurements) → broker → steady process (parse, validate, R-statistic
 *            and noise test per tag); the clock stops when steady has handled the last batch.
 * Each pair of phases runs `reps` times; the table shows the best rate of each (other work on the
 * machine only ever slows a phase down).
 *
 * The peer here is the broker itself, not SciPy: the question is how much of the broker's rate the
 * services keep. Target ≥ 70 %. The R-statistic core alone (≥ 5·10⁶ samples/s) is bench/steady.ts.
 *
 * Run: npx tsx bench/ingest.ts [batches=4000] [nats|mqtt] [reps=2]
 * Profile the workers: BENCH_CPU_PROF=<dir> npx tsx bench/ingest.ts ...  (node --cpu-prof per process)
 * Needs Mosquitto and nats-server (found as the tests find them).
 */
import { type ChildProcess, spawn } from "node:child_process";
import { fileURLToPath } from "node:url";
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

const TAGS = 50;

/** What every worker is told (JSON in BENCH_WORKER). */
interface WorkerConfig {
  role: "publisher" | "counter" | "ingest" | "steady";
  transport: "nats" | "mqtt";
  url: string;
  site: string;
  batches: number;
}

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

function connect(c: WorkerConfig): Promise<Bus> {
  // NATS core: no JetStream stream, so publishes are plain core publishes.
  return c.transport === "nats" ? connectNats({ servers: c.url, streams: [] }) : connectMqtt({ url: c.url });
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

const send = (m: unknown) => process.send?.(m);

/** One party of the benchmark, in its own process; talks to the parent over IPC. */
async function worker(c: WorkerConfig): Promise<void> {
  const raw = subject(c.site, "raw.bench");
  const base = {
    site: c.site,
    bus: { transport: c.transport, url: c.url },
    http: { enabled: false },
    logLevel: "silent" as const,
    heartbeatS: 3600,
  };
  let count = 0;
  const counted = () => {
    count++;
    if (count % c.batches === 0) send({ done: count });
  };
  let stop: () => Promise<void> = async () => undefined;
  if (c.role === "publisher") {
    const bus = await connect(c);
    const payloads = messages(c.site, c.batches);
    process.on("message", (m: { go?: boolean }) => {
      if (!m.go) return;
      void (async () => {
        // Up to 256 publishes in flight: the publisher should not be what limits the rate.
        for (let k = 0; k < payloads.length; k += 256)
          await Promise.all(payloads.slice(k, k + 256).map((p) => bus.publish(raw, p)));
        send({ published: payloads.length });
      })();
    });
    stop = () => bus.close();
  } else if (c.role === "counter") {
    const bus = await connect(c);
    await bus.subscribe(`${subject(c.site, "raw")}.>`, counted);
    stop = () => bus.close();
  } else if (c.role === "ingest") {
    const config = loadConfig<IngestConfig>(ingestConfigSchema, {
      ...base,
      ingest: { siteModelFile: "(given)", tagHealthIntervalS: 60 },
    });
    const svc = await startIngest(config, {
      bus: await connect(c),
      model: benchModel(),
      log: silentLogger(),
    });
    stop = () => svc.stop();
  } else {
    const config = loadConfig<SteadyConfig>(steadyConfigSchema, {
      ...base,
      steady: { siteModelFile: "(given)", followCommands: false },
    });
    const bus = counting(await connect(c), subject(c.site, "measurements"), counted);
    const svc = await startSteady(config, { bus, model: benchModel(), log: silentLogger() });
    stop = () => svc.stop();
  }
  process.on("message", (m: { exit?: boolean }) => {
    if (m.exit) void stop().finally(() => process.exit(0));
  });
  send({ ready: true });
}

// ---- parent ----

interface Proc {
  child: ChildProcess;
  next(pred: (m: Record<string, unknown>) => boolean): Promise<Record<string, unknown>>;
}

function spawnWorker(c: WorkerConfig): Proc {
  const prof = process.env.BENCH_CPU_PROF;
  const args = [
    ...(prof ? ["--cpu-prof", `--cpu-prof-dir=${prof}/${c.role}-${c.transport}`] : []),
    "--import",
    "tsx",
    fileURLToPath(import.meta.url),
  ];
  const child = spawn(process.execPath, args, {
    stdio: ["ignore", "inherit", "inherit", "ipc"],
    env: { ...process.env, BENCH_WORKER: JSON.stringify(c) },
  });
  const waiting: {
    pred: (m: Record<string, unknown>) => boolean;
    resolve: (m: Record<string, unknown>) => void;
  }[] = [];
  child.on("message", (m: Record<string, unknown>) => {
    const i = waiting.findIndex((w) => w.pred(m));
    if (i >= 0) waiting.splice(i, 1)[0]?.resolve(m);
  });
  return {
    child,
    next: (pred) => new Promise((resolve) => waiting.push({ pred, resolve })),
  };
}

const ready = (p: Proc) => p.next((m) => m.ready === true);
const done = (p: Proc) => p.next((m) => typeof m.done === "number");
const exit = (p: Proc) =>
  new Promise<void>((resolve) => {
    p.child.once("exit", () => resolve());
    p.child.send({ exit: true });
  });

async function timed(publisher: Proc, sink: Proc, timeoutMs: number): Promise<number> {
  const finished = done(sink);
  const t0 = performance.now();
  publisher.child.send({ go: true });
  const ok = await Promise.race([
    finished.then(() => true),
    new Promise<boolean>((r) => setTimeout(() => r(false), timeoutMs)),
  ]);
  return ok ? (performance.now() - t0) / 1000 : Number.NaN;
}

interface Row {
  transport: string;
  rawBatchesPerS: number;
  pipeBatchesPerS: number;
}

async function run(transport: "nats" | "mqtt", batches: number, reps: number): Promise<Row> {
  const { natsUrl, startMosquitto, testSite } = await import("../test/support/brokers.js");
  // Our own Mosquitto with max_queued_messages 0: the default of 1000 drops QoS 1 messages for a
  // subscriber that lags, which a backlog of thousands of batches makes certain (LIBRARY-NOTES).
  const own = transport === "mqtt" ? await startMosquitto() : undefined;
  const url = own ? own.url : await natsUrl();
  const site = testSite("bench");
  const cfg = (role: WorkerConfig["role"]): WorkerConfig => ({ role, transport, url, site, batches });
  const publisher = spawnWorker(cfg("publisher"));
  await ready(publisher);
  let rawBest = 0;
  let pipeBest = 0;
  for (let r = 0; r < reps; r++) {
    // Phase 1: the raw rate. Only a counter listens.
    const counter = spawnWorker(cfg("counter"));
    await ready(counter);
    rawBest = Math.max(rawBest, batches / (await timed(publisher, counter, 60_000)));
    await exit(counter);
    // Phase 2: the same messages through fresh ingest and steady processes.
    const steady = spawnWorker(cfg("steady"));
    const ingest = spawnWorker(cfg("ingest"));
    await Promise.all([ready(steady), ready(ingest)]);
    pipeBest = Math.max(pipeBest, batches / (await timed(publisher, steady, 180_000)));
    await Promise.all([exit(steady), exit(ingest)]);
  }
  await exit(publisher);
  await own?.stop();
  return {
    transport: transport === "nats" ? "NATS core" : "Mosquitto (MQTT 5, QoS 1)",
    rawBatchesPerS: rawBest,
    pipeBatchesPerS: pipeBest,
  };
}

const workerConfig = process.env.BENCH_WORKER;
if (workerConfig) {
  await worker(JSON.parse(workerConfig) as WorkerConfig);
} else {
  const batches = Number(process.argv[2] ?? 4000);
  const only = process.argv[3];
  const reps = Number(process.argv[4] ?? 2);
  const rows: Row[] = [];
  for (const t of ["nats", "mqtt"] as const) if (!only || only === t) rows.push(await run(t, batches, reps));
  const { stopOwnBrokers } = await import("../test/support/brokers.js");
  await stopOwnBrokers();
  const f = (x: number) => (Number.isFinite(x) ? x.toFixed(0) : "timeout").padStart(9);
  console.log(
    `\n${batches} batches of ${TAGS} tags, best of ${reps}; publisher, counter, ingest and steady each in its own process\n`,
  );
  console.log(
    "transport                     raw batch/s  raw values/s  ingest+steady batch/s  values/s   ratio  target",
  );
  for (const r of rows) {
    const ratio = r.pipeBatchesPerS / r.rawBatchesPerS;
    console.log(
      `${r.transport.padEnd(29)} ${f(r.rawBatchesPerS)}    ${f(r.rawBatchesPerS * TAGS)}    ${f(r.pipeBatchesPerS)}            ${f(r.pipeBatchesPerS * TAGS)}  ${(100 * ratio).toFixed(0).padStart(4)} %  ${ratio >= 0.7 ? "met" : "NOT met"}`,
    );
  }
  process.exit(0);
}
