/**
 * The reconcile and estimate services on a real MQTT broker: a snapshot of the cooled mixing tank
 * (test/fixtures/sites/recon-est.yaml), generated from the model itself at a known UA with seeded noise
 * and one biased flow meter, goes in; a reconciled snapshot naming the bad meter and a model update that
 * recovers UA within its interval come out. Snapshots the stage cannot use abort the cycle with the reason
 * and leave the services running.
 */
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, afterEach, describe, expect, it } from "vitest";
import {
  type EstimateConfig,
  estimateConfigSchema,
  start as startEstimate,
} from "../services/estimate/index.js";
import {
  type AnyEvent,
  type Bus,
  connectMqtt,
  decodeEvent,
  Events,
  loadConfig,
  type Snapshot,
  schemaRegistry,
  silentLogger,
  subject,
  systemClock,
} from "../services/kit/index.js";
import { loadSiteModel, solveSteadyState } from "../services/model/index.js";
import {
  type ReconcileConfig,
  reconcileConfigSchema,
  start as startReconcile,
} from "../services/reconcile/index.js";
import { mqttUrl, stopOwnBrokers, testSite, waitFor } from "./support/brokers.js";

const modelFile = new URL("./fixtures/sites/recon-est.yaml", import.meta.url).pathname;
const modelText = readFileSync(modelFile, "utf8");
const model = loadSiteModel(modelText, modelFile);
const TRUE_UA = 15;

/** A seeded standard-normal generator, so a failing run can be repeated. */
function gaussian(seed: number): () => number {
  let a = seed >>> 0;
  const u = () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
  return () => Math.sqrt(-2 * Math.log(u() + 1e-300)) * Math.cos(2 * Math.PI * u());
}

/** The tank's window means at UA = 15 plus one-sigma noise and the given biases, as a snapshot. */
function snapshot(options: { bias?: Record<string, number>; only?: string[]; seed?: number } = {}): Snapshot {
  const r = solveSteadyState(model, { parameters: { UA: TRUE_UA } });
  const noise = gaussian(options.seed ?? 5);
  const tags = model.tags
    .filter((t) => !options.only || options.only.includes(t.id))
    .map((t) => {
      const slot = model.layout.slots.get(t.variable);
      const truth = slot !== undefined ? (r.point[slot] as number) : (r.outputs[t.variable] as number);
      const mean = truth + noise() * t.sigma + (options.bias?.[t.id] ?? 0);
      return {
        tag: t.id,
        variable: t.variable,
        key: t.key,
        count: 31,
        unit: t.unit,
        mean,
        std: t.sigma,
        sigma: t.sigma,
        modelUnit: t.unit,
        modelMean: mean,
        modelStd: t.sigma,
      };
    });
  const now = Date.now();
  const excluded = model.tags
    .filter((t) => options.only && !options.only.includes(t.id))
    .map((t) => ({ tag: t.id, reason: "rejected: stale" }));
  return { startMs: now - 300_000, endMs: now, spanS: 300, lastCommandMs: null, tags, excluded };
}

describe("reconcile and estimate services", () => {
  const cleanup: Array<() => Promise<void> | void> = [];
  afterEach(async () => {
    for (const c of cleanup.splice(0).reverse()) await c();
  });
  afterAll(stopOwnBrokers);

  /** Starts both services for a fresh site and a client that publishes snapshots and collects events. */
  async function rig(siteModel = modelFile) {
    const site = testSite("re");
    const url = await mqttUrl();
    const common = {
      site,
      bus: { transport: "mqtt", url },
      http: { enabled: false },
      logLevel: "silent",
      siteModel,
    };
    const reconcile = await startReconcile(loadConfig<ReconcileConfig>(reconcileConfigSchema, common), {
      log: silentLogger(),
    });
    cleanup.push(() => reconcile.stop());
    const estimate = await startEstimate(
      loadConfig<EstimateConfig>(estimateConfigSchema, { ...common, estimate: { restoreTimeoutMs: 200 } }),
      { log: silentLogger() },
    );
    cleanup.push(() => estimate.stop());
    const bus: Bus = await connectMqtt({ url });
    cleanup.push(() => bus.close());
    const registry = schemaRegistry();
    const events = new Events({
      bus,
      emitter: { site, service: "steady", instance: "test", clock: systemClock, registry },
      log: silentLogger(),
    });
    const seen: AnyEvent[] = [];
    for (const stream of ["reconciled", "model", "cycle"]) {
      await bus.subscribe(subject(site, stream), (m) => {
        const d = decodeEvent(registry, m.payload, 1 << 20);
        if (d.ok) seen.push(d.event);
      });
    }
    const publish = (data: Snapshot, cycleid: string) =>
      events.publish("snapshot", "rto.snapshot.v1", data, { cycleid });
    const of = <T extends AnyEvent["type"]>(type: T, cycleid: string) =>
      seen.filter((e): e is Extract<AnyEvent, { type: T }> => e.type === type && e.cycleid === cycleid);
    return { site, bus, registry, estimate, publish, of };
  }

  it("reconciles a snapshot, names the biased meter, and recovers UA within its interval", async () => {
    // given both services and a snapshot at UA = 15 with noise and FI-3 reading 0.25 kg/s high
    const r = await rig();
    // when the snapshot is published
    const snap = await r.publish(snapshot({ bias: { "FI-3": 0.25 } }), "cycle-1");
    expect(
      await waitFor(() => r.of("rto.cycle.v1", "cycle-1").some((c) => c.data.stage === "estimate"), 20_000),
    ).toBe(true);
    // then the reconciled event names FI-3 and is caused by the snapshot
    const [rec] = r.of("rto.reconciled.v1", "cycle-1");
    expect(rec?.causationid).toBe(snap.id);
    expect(rec?.data.method).toBe("bilinear");
    expect(rec?.data.eliminated).toEqual(["FI-3"]);
    expect(rec?.data.grossErrors[0]?.estimatedSize).toBeGreaterThan(
      0.25 - 3 * (rec?.data.grossErrors[0]?.estimatedSizeSd ?? 0),
    );
    expect(rec?.data.globalTest?.passed).toBe(true);
    // and the model update recovers UA = 15 inside its 95 % interval and puts it in force
    const [upd] = r.of("rto.model.v1", "cycle-1");
    const ua = upd?.data.parameters.find((p) => p.symbol === "UA");
    expect(upd?.causationid).toBe(rec?.id);
    expect(upd?.data.status).toBe("accepted");
    expect(ua?.ciLower).toBeLessThan(TRUE_UA);
    expect(ua?.ciUpper).toBeGreaterThan(TRUE_UA);
    expect(ua?.previous).toBe(10);
    expect(ua?.inForce).toBe(ua?.value);
    expect(r.estimate.inForce().UA).toBe(ua?.value);
    expect(r.estimate.history.query("UA").map((p) => p.eventId)).toEqual([upd?.id]);
    // and the cycle stream shows both stages done, and the state topic holds the update
    const stages = r.of("rto.cycle.v1", "cycle-1").map((c) => [c.data.stage, c.data.status, c.data.outcome]);
    expect(stages).toEqual([
      ["reconcile", "stage-done", "gross-errors-removed"],
      ["estimate", "stage-done", "accepted"],
    ]);
    const state = await r.bus.readState(subject(r.site, "state.model"), { timeoutMs: 2000 });
    const decoded = state && decodeEvent(r.registry, state, 1 << 20);
    expect(decoded?.ok ? decoded.event.id : undefined).toBe(upd?.id);
    // and a restarted estimate service starts from the UA in force, not the site model's initial 10
    const again = await startEstimate(
      loadConfig<EstimateConfig>(estimateConfigSchema, {
        site: r.site,
        bus: { transport: "mqtt", url: await mqttUrl() },
        http: { enabled: false },
        logLevel: "silent",
        siteModel: modelFile,
        estimate: { restoreTimeoutMs: 2000 },
      }),
      { log: silentLogger() },
    );
    cleanup.push(() => again.stop());
    expect(again.inForce().UA).toBe(ua?.value);
    expect(again.history.size).toBe(1);
  });

  it("aborts the cycle with RECONCILE_RANK_DEFICIENT on a dependent balance set and keeps running", async () => {
    // given a site model whose coolant balance is declared twice
    const dir = mkdtempSync(join(tmpdir(), "recon-est-"));
    cleanup.push(() => rmSync(dir, { recursive: true, force: true }));
    const file = join(dir, "dependent.yaml");
    writeFileSync(
      file,
      modelText.replace(
        "  - name: heat\n",
        "  - name: coolant-mass-again\n    terms: [{ tag: FIC-4, coeff: 2 }, { tag: FI-7, coeff: -2 }]\n  - name: heat\n",
      ),
    );
    const r = await rig(file);
    // when two snapshots arrive
    await r.publish(snapshot(), "cycle-a");
    await r.publish(snapshot({ seed: 6 }), "cycle-b");
    // then each cycle is aborted at reconcile with the reason, and nothing is reconciled
    expect(await waitFor(() => r.of("rto.cycle.v1", "cycle-b").length > 0, 20_000)).toBe(true);
    for (const id of ["cycle-a", "cycle-b"]) {
      const [c] = r.of("rto.cycle.v1", id);
      expect(c?.data).toMatchObject({ status: "aborted", stage: "reconcile" });
      expect(c?.data.reasons?.[0]?.code).toBe("RECONCILE_RANK_DEFICIENT");
      expect(c?.data.reasons?.[0]?.message).toMatch(/coolant-mass-again/);
    }
    expect(r.of("rto.reconciled.v1", "cycle-a")).toEqual([]);
  });

  it("aborts a snapshot with too few good values, then reconciles the next good one", async () => {
    // given both services
    const r = await rig();
    // when a snapshot with only the hot-feed tags arrives, then a complete one
    await r.publish(snapshot({ only: ["FI-1", "TI-1", "FIC-2"] }), "cycle-x");
    await r.publish(snapshot(), "cycle-y");
    expect(await waitFor(() => r.of("rto.model.v1", "cycle-y").length > 0, 20_000)).toBe(true);
    // then the first is aborted with the reason and the exclusions quoted, the second goes through
    const [aborted] = r.of("rto.cycle.v1", "cycle-x");
    expect(aborted?.data).toMatchObject({ status: "aborted", stage: "reconcile" });
    expect(aborted?.data.reasons?.[0]?.code).toBe("RECONCILE_TOO_FEW_VALUES");
    expect(aborted?.data.reasons?.[0]?.message).toContain("FI-3 (rejected: stale)");
    expect(r.of("rto.reconciled.v1", "cycle-x")).toEqual([]);
    expect(r.of("rto.reconciled.v1", "cycle-y")[0]?.data.globalTest?.passed).toBe(true);
    expect(r.of("rto.model.v1", "cycle-y")[0]?.data.status).toBe("accepted");
  });
});
