/**
 * Ingest and steady together on real brokers: synthetic raw batches (seeded noise around a level, a
 * first-order step, steady again) give snapshots with the right means; data faults give rejected
 * values or unhealthy tags and no cycle; Sparkplug B births and data become measurements, and a seq
 * gap makes ingest ask the edge node for a rebirth.
 *
 * Ingest and steady run on a ManualClock that the test sets to each batch's sample time before it
 * publishes the batch and waits for ingest's answer, so an hour of plant time takes a second or two
 * and staleness is judged on plant time.
 */
import mqtt from "mqtt";
import { get as getSparkplugCodec } from "sparkplug-payload";
import { afterAll, describe, expect, it } from "vitest";
import { type IngestConfig, ingestConfigSchema } from "../services/ingest/config.js";
import { start as startIngest } from "../services/ingest/index.js";
import type { Bus } from "../services/kit/bus.js";
import { ManualClock } from "../services/kit/clock.js";
import { loadConfig } from "../services/kit/config.js";
import { connectBus } from "../services/kit/connect.js";
import { createEvent, type Event } from "../services/kit/envelope.js";
import type {
  CycleStatus,
  Measurements,
  Snapshot,
  SteadyVerdict,
  TagHealth,
} from "../services/kit/generated/messages.js";
import { silentLogger } from "../services/kit/log.js";
import { schemaRegistry } from "../services/kit/schemas.js";
import type { Service } from "../services/kit/service.js";
import { subject } from "../services/kit/subjects.js";
import { loadSiteModelFile, type SiteModel } from "../services/model/index.js";
import { type SteadyConfig, steadyConfigSchema } from "../services/steady/config.js";
import { start as startSteady } from "../services/steady/index.js";
import { mqttUrl, natsUrl, testSite, waitFor } from "./support/brokers.js";

const MODEL_FILE = new URL("./fixtures/sites/ingest-demo.yaml", import.meta.url).pathname;
const T0 = Date.UTC(2026, 0, 5, 8, 0, 0);

/** mulberry32, a small seeded PRNG, and Box–Muller normals on it. */
function gaussian(seed: number): () => number {
  let a = seed >>> 0;
  const u = () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
  return () => Math.sqrt(-2 * Math.log(1 - u())) * Math.cos(2 * Math.PI * u());
}

/** One sample of the plant: undefined leaves a tag out of the batch. */
interface Sample {
  flowKgPerS?: number;
  tempC?: number;
  levelKg?: number;
}

/** Levels and noise of the synthetic plant (noise = the site model's sigma). */
const FLOW_SIGMA = 0.05;
const TEMP_SIGMA = 0.2;
const LEVEL_SIGMA = 0.5;

/** Seeded noise around levels that move to new values by a first-order lag (τ in samples) at `stepAt`. */
function plant(seed: number, stepAt = Number.POSITIVE_INFINITY, tauSamples = 8) {
  const g = gaussian(seed);
  return (i: number): Required<Sample> => {
    const f = i < stepAt ? 0 : 1 - Math.exp(-(i - stepAt) / tauSamples);
    return {
      flowKgPerS: 10 + 2 * f + FLOW_SIGMA * g(),
      tempC: 80 + 5 * f + TEMP_SIGMA * g(),
      levelKg: 20 + 4 * f + LEVEL_SIGMA * g(),
    };
  };
}

interface Recorder {
  measurements: Event<"rto.measurements.v1">[];
  steady: Event<"rto.steady.v1">[];
  cycles: Event<"rto.cycle.v1">[];
  snapshots: Event<"rto.snapshot.v1">[];
  health: Event<"rto.tag-health.v1">[];
  deadletters: number;
}

interface Rig {
  site: string;
  clock: ManualClock;
  rec: Recorder;
  source: Bus;
  ingest: Service;
  steady: Service & { noteCommand(timeMs: number): void };
  /** Publishes one raw batch at sample i and waits until ingest has published its measurements. */
  send(i: number, s: Sample, extra?: Measurements["values"][number][]): Promise<void>;
  stop(): Promise<void>;
}

let model: SiteModel;
const rigs: Rig[] = [];

afterAll(async () => {
  for (const r of rigs.splice(0)) await r.stop();
});

async function rig(
  label: string,
  transport: "mqtt" | "nats",
  sparkplug?: { group: string; reorderTimeoutMs: number },
): Promise<Rig> {
  model ??= await loadSiteModelFile(MODEL_FILE);
  const site = testSite(label);
  const url = transport === "mqtt" ? await mqttUrl() : await natsUrl();
  const clock = new ManualClock(T0);
  const bus = { transport, url };
  const ingestConfig = loadConfig<IngestConfig>(ingestConfigSchema, {
    site,
    bus,
    http: { enabled: false },
    logLevel: "silent",
    ingest: {
      siteModelFile: MODEL_FILE,
      tagHealthIntervalS: 0.2,
      staleCheckIntervalS: 0.05,
      ...(sparkplug
        ? {
            sparkplug: {
              enabled: true,
              groups: [sparkplug.group],
              reorderTimeoutMs: sparkplug.reorderTimeoutMs,
              rebirthHoldOffMs: 0,
              tickMs: 50,
            },
          }
        : {}),
    },
  });
  const steadyConfig = loadConfig<SteadyConfig>(steadyConfigSchema, {
    site,
    bus,
    http: { enabled: false },
    logLevel: "silent",
    steady: { siteModelFile: MODEL_FILE },
  });
  // Sparkplug tests need ingest's reorder timer to see time pass: they run on the wall clock.
  const serviceClock = sparkplug ? { now: () => Date.now() } : clock;
  const rec: Recorder = {
    measurements: [],
    steady: [],
    cycles: [],
    snapshots: [],
    health: [],
    deadletters: 0,
  };
  const watcher = await connectBus({ site, bus }, { name: `${site}-watch` });
  const keep =
    <T>(list: T[]) =>
    (m: { payload: Uint8Array }) => {
      list.push(JSON.parse(Buffer.from(m.payload).toString("utf8")) as T);
    };
  await watcher.subscribe(subject(site, "measurements"), keep(rec.measurements));
  await watcher.subscribe(subject(site, "steady"), keep(rec.steady));
  await watcher.subscribe(subject(site, "cycle"), keep(rec.cycles));
  await watcher.subscribe(subject(site, "snapshot"), keep(rec.snapshots));
  await watcher.subscribe(subject(site, "tag-health"), keep(rec.health));
  await watcher.subscribe(subject(site, "deadletter"), () => {
    rec.deadletters++;
  });
  const steady = await startSteady(steadyConfig, { clock: serviceClock, log: silentLogger(), model });
  const ingest = await startIngest(ingestConfig, { clock: serviceClock, log: silentLogger(), model });
  const source = await connectBus({ site, bus }, { name: `${site}-source` });
  const emitter = { site, service: "sim", instance: "0", clock, registry: schemaRegistry() };
  let sent = 0;
  const fromSim = () => rec.measurements.filter((e) => e.data.source === "sim").length;
  const r: Rig = {
    site,
    clock,
    rec,
    source,
    ingest,
    steady,
    async send(i, s, extra = []) {
      const t = T0 + i * 1000;
      clock.set(t);
      const values: Measurements["values"][number][] = [];
      // The flow meter reports in kg/h under its own name; the site model converts it to kg/s.
      if (s.flowKgPerS !== undefined)
        values.push({ tag: "feed_flow", value: s.flowKgPerS * 3600, quality: "good", time: t });
      if (s.tempC !== undefined) values.push({ tag: "TI-102", value: s.tempC, quality: "good", time: t });
      if (s.levelKg !== undefined) values.push({ tag: "LI-103", value: s.levelKg, quality: "good", time: t });
      values.push(...extra);
      if (values.length === 0) return;
      const data: Measurements = { source: "sim", values: values as Measurements["values"] };
      await source.publish(
        subject(site, "raw.sim"),
        Buffer.from(JSON.stringify(createEvent(emitter, "rto.measurements.v1", data))),
      );
      sent++;
      const want = sent;
      if (!(await waitFor(() => fromSim() >= want, 10_000, 1)))
        throw new Error(`no measurements for batch ${i}`);
    },
    async stop() {
      await ingest.stop();
      await steady.stop();
      await source.close().catch(() => undefined);
      await watcher.close();
    },
  };
  rigs.push(r);
  return r;
}

/** Waits until steady has handled everything ingest published (its verdicts trail ingest's output). */
async function settle(): Promise<void> {
  await new Promise((res) => setTimeout(res, 300));
}

function statusesOf(rec: Recorder, tag: string): Map<string, number> {
  const out = new Map<string, number>();
  for (const e of rec.measurements)
    for (const v of e.data.values)
      if (v.tag === tag) out.set(v.status ?? "none", (out.get(v.status ?? "none") ?? 0) + 1);
  return out;
}

function tagStats(s: Snapshot, tag: string) {
  const t = s.tags.find((x) => x.tag === tag);
  if (!t) throw new Error(`${tag} not in the snapshot (excluded: ${JSON.stringify(s.excluded)})`);
  return t;
}

/** Mean within 4 standard errors of `level`, plus `allowance` for the tail of a first-order response. */
function expectMeanNear(mean: number, level: number, std: number, count: number, allowance = 0): void {
  expect(Math.abs(mean - level)).toBeLessThan((4 * std) / Math.sqrt(count) + allowance);
}

async function steadyStepSteady(transport: "mqtt" | "nats"): Promise<void> {
  // given ingest and steady on a small site, and a plant steady at 10 kg/s, 80 °C, 20 kg
  const r = await rig(`ss-${transport}`, transport);
  const p = plant(20260105, 200, 8);
  // when 200 steady samples go in (plus an unknown tag), then a step to 12 kg/s, 85 °C, 24 kg, then 250 more
  for (let i = 0; i < 450; i++) {
    const extra: Measurements["values"][number][] =
      i === 3 ? [{ tag: "XX-999", value: 1, quality: "good", time: T0 + i * 1000 }] : [];
    await r.send(i, p(i), extra);
  }
  expect(await waitFor(() => r.rec.snapshots.length >= 2, 10_000)).toBe(true);
  await settle();
  // then two cycles opened, each with its snapshot, and the snapshots carry the levels before and after
  const [first, second] = r.rec.snapshots as [Event<"rto.snapshot.v1">, Event<"rto.snapshot.v1">];
  expect(r.rec.snapshots).toHaveLength(2);
  expect(first.cycleid).toBeDefined();
  expect(second.cycleid).not.toBe(first.cycleid);
  const opened = r.rec.cycles.map((c) => c.data as CycleStatus);
  expect(opened.map((c) => [c.status, c.stage])).toEqual([
    ["opened", "steady"],
    ["opened", "steady"],
  ]);
  expect(r.rec.cycles.map((c) => c.cycleid)).toEqual([first.cycleid, second.cycleid]);
  expect(r.rec.cycles[0]?.data.eventIds).toEqual([first.id]);
  expect(first.data.endMs).toBeLessThan(T0 + 200_000);
  expect(second.data.startMs).toBeGreaterThan(T0 + 200_000);
  for (const [snap, flow, temp, level, tail] of [
    [first.data, 10, 80, 20, 0],
    // the window may start while the first-order response still has a small tail left
    [second.data, 12, 85, 24, 0.02],
  ] as const) {
    const f = tagStats(snap, "FI-101");
    const t = tagStats(snap, "TI-102");
    const l = tagStats(snap, "LI-103");
    expectMeanNear(f.mean, flow, FLOW_SIGMA, f.count, flow * tail);
    expectMeanNear(t.mean, temp, TEMP_SIGMA, t.count, temp * tail);
    expectMeanNear(l.mean, level, LEVEL_SIGMA, l.count, level * tail);
    // the flow came in kg/h and is reported in kg/s; the temperature is given in degC and in the model's K
    expect(f.unit).toBe("kg/s");
    expect(t.modelUnit).toBe("K");
    expect(t.modelMean - t.mean).toBeCloseTo(273.15, 9);
    expect(t.modelStd).toBeCloseTo(t.std, 12);
    // the standard deviations recover the noise put in (within 35 % for ≥ 50 samples)
    expect(f.std / FLOW_SIGMA).toBeGreaterThan(0.65);
    expect(f.std / FLOW_SIGMA).toBeLessThan(1.35);
    expect(f.count).toBeGreaterThanOrEqual(50);
  }
  // the steady verdict went transient after the step and steady again with the second cycle's id
  const states = r.rec.steady.map((e) => (e.data as SteadyVerdict).state);
  expect(states.slice(states.indexOf("steady") + 1)).toContain("transient");
  const lastSteady = r.rec.steady.filter((e) => e.data.steady).at(-1);
  expect(lastSteady?.cycleid).toBe(second.cycleid);
  // the unknown tag was published with its status, not dropped, and counted in tag health
  expect(statusesOf(r.rec, "XX-999").get("unknown-tag")).toBe(1);
  expect(
    await waitFor(() => r.rec.health.some((h) => h.data.unknown.some((u) => u.name === "XX-999")), 5000),
  ).toBe(true);
  expect(r.rec.deadletters).toBe(0);
}

/** Runs `n` samples of a faulty plant and returns the rig once steady has caught up. */
async function runFault(
  label: string,
  n: number,
  sample: (i: number, p: Required<Sample>) => Sample,
): Promise<Rig> {
  const r = await rig(label, "mqtt");
  const p = plant(777 + label.length);
  for (let i = 0; i < n; i++) await r.send(i, sample(i, p(i)));
  await settle();
  return r;
}

function lastVerdict(r: Rig): SteadyVerdict | undefined {
  return r.rec.steady.at(-1)?.data;
}

function latestHealthOf(r: Rig, tag: string): TagHealth["tags"][number] | undefined {
  return r.rec.health.at(-1)?.data.tags.find((t) => t.tag === tag);
}

describe("ingest and steady on Mosquitto", () => {
  it("opens a cycle with the right means before and after a step", async () => {
    await steadyStepSteady("mqtt");
  });

  it("rejects a stuck transmitter as frozen and opens no cycle", async () => {
    // given a flow meter that sticks at sample 20; when 200 samples go in
    let stuck = 0;
    const r = await runFault("frozen", 200, (i, s) => {
      if (i === 20) stuck = s.flowKgPerS;
      return i >= 20 ? { ...s, flowKgPerS: stuck } : s;
    });
    // then its values are judged frozen after 30 s, the plant is blocked by it, and no cycle opens
    const st = statusesOf(r.rec, "FI-101");
    expect(st.get("frozen") ?? 0).toBeGreaterThan(100);
    expect(r.rec.cycles).toHaveLength(0);
    expect(lastVerdict(r)?.blockedBy).toEqual([{ tag: "FI-101", status: "frozen" }]);
    expect(await waitFor(() => latestHealthOf(r, "FI-101")?.lastRejection?.status === "frozen", 3000)).toBe(
      true,
    );
    expect(latestHealthOf(r, "FI-101")?.lastRejection?.detail).toMatch(/unchanged for more than 30 s/);
  });

  it("rejects spikes, explains them, and opens no cycle while they recur", async () => {
    // given a temperature that jumps by 30 °C for one sample every 20 s
    const r = await runFault("spike", 200, (i, s) => (i % 20 === 10 ? { ...s, tempC: s.tempC + 30 } : s));
    // then each jump is a spike (30 °C/s against a limit of 3 °C/s) and the plant never stays steady 60 s
    expect(statusesOf(r.rec, "TI-102").get("spike")).toBe(10);
    expect(r.rec.cycles).toHaveLength(0);
    expect(r.rec.steady.some((e) => e.data.blockedBy.some((b) => b.status === "spike"))).toBe(true);
    expect(await waitFor(() => (latestHealthOf(r, "TI-102")?.counts.spike ?? 0) === 10, 3000)).toBe(true);
    expect(latestHealthOf(r, "TI-102")?.lastRejection?.detail).toMatch(/limit 3 degC\/s/);
  });

  it("passes a slow drift as good data but never calls it steady", async () => {
    // given a temperature ramping at 0.1 °C/s (half its noise per sample) from the start
    const r = await runFault("drift", 200, (i, s) => ({ ...s, tempC: s.tempC + 0.1 * i }));
    // then every value is good (no single-tag rule catches a drift), the verdict is transient, no cycle
    expect([...statusesOf(r.rec, "TI-102").keys()]).toEqual(["good"]);
    expect(r.rec.cycles).toHaveLength(0);
    expect(lastVerdict(r)?.state).toBe("transient");
    expect(lastVerdict(r)?.notSteady.map((t) => t.tag)).toContain("TI-102");
  });

  it("lets a constant bias through unchanged: detecting it is reconciliation's job", async () => {
    // given a flow meter reading 1 kg/s high all along (a bias no single-tag rule can see)
    const r = await runFault("bias", 160, (_i, s) => ({ ...s, flowKgPerS: s.flowKgPerS + 1 }));
    // then the data are good, a cycle opens, and the snapshot carries the biased mean for reconciliation
    expect([...statusesOf(r.rec, "FI-101").keys()]).toEqual(["good"]);
    expect(await waitFor(() => r.rec.snapshots.length === 1, 3000)).toBe(true);
    const f = tagStats(r.rec.snapshots[0]!.data, "FI-101");
    expectMeanNear(f.mean, 11, FLOW_SIGMA, f.count);
  });

  it("marks a tag that drops out stale and opens no cycle", async () => {
    // given the temperature transmitter falls silent after sample 40
    const r = await runFault("dropout", 200, (i, s) => (i >= 40 ? { ...s, tempC: undefined } : s));
    // then 15 s later ingest publishes one stale marker for it, the plant is blocked, and no cycle opens
    const st = statusesOf(r.rec, "TI-102");
    expect(st.get("stale")).toBe(1);
    const marker = r.rec.measurements.flatMap((e) => e.data.values).find((v) => v.status === "stale");
    expect(marker?.time).toBeGreaterThanOrEqual(T0 + 39_000 + 15_000);
    expect(marker?.time).toBeLessThanOrEqual(T0 + 39_000 + 17_000);
    expect(r.rec.cycles).toHaveLength(0);
    expect(lastVerdict(r)?.blockedBy).toEqual([{ tag: "TI-102", status: "stale" }]);
    expect(await waitFor(() => latestHealthOf(r, "TI-102")?.status === "stale", 3000)).toBe(true);
    expect(latestHealthOf(r, "TI-102")?.healthy).toBe(false);
  });

  it("calls a burst of low-frequency noise transient and opens no cycle", async () => {
    // given a disturbance from sample 40: first-order filtered noise (τ ≈ 10 samples) of 3× the flow's sigma
    const g = gaussian(99);
    let lf = 0;
    const r = await runFault("burst", 220, (i, s) => {
      if (i < 40) return s;
      lf = 0.9 * lf + 0.1 * g();
      return { ...s, flowKgPerS: s.flowKgPerS + 3 * FLOW_SIGMA * 3 * lf };
    });
    // then the values are good but the flow is transient; no cycle opens
    expect([...statusesOf(r.rec, "FI-101").keys()]).toEqual(["good"]);
    expect(r.rec.cycles).toHaveLength(0);
    expect(
      r.rec.steady.some((e) => e.data.notSteady.some((t) => t.tag === "FI-101" && t.state === "transient")),
    ).toBe(true);
  });

  it("marks every tag stale when the source's connection is lost, and opens no cycle", async () => {
    // given 40 good samples, then the source disconnects and plant time moves on by 30 s
    const r = await runFault("lost", 40, (_i, s) => s);
    await r.source.close();
    r.clock.set(T0 + 70_000);
    // then ingest's sweep publishes a stale marker for each tag, steady is blocked, no cycle opens
    expect(
      await waitFor(
        () => ["FI-101", "TI-102", "LI-103"].every((t) => statusesOf(r.rec, t).get("stale") === 1),
        5000,
      ),
    ).toBe(true);
    await settle();
    expect(r.rec.cycles).toHaveLength(0);
    expect(lastVerdict(r)?.state).toBe("blocked");
    expect(await waitFor(() => latestHealthOf(r, "LI-103")?.status === "stale", 3000)).toBe(true);
  });

  it("turns Sparkplug B births and data into measurements and asks for a rebirth on a seq gap", async () => {
    // given ingest as a Sparkplug host for group g-<site>, and an edge node publishing on Mosquitto
    const group = `g-${Date.now().toString(36)}`;
    const r = await rig("spb", "mqtt", { group, reorderTimeoutMs: 200 });
    const codec = getSparkplugCodec("spBv1.0");
    if (!codec) throw new Error("no spBv1.0 codec");
    const node = mqtt.connect(await mqttUrl(), { protocolVersion: 4, clean: true });
    await new Promise<void>((res) => node.once("connect", () => res()));
    const ncmd: Array<{ topic: string; payload: Buffer }> = [];
    node.on("message", (topic, payload) => ncmd.push({ topic, payload }));
    await node.subscribeAsync(`spBv1.0/${group}/NCMD/#`, { qos: 0 });
    const topic = (type: string) => `spBv1.0/${group}/${type}/edge-1`;
    const now = Date.now();
    // when it is born with two metrics (the flow in kg/h under its source name, the temperature by tag id)…
    await node.publishAsync(
      topic("NBIRTH"),
      Buffer.from(
        codec.encodePayload({
          timestamp: now,
          seq: 0,
          metrics: [
            { name: "bdSeq", type: "UInt64", value: 0 },
            { name: "feed_flow", alias: 1, type: "Double", value: 36_000, timestamp: now },
            { name: "TI-102", alias: 2, type: "Double", value: 80.5, timestamp: now },
          ],
        }),
      ),
    );
    // …sends NDATA by alias with seq 1…
    await node.publishAsync(
      topic("NDATA"),
      Buffer.from(
        codec.encodePayload({
          timestamp: now + 1000,
          seq: 1,
          metrics: [{ alias: 2, type: "Double", value: 80.7, timestamp: now + 1000 }],
        }),
      ),
    );
    const spb = () => r.rec.measurements.filter((e) => e.data.source === `spb:${group}/edge-1`);
    expect(await waitFor(() => spb().length >= 2, 5000)).toBe(true);
    // then the birth's values and the data come out as validated measurements in tag units
    const values = spb().flatMap((e) => e.data.values);
    expect(values.find((v) => v.tag === "FI-101")).toMatchObject({ value: 10, unit: "kg/s", status: "good" });
    expect(values.filter((v) => v.tag === "TI-102").map((v) => v.value)).toEqual([80.5, 80.7]);
    // when seq 2 is lost and seq 3 arrives
    await node.publishAsync(
      topic("NDATA"),
      Buffer.from(
        codec.encodePayload({
          timestamp: now + 3000,
          seq: 3,
          metrics: [{ alias: 2, type: "Double", value: 80.9, timestamp: now + 3000 }],
        }),
      ),
    );
    // then after the reorder window ingest publishes NCMD Node Control/Rebirth = true to that node,
    // and marks the node's tags stale until it is born again
    expect(await waitFor(() => ncmd.length >= 1, 5000)).toBe(true);
    expect(ncmd[0]?.topic).toBe(`spBv1.0/${group}/NCMD/edge-1`);
    const cmd = codec.decodePayload(ncmd[0]!.payload);
    expect(cmd.metrics?.[0]).toMatchObject({ name: "Node Control/Rebirth", value: true });
    expect(
      await waitFor(
        () => spb().some((e) => e.data.values.some((v) => v.tag === "TI-102" && v.status === "stale")),
        3000,
      ),
    ).toBe(true);
    // and a payload that is not Sparkplug B is dead-lettered, not dropped
    await node.publishAsync(topic("NDATA"), Buffer.from("not protobuf at all \u0000\u00ff"));
    expect(await waitFor(() => r.rec.deadletters >= 1, 5000)).toBe(true);
    await node.endAsync();
  });
});

describe("ingest and steady on NATS", () => {
  it("opens a cycle with the right means before and after a step", async () => {
    await steadyStepSteady("nats");
  });
});
