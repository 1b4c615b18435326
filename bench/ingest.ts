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
 * machine only ever slows a phase down). A second table gives the CPU time each party (the broker
 * included, read from /proc) spent per 1 000 batches in the best run of each phase: on a machine
 * with fewer cores than parties, the ratio is bounded by how much more CPU the pipeline needs than
 * the bare broker path.
 *
 * The data is normal operation of a steady plant: per tag a constant plus seeded Gaussian white
 * noise at the tag's declared σ (0.2 degC), sampled at 20 Hz (sample times 50 ms apart, the last one
 * at generation time). So ingest passes every value as good, and steady's verdict changes only when
 * its R or noise test raises a false alarm on white noise: 215 published steady events in 4 000
 * batches with this seed (the last column of the CPU table). Earlier versions stamped every batch
 * with the wall clock while building 4 000 of them in a fraction of a second, with a sine wave of
 * amplitude 0.3 as the value: a 1 ms step with a change of 0.2 degC is 200 degC/s, over the tags'
 * 50 degC/s spike limit. Replayed through the same pipeline and detector, 17 % of the values were
 * rejected as spikes and 1 071 of 1 205 verdict changes were "blocked" ones, each published: that
 * measured fault handling, not normal operation.
 *
 * The peer here is the broker itself, not SciPy: the question is how much of the broker's rate the
 * services keep. Target ≥ 70 %. The R-statistic core alone (≥ 5·10⁶ samples/s) is bench/steady.ts.
 *
 * Run: npx tsx bench/ingest.ts [batches=4000] [nats|mqtt] [reps=2]
 * Profile the workers: BENCH_CPU_PROF=<dir> npx tsx bench/ingest.ts ...  (node --cpu-prof per process)
 *
 * A third table times the services' own work per batch in this process, with no bus: what ingest and
 * steady do to each message however fast the transport. Ingest is one process, so 1 / (its stages)
 * bounds the pipeline's rate whatever the transport costs; the table prints that bound as a ratio
 * of the raw rate measured in the same run.
 * Needs Mosquitto and nats-server (found as the tests find them).
 */
import { type ChildProcess, spawn } from "node:child_process";
import { readdirSync, readFileSync, readlinkSync } from "node:fs";
import { fileURLToPath } from "node:url";
import { type IngestConfig, ingestConfigSchema } from "../services/ingest/config.js";
import { start as startIngest } from "../services/ingest/index.js";
import { createPipeline, type RawInput } from "../services/ingest/pipeline.js";
import type { Bus, RawHandler, SubscribeOptions } from "../services/kit/bus.js";
import { loadConfig } from "../services/kit/config.js";
import { createEvent, decodeEvent, encodeEvent } from "../services/kit/envelope.js";
import type { Measurements } from "../services/kit/generated/messages.js";
import { silentLogger } from "../services/kit/log.js";
import { connectMqtt } from "../services/kit/mqtt.js";
import { connectNats } from "../services/kit/nats.js";
import { createRandom } from "../services/kit/random.js";
import { schemaRegistry } from "../services/kit/schemas.js";
import { subject } from "../services/kit/subjects.js";
import { loadSiteModel } from "../services/model/index.js";
import { type SteadyConfig, steadyConfigSchema } from "../services/steady/config.js";
import { detectorBatches, siteDetector, start as startSteady } from "../services/steady/index.js";

const TAGS = 50;
/** Declared measurement standard deviation of every tag, degC (the model's `sigma`). */
const SIGMA = 0.2;
/** Time between two batches' sample times, ms (20 Hz). */
const SAMPLE_MS = 50;

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
    return `  - { id: TI-${i + 1}, variable: T${i + 1}, unit: degC, sigma: ${SIGMA}, range: { min: 0, max: 200 }, maxRatePerS: 50, frozenAfterS: 600, staleAfterS: 600${key} }`;
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

/**
 * Wraps a bus so that every handled message on `filter` is counted after its handler finished, and
 * every publish is counted through `onPublish`.
 */
function counting(bus: Bus, filter: string, onHandled: () => void, onPublish: () => void): Bus {
  return new Proxy(bus, {
    get(target, prop, receiver) {
      if (prop === "publish") {
        return (...args: Parameters<Bus["publish"]>) => {
          onPublish();
          return target.publish(...args);
        };
      }
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
  // Sample times end at generation time and must all stay younger than the tags' staleAfterS
  // (600 s) for the whole run, or ingest would reject them as stale.
  if (n * SAMPLE_MS > 300_000)
    throw new Error(`at most ${300_000 / SAMPLE_MS} batches (sample times span n × ${SAMPLE_MS} ms)`);
  const first = Date.now() - (n - 1) * SAMPLE_MS;
  let now = first;
  const emitter = { site, service: "bench", instance: "0", clock: { now: () => now }, registry };
  const random = createRandom(20261202);
  const out: Buffer[] = [];
  for (let k = 0; k < n; k++) {
    now = first + k * SAMPLE_MS;
    const values = Array.from({ length: TAGS }, (_, i) => ({
      tag: `TI-${i + 1}`,
      value: 80 + i * 0.5 + SIGMA * random.normal(),
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
  let published = 0;
  const counted = () => {
    count++;
    if (count % c.batches === 0) send({ done: count, published });
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
    const bus = counting(await connect(c), subject(c.site, "measurements"), counted, () => published++);
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

/**
 * CPU time a process has used so far, s: the sum over its threads (GC and I/O helpers included) of
 * the scheduler's run time in /proc/<pid>/task/<tid>/schedstat (ns). 0 where /proc is missing.
 */
function cpuSeconds(pid: number | undefined): number {
  if (pid === undefined) return 0;
  let ns = 0;
  try {
    for (const tid of readdirSync(`/proc/${pid}/task`)) {
      try {
        ns += Number(readFileSync(`/proc/${pid}/task/${tid}/schedstat`, "utf8").split(" ")[0]);
      } catch {
        // the thread ended in between
      }
    }
  } catch {
    return 0;
  }
  return ns / 1e9;
}

/** The process listening on 127.0.0.1:`port` (the broker), found through /proc; undefined if unknown. */
function listenerPid(port: number): number | undefined {
  try {
    const hex = port.toString(16).toUpperCase().padStart(4, "0");
    const inodes = new Set<string>();
    for (const line of readFileSync("/proc/net/tcp", "utf8").split("\n").slice(1)) {
      const f = line.trim().split(/\s+/);
      // f[1] local address, f[3] state (0A = LISTEN), f[9] inode
      if (f[1]?.endsWith(`:${hex}`) && f[3] === "0A" && f[9]) inodes.add(`socket:[${f[9]}]`);
    }
    for (const pid of readdirSync("/proc")) {
      if (!/^\d+$/.test(pid)) continue;
      try {
        for (const fd of readdirSync(`/proc/${pid}/fd`)) {
          if (inodes.has(readlinkSync(`/proc/${pid}/fd/${fd}`))) return Number(pid);
        }
      } catch {
        // not ours to read, or gone
      }
    }
  } catch {
    // no /proc
  }
  return undefined;
}

/** One timed phase: its duration and the CPU seconds each party used during it. */
interface Phase {
  seconds: number;
  cpu: Record<string, number>;
  /** Events steady published (verdict changes, cycles, snapshots); pipeline phase only. */
  published?: number;
}

async function timed(
  publisher: Proc,
  sink: Proc,
  parties: Record<string, number | undefined>,
  timeoutMs: number,
): Promise<Phase> {
  const finished = done(sink);
  const before = Object.fromEntries(Object.entries(parties).map(([k, pid]) => [k, cpuSeconds(pid)]));
  const t0 = performance.now();
  publisher.child.send({ go: true });
  const result = await Promise.race([
    finished,
    new Promise<undefined>((r) => setTimeout(() => r(undefined), timeoutMs)),
  ]);
  const seconds = result ? (performance.now() - t0) / 1000 : Number.NaN;
  const cpu = Object.fromEntries(
    Object.entries(parties).map(([k, pid]) => [k, cpuSeconds(pid) - (before[k] ?? 0)]),
  );
  return typeof result?.published === "number"
    ? { seconds, cpu, published: result.published }
    : { seconds, cpu };
}

interface Row {
  transport: string;
  rawBatchesPerS: number;
  pipeBatchesPerS: number;
  raw: Phase;
  pipe: Phase;
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
  const broker = listenerPid(Number(new URL(url).port));
  let raw: Phase = { seconds: Number.POSITIVE_INFINITY, cpu: {} };
  let pipe: Phase = { seconds: Number.POSITIVE_INFINITY, cpu: {} };
  // NaN (a timeout) never wins, so a phase that always timed out keeps seconds = ∞ → rate 0.
  const better = (a: Phase, b: Phase) => (b.seconds < a.seconds ? b : a);
  for (let r = 0; r < reps; r++) {
    // Phase 1: the raw rate. Only a counter listens.
    const counter = spawnWorker(cfg("counter"));
    await ready(counter);
    const parties = { publisher: publisher.child.pid, broker, counter: counter.child.pid };
    raw = better(raw, await timed(publisher, counter, parties, 60_000));
    await exit(counter);
    // Phase 2: the same messages through fresh ingest and steady processes.
    const steady = spawnWorker(cfg("steady"));
    const ingest = spawnWorker(cfg("ingest"));
    await Promise.all([ready(steady), ready(ingest)]);
    const pipeParties = {
      publisher: publisher.child.pid,
      broker,
      ingest: ingest.child.pid,
      steady: steady.child.pid,
    };
    pipe = better(pipe, await timed(publisher, steady, pipeParties, 180_000));
    await Promise.all([exit(steady), exit(ingest)]);
  }
  await exit(publisher);
  await own?.stop();
  return {
    transport: transport === "nats" ? "NATS core" : "Mosquitto (MQTT 5, QoS 1)",
    rawBatchesPerS: batches / raw.seconds,
    pipeBatchesPerS: batches / pipe.seconds,
    raw,
    pipe,
  };
}

/** Best-of-3 in-process cost of each stage, µs per batch (no bus: the services' own work only). */
function stageCosts(batches: number): Record<string, number> {
  const registry = schemaRegistry();
  const model = benchModel();
  const payloads = messages("bench", batches);
  let now = Date.now();
  const clock = { now: () => now };
  const ingestEmitter = { site: "bench", service: "ingest", instance: "0", clock, registry };
  const best: Record<string, number> = {};
  for (let rep = 0; rep < 3; rep++) {
    // Fresh state each round, configured from the services' defaults, as in the workers.
    const ic = loadConfig<IngestConfig>(ingestConfigSchema, {
      site: "bench",
      bus: { transport: "nats", url: "nats://127.0.0.1:4222" },
      ingest: { siteModelFile: "(given)" },
    }).ingest;
    const sc = loadConfig<SteadyConfig>(steadyConfigSchema, {
      site: "bench",
      bus: { transport: "nats", url: "nats://127.0.0.1:4222" },
      steady: { siteModelFile: "(given)" },
    }).steady;
    const pipeline = createPipeline(model, {
      acceptUncertain: ic.acceptUncertain,
      maxClockSkewS: ic.maxClockSkewS,
      sweepEveryMs: ic.staleCheckIntervalS * 1000,
    });
    const { detector } = siteDetector(model, sc);
    const t = { decodeIn: 0, process: 0, buildOut: 0, encodeOut: 0, decodeSteady: 0, observe: 0 };
    for (const payload of payloads) {
      now = Date.now();
      let a = performance.now();
      const d = decodeEvent(registry, payload, 1 << 20);
      let b = performance.now();
      t.decodeIn += b - a;
      if (!d.ok || d.event.type !== "rto.measurements.v1") throw new Error("bench batch failed to decode");
      a = b;
      const inputs: RawInput[] = d.event.data.values.map((v) => ({
        name: v.tag,
        value: v.value,
        timeMs: v.time,
        quality: v.quality,
      }));
      const out = pipeline.process("bench", inputs, now);
      b = performance.now();
      t.process += b - a;
      a = b;
      const event = createEvent(
        ingestEmitter,
        "rto.measurements.v1",
        { source: "bench", values: out.values as Measurements["values"] },
        { causedBy: d.event },
      );
      b = performance.now();
      t.buildOut += b - a;
      a = b;
      const wire = encodeEvent(event);
      b = performance.now();
      t.encodeOut += b - a;
      a = b;
      const s = decodeEvent(registry, wire, 1 << 20);
      b = performance.now();
      t.decodeSteady += b - a;
      if (!s.ok || s.event.type !== "rto.measurements.v1") throw new Error("measurements failed to decode");
      a = b;
      for (const batch of detectorBatches(s.event.data.values)) detector.observe(batch, now);
      t.observe += performance.now() - a;
    }
    for (const [k, v] of Object.entries(t))
      best[k] = Math.min(best[k] ?? Number.POSITIVE_INFINITY, (1000 * v) / batches);
  }
  return best;
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
  // CPU per 1 000 batches: with 2 cores, a phase cannot run faster than (Σ CPU) / 2 allows.
  const ms = (s: number | undefined) => (s === undefined ? "" : ((1e6 * s) / batches).toFixed(0)).padStart(9);
  console.log(
    "\nCPU ms per 1000 batches (best run of each phase; all threads, from /proc/<pid>/task/*/schedstat)",
  );
  console.log(
    "transport / phase                 publisher   broker  counter   ingest   steady      sum   wall  steady events",
  );
  for (const r of rows) {
    for (const [name, p] of [
      ["raw", r.raw],
      ["ingest+steady", r.pipe],
    ] as const) {
      const sum = Object.values(p.cpu).reduce((a, b) => a + b, 0);
      console.log(
        `${`${r.transport.split(" ")[0]} ${name}`.padEnd(33)} ${ms(p.cpu.publisher)}${ms(p.cpu.broker)}${ms(p.cpu.counter)}${ms(p.cpu.ingest)}${ms(p.cpu.steady)}${ms(sum)}${ms(p.seconds)}  ${p.published ?? ""}`,
      );
    }
  }
  const st = stageCosts(batches);
  const ingestUs = (st.decodeIn ?? 0) + (st.process ?? 0) + (st.buildOut ?? 0) + (st.encodeOut ?? 0);
  const steadyUs = (st.decodeSteady ?? 0) + (st.observe ?? 0);
  const us = (x: number | undefined) => (x ?? 0).toFixed(1).padStart(7);
  console.log("\nServices' own work per batch, in-process, no bus (µs, best of 3)");
  console.log(
    `ingest: parse+validate in ${us(st.decodeIn)}  resolve+judge ${us(st.process)}  build+validate out ${us(st.buildOut)}  stringify ${us(st.encodeOut)}  = ${us(ingestUs)}`,
  );
  console.log(
    `steady: parse+validate in ${us(st.decodeSteady)}  detector ${us(st.observe)}  = ${us(steadyUs)}`,
  );
  for (const r of rows) {
    const ceiling = 1e6 / ingestUs;
    console.log(
      `${r.transport}: at these stage costs one ingest process cannot exceed ${ceiling.toFixed(0)} batch/s = ${((100 * ceiling) / r.rawBatchesPerS).toFixed(0)} % of this run's raw rate, even with a free transport`,
    );
  }
  process.exit(0);
}
