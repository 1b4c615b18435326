/**
 * Every fault plant-sim injects, through ingest and steady on a real MQTT broker: the demo plant
 * kestrel-r1 runs accelerated (one ScaledClock for every service, plant-sim at timeScale 1 against it),
 * and faults go in one at a time through rto.plant-control.v1 while the plant is confirmed steady.
 * For each fault the test shows that it is detected — the affected tag's measurement status, its tag
 * health, or the steady verdict names it — and that no cycle opens while it lasts. A bias cannot be
 * seen by single-tag checks: its onset is a step (transient), and the reconcile service, started too,
 * names the biased flow as a gross error in the total-mass balance of the next cycle.
 *
 * Test config (small enough for the wall clock): the site model's steady-state policy becomes
 * λ = (0.2, 0.1, 0.1), R* = 1.44 (Cao & Rhinehart 1995 defaults, warm-up 50 samples), 200 s steady
 * duration, no settle time; every tag is frozen after 20 s unchanged and stale after 60 s; the
 * weather noise on the cooling water is cut to 30 % so that the plant is steady often enough.
 */
import { readFileSync } from "node:fs";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { parse, stringify } from "yaml";
import { type IngestConfig, ingestConfigSchema } from "../services/ingest/config.js";
import { start as startIngest } from "../services/ingest/index.js";
import type { Bus } from "../services/kit/bus.js";
import { ScaledClock } from "../services/kit/clock.js";
import { loadConfig } from "../services/kit/config.js";
import { connectBus } from "../services/kit/connect.js";
import { createEvent, type Emitter, type Event, encodeEvent } from "../services/kit/envelope.js";
import type { PlantFault } from "../services/kit/generated/messages.js";
import { silentLogger } from "../services/kit/log.js";
import { schemaRegistry } from "../services/kit/schemas.js";
import type { Service } from "../services/kit/service.js";
import { subject } from "../services/kit/subjects.js";
import { loadSiteModel, type SiteModel } from "../services/model/index.js";
import {
  type PlantSimConfig,
  type PlantSimOptions,
  plantSimConfigSchema,
} from "../services/plant-sim/config.js";
import { type PlantSimService, start as startPlantSim } from "../services/plant-sim/index.js";
import {
  type ReconcileConfig,
  reconcileConfigSchema,
  start as startReconcile,
} from "../services/reconcile/index.js";
import { type SteadyConfig, steadyConfigSchema } from "../services/steady/config.js";
import { noiseRatioLimit } from "../services/steady/detector.js";
import { start as startSteady } from "../services/steady/index.js";
import { mqttUrl, testSite, waitFor } from "./support/brokers.js";

const ROOT = new URL("../", import.meta.url).pathname;
/** Simulated seconds per wall second. Ingest judges staleness (60 s) on the shared clock, so a wall lag of
 * a tick (5 ms) plus the broker must stay well below 60 s / SCALE. */
const SCALE = 600;
const PERIOD_S = 10;
const FAULT_S = 300;
const KEY_TAGS = ["FI-101", "FI-102", "TI-101", "TI-201", "TI-202", "AI-103"];

/** The demo site model with the small test policy described at the top. */
function testSiteModel(): SiteModel {
  const doc = parse(readFileSync(`${ROOT}infra/sites/kestrel-r1/site.yaml`, "utf8")) as {
    steadyState: Record<string, number>;
    tags: { frozenAfterS?: number; staleAfterS?: number }[];
  };
  doc.steadyState = {
    ...doc.steadyState,
    lambda1: 0.2,
    lambda2: 0.1,
    lambda3: 0.1,
    rCritical: 1.44,
    minSteadyS: 200,
    settleTimeS: 0,
  };
  for (const t of doc.tags) {
    t.frozenAfterS = 20;
    t.staleAfterS = 60;
  }
  return loadSiteModel(stringify(doc), "kestrel-r1-fault-test.yaml");
}

interface Seen {
  measurements: Event<"rto.measurements.v1">[];
  steady: Event<"rto.steady.v1">[];
  snapshots: Event<"rto.snapshot.v1">[];
  health: Event<"rto.tag-health.v1">[];
  reconciled: Event<"rto.reconciled.v1">[];
  deadletters: number;
}

describe("plant-sim faults through ingest, steady and reconcile on Mosquitto", () => {
  const site = testSite("faults");
  const clock = new ScaledClock(SCALE);
  const seen: Seen = {
    measurements: [],
    steady: [],
    snapshots: [],
    health: [],
    reconciled: [],
    deadletters: 0,
  };
  const services: Service[] = [];
  let plant: PlantSimService;
  let watcher: Bus;
  let control: Emitter;

  beforeAll(async () => {
    const url = await mqttUrl();
    const bus = { transport: "mqtt" as const, url };
    const base = { site, bus, http: { enabled: false }, logLevel: "silent" as const, heartbeatS: 3600 };
    const model = testSiteModel();
    watcher = await connectBus({ site, bus }, { name: `${site}-watch` });
    const keep =
      <T>(list: T[]) =>
      (m: { payload: Uint8Array }) => {
        list.push(JSON.parse(Buffer.from(m.payload).toString("utf8")) as T);
      };
    await watcher.subscribe(subject(site, "measurements"), keep(seen.measurements));
    await watcher.subscribe(subject(site, "steady"), keep(seen.steady));
    await watcher.subscribe(subject(site, "snapshot"), keep(seen.snapshots));
    await watcher.subscribe(subject(site, "tag-health"), keep(seen.health));
    await watcher.subscribe(subject(site, "reconciled"), keep(seen.reconciled));
    await watcher.subscribe(subject(site, "deadletter"), () => {
      seen.deadletters++;
    });
    const deps = { clock, log: silentLogger(), model };
    services.push(
      await startReconcile(
        loadConfig<ReconcileConfig>(reconcileConfigSchema, { ...base, siteModel: "(given)" }),
        deps,
      ),
    );
    services.push(
      await startSteady(
        loadConfig<SteadyConfig>(steadyConfigSchema, { ...base, steady: { siteModelFile: "(given)" } }),
        deps,
      ),
    );
    services.push(
      await startIngest(
        loadConfig<IngestConfig>(ingestConfigSchema, {
          ...base,
          ingest: { siteModelFile: "(given)", tagHealthIntervalS: 0.2, staleCheckIntervalS: 0.02 },
        }),
        deps,
      ),
    );
    const demo = (
      parse(readFileSync(`${ROOT}services/plant-sim/kestrel-r1.config.yaml`, "utf8")) as {
        plantSim: PlantSimOptions;
      }
    ).plantSim;
    plant = await startPlantSim(
      loadConfig<PlantSimConfig>(plantSimConfigSchema, {
        ...base,
        plantSim: {
          ...demo,
          plantModel: `${ROOT}${demo.plantModel}`,
          // Simulated time follows the shared scaled clock one to one.
          timeScale: 1,
          periodS: PERIOD_S,
          tickMs: 5,
          statusPeriodS: 36_000,
          seed: 4,
          disturbances: demo.disturbances?.map((d) => ({ ...d, noiseSigma: (d.noiseSigma ?? 0) * 0.3 })),
          gateway: { ...demo.gateway, watchdogS: 1e6 },
        },
      }),
      { clock, log: silentLogger() },
    );
    services.push(plant);
    control = { site, service: "test", instance: "0", clock, registry: schemaRegistry() };
  }, 30_000);

  afterAll(async () => {
    for (const s of services.reverse()) await s.stop().catch(() => undefined);
    await watcher?.close();
  });

  const inject = (faults: [PlantFault, ...PlantFault[]], note: string) =>
    watcher.publish(
      subject(site, "plant-control"),
      encodeEvent(createEvent(control, "rto.plant-control.v1", { action: "inject", faults, note })),
    );

  /** Waits (wall) until plant time reaches `ms`. */
  const untilSim = (ms: number) =>
    waitFor(() => plant.simNowMs() >= ms, (2 * (ms - plant.simNowMs())) / SCALE + 5000, 5);

  /** Waits until a cycle has opened whose window starts after `afterMs` and the plant is still steady: returns its end. */
  async function steadyAfter(afterMs: number): Promise<number> {
    const ok = await waitFor(
      () => seen.snapshots.some((s) => s.data.startMs > afterMs) && seen.steady.at(-1)?.data.steady === true,
      20_000,
      5,
    );
    expect(ok, `no steady cycle after ${afterMs}`).toBe(true);
    return plant.simNowMs();
  }

  const valuesOf = (tag: string, fromMs: number, toMs: number) =>
    seen.measurements
      .flatMap((e) => e.data.values)
      .filter((v) => v.tag === tag && v.time >= fromMs && v.time <= toMs);
  const verdictsIn = (fromMs: number, toMs: number) =>
    seen.steady.map((e) => e.data).filter((v) => v.timeMs >= fromMs && v.timeMs <= toMs);
  const cyclesIn = (fromMs: number, toMs: number) =>
    seen.snapshots.filter((s) => s.data.endMs >= fromMs && s.data.endMs <= toMs);
  const healthOf = (tag: string, fromMs: number) =>
    seen.health
      .filter((h) => h.data.timeMs >= fromMs)
      .flatMap((h) => h.data.tags.filter((t) => t.tag === tag));

  /** Injects `fault` once the plant is steady with an open cycle, waits it out; returns its plant-time window. */
  async function runFault(fault: PlantFault, lastMs: number): Promise<{ fromMs: number; toMs: number }> {
    await steadyAfter(lastMs);
    const fromMs = plant.simNowMs();
    await inject([fault], `test: ${fault.kind}`);
    const toMs = fromMs + (fault.durationS ?? PERIOD_S) * 1000 + 5 * PERIOD_S * 1000;
    expect(await untilSim(toMs)).toBe(true);
    // Ingest and steady trail the plant by a few wall milliseconds, and ingest reports tag health
    // every 0.2 wall seconds (120 s of plant time): wait for the first report after the window, which
    // ingest makes after every batch before it (one queue). A fixed 100 ms wait was too short on a
    // loaded machine.
    expect(await waitFor(() => (seen.health.at(-1)?.data.timeMs ?? 0) >= toMs, 10_000, 5)).toBe(true);
    await new Promise((r) => setTimeout(r, 100));
    return { fromMs, toMs };
  }

  let lastMs = 0;

  it("opens cycles while the plant is clean", async () => {
    lastMs = await steadyAfter(0);
    expect(seen.snapshots.length).toBeGreaterThanOrEqual(1);
    expect(seen.snapshots[0]?.data.tags.map((t) => t.tag)).toEqual(expect.arrayContaining(KEY_TAGS));
  }, 30_000);

  it("stuck: the feed-B meter is judged frozen, blocks the verdict, and no cycle opens", async () => {
    const w = await runFault({ kind: "stuck", tag: "FI-102", durationS: FAULT_S }, lastMs);
    const statuses = valuesOf("FI-102", w.fromMs, w.fromMs + FAULT_S * 1000).map((v) => v.status);
    // 20 s unchanged = the third equal sample; the rest of the 300 s is frozen
    expect(statuses.filter((s) => s === "frozen").length).toBeGreaterThanOrEqual(FAULT_S / PERIOD_S - 4);
    expect(
      verdictsIn(w.fromMs, w.toMs).some((v) =>
        v.blockedBy.some((b) => b.tag === "FI-102" && b.status === "frozen"),
      ),
    ).toBe(true);
    expect(healthOf("FI-102", w.fromMs).some((t) => t.lastRejection?.status === "frozen")).toBe(true);
    expect(cyclesIn(w.fromMs, w.fromMs + FAULT_S * 1000)).toEqual([]);
    lastMs = w.toMs;
  }, 30_000);

  it("spike: one outlier on the feed-B meter is rejected as a spike and blocks the verdict", async () => {
    // 1 kg/s in 10 s is 0.1 kg/s per s, twice the tag's rate limit
    const w = await runFault({ kind: "spike", tag: "FI-102", magnitude: 1 }, lastMs);
    const spikes = valuesOf("FI-102", w.fromMs, w.toMs).filter((v) => v.status === "spike");
    expect(spikes).toHaveLength(1);
    const at = spikes[0]?.time ?? 0;
    expect(
      verdictsIn(at, at).some((v) => v.blockedBy.some((b) => b.tag === "FI-102" && b.status === "spike")),
    ).toBe(true);
    expect(
      healthOf("FI-102", at).some(
        (t) => t.lastRejection?.status === "spike" && /limit 0.05 kg\/s\/s/.test(t.lastRejection.detail),
      ),
    ).toBe(true);
    expect(cyclesIn(at, at + PERIOD_S * 1000)).toEqual([]);
    lastMs = w.toMs;
  }, 30_000);

  it("drift: a ramp on the feed-B meter passes the value checks but is called transient; no cycle opens", async () => {
    // σ per sample (0.01 kg/s per 10 s): well below the rate limit, far above what R accepts
    const w = await runFault({ kind: "drift", tag: "FI-102", ratePerS: 0.001, durationS: FAULT_S }, lastMs);
    const during = valuesOf("FI-102", w.fromMs, w.fromMs + FAULT_S * 1000);
    expect(during.every((v) => v.status === "good")).toBe(true);
    expect(
      verdictsIn(w.fromMs, w.fromMs + FAULT_S * 1000).some((v) =>
        v.notSteady.some((t) => t.tag === "FI-102" && t.state === "transient"),
      ),
    ).toBe(true);
    // A ramp is only visible after a few samples (the first drifted values are 1–2 σ from the level):
    // a snapshot whose window closes within three samples of the onset may still be confirmed.
    expect(cyclesIn(w.fromMs + 3 * PERIOD_S * 1000, w.fromMs + FAULT_S * 1000)).toEqual([]);
    lastMs = w.toMs;
  }, 30_000);

  it("noise burst: five times the feed-B meter's sigma is called noisy although R cannot see it; no cycle opens", async () => {
    const w = await runFault({ kind: "noise-burst", tag: "FI-102", factor: 5, durationS: FAULT_S }, lastMs);
    const noisy = verdictsIn(w.fromMs, w.fromMs + FAULT_S * 1000).flatMap((v) =>
      v.notSteady.filter((t) => t.tag === "FI-102" && t.state === "noisy"),
    );
    expect(noisy.length).toBeGreaterThanOrEqual(1);
    // above the 99.9 % limit of σ̂²/σ² for λ3 = 0.1 (the burst's own ratio tends to 25)
    expect(noisy[0]?.noiseRatio ?? 0).toBeGreaterThan(noiseRatioLimit(0.1, 0.999));
    expect(cyclesIn(w.fromMs, w.fromMs + FAULT_S * 1000)).toEqual([]);
    lastMs = w.toMs;
  }, 30_000);

  it("dropout: the silent feed-B meter is marked stale after 60 s, blocks the verdict, and no cycle opens", async () => {
    const w = await runFault({ kind: "dropout", tag: "FI-102", durationS: FAULT_S }, lastMs);
    const stale = valuesOf("FI-102", w.fromMs, w.toMs).filter((v) => v.status === "stale");
    expect(stale).toHaveLength(1);
    expect(stale[0]?.value).toBeNull();
    expect(
      verdictsIn(w.fromMs, w.toMs).some((v) =>
        v.blockedBy.some((b) => b.tag === "FI-102" && b.status === "stale"),
      ),
    ).toBe(true);
    expect(healthOf("FI-102", w.fromMs).some((t) => t.status === "stale" && t.healthy === false)).toBe(true);
    expect(cyclesIn(w.fromMs, w.fromMs + FAULT_S * 1000)).toEqual([]);
    lastMs = w.toMs;
  }, 30_000);

  it("lost connection: every tag is marked stale, the verdict is blocked by every key tag, and no cycle opens", async () => {
    const w = await runFault({ kind: "lost-connection", durationS: FAULT_S }, lastMs);
    const staleTags = new Set(
      seen.measurements
        .flatMap((e) => e.data.values)
        .filter((v) => v.status === "stale" && v.time >= w.fromMs && v.time <= w.toMs)
        .map((v) => v.tag),
    );
    expect(staleTags.size).toBe(plant.simulator.plant.model.tags.length);
    const blocked = verdictsIn(w.fromMs, w.toMs)
      .filter((v) => v.state === "blocked")
      .at(-1);
    expect(blocked?.blockedBy.map((b) => b.tag).sort()).toEqual([...KEY_TAGS].sort());
    expect(cyclesIn(w.fromMs, w.fromMs + FAULT_S * 1000)).toEqual([]);
    lastMs = w.toMs;
  }, 30_000);

  it("bias: the step onset is transient, and reconcile names the biased feed-A meter as a gross error", async () => {
    // 10 σ on a flow in the total-mass balance FI-101 + FI-102 − FI-103 = 0, until cleared
    await steadyAfter(lastMs);
    const fromMs = plant.simNowMs();
    await inject([{ kind: "bias", tag: "FI-101", magnitude: 0.1 }], "test: bias");
    // then the onset makes the tag not steady, while every value stays good
    expect(
      await waitFor(
        () =>
          verdictsIn(fromMs, Number.POSITIVE_INFINITY).some((v) =>
            v.notSteady.some((t) => t.tag === "FI-101"),
          ),
        10_000,
        5,
      ),
    ).toBe(true);
    // and the next cycle whose window lies in the bias, with all three balance flows, is reconciled
    // with FI-101 named (the one balance cannot tell the three flows apart: they tie)
    const biasedCycle = () =>
      seen.snapshots.find(
        (s) =>
          s.data.startMs > fromMs + PERIOD_S * 1000 &&
          ["FI-101", "FI-102", "FI-103"].every((t) => s.data.tags.some((x) => x.tag === t)),
      );
    expect(await waitFor(() => biasedCycle() !== undefined, 30_000, 5)).toBe(true);
    const cycle = biasedCycle();
    expect(await waitFor(() => seen.reconciled.some((r) => r.cycleid === cycle?.cycleid), 5000, 5)).toBe(
      true,
    );
    const rec = seen.reconciled.find((r) => r.cycleid === cycle?.cycleid)?.data;
    const named = rec?.grossErrors.flatMap((g) => [g.tag, ...g.tiedWith]) ?? [];
    expect(named).toContain("FI-101");
    // the estimated size is the bias (the balance residual), within four of its standard deviations
    const g = rec?.grossErrors[0];
    expect(Math.abs(Math.abs(g?.estimatedSize ?? 0) - 0.1)).toBeLessThan(4 * (g?.estimatedSizeSd ?? 0));
    expect(valuesOf("FI-101", fromMs, cycle?.data.endMs ?? 0).every((v) => v.status === "good")).toBe(true);
    expect(seen.deadletters).toBe(0);
  }, 45_000);
});
