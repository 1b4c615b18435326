/**
 * The recorder on a real MQTT broker: it stores every event of one cycle, explain() returns the
 * chain snapshot → model → prices → proposal → validation → command → readback with the reasons, and
 * recompute() re-runs the optimization from the record with services/optimize's optimizeOffline
 * wired in (the recorder itself may not import the optimizer) and reproduces the recorded proposal.
 */
import { afterAll, afterEach, beforeAll, describe, expect, it } from "vitest";
import type { Bus } from "../services/kit/bus.js";
import { systemClock } from "../services/kit/clock.js";
import { loadConfig } from "../services/kit/config.js";
import { Events } from "../services/kit/events.js";
import type { Prices, Proposal } from "../services/kit/generated/messages.js";
import { createLogger } from "../services/kit/log.js";
import { connectMqtt } from "../services/kit/mqtt.js";
import { schemaRegistry } from "../services/kit/schemas.js";
import { loadSiteModelFile, type SiteModel } from "../services/model/index.js";
import { optimizeOffline } from "../services/optimize/stage.js";
import { type RecorderConfig, recorderConfigSchema } from "../services/recorder/config.js";
import { start } from "../services/recorder/index.js";
import { mqttUrl, stopOwnBrokers, testSite, waitFor } from "./support/brokers.js";
import { offlineOptimizer } from "./support/offline-optimizer.js";

const SITES = new URL("./fixtures/sites/", import.meta.url).pathname;
let url: string;
let model: SiteModel;
beforeAll(async () => {
  url = await mqttUrl();
  model = await loadSiteModelFile(`${SITES}williams-otto-model.yaml`);
});
afterAll(async () => {
  await stopOwnBrokers();
});
const closers: Array<() => Promise<void>> = [];
afterEach(async () => {
  for (const c of closers.splice(0).reverse()) await c().catch(() => undefined);
});

// The cycle's inputs: fitted parameters away from the initial values, a dearer feed B, an operating point.
const PARAMS = { eta1: 2.5e8, eta2: 4.0e13 };
const PRICES = { pP: 1143.38, pE: 25.92, pA: 76.23, pB: 120 };
const POINT = { FB: 4.5, T_R: 88, FA: 1.8275 };

describe("recorder", () => {
  it("records one cycle, explains its chain with reasons, and recomputes the proposal from the record", async () => {
    const site = testSite("rec");
    const config = loadConfig<RecorderConfig>(recorderConfigSchema, {
      site,
      bus: { url },
      http: { enabled: false },
      logLevel: "silent",
      recorder: { dbFile: ":memory:", flushMs: 20 },
    });
    const rec = await start(config);
    closers.push(() => rec.stop());
    const bus: Bus = await connectMqtt({ url });
    closers.push(() => bus.close());
    const events = new Events({
      bus,
      emitter: { site, service: "optimize", instance: "t", clock: systemClock, registry: schemaRegistry() },
      log: createLogger("test", { level: "silent" }),
    });

    // given the events of one cycle, as the stages publish them
    const offline = await optimizeOffline({
      model,
      parameters: PARAMS,
      prices: PRICES,
      current: { FB: POINT.FB, T_R: POINT.T_R },
      disturbances: { FA: POINT.FA },
    });
    if (offline.status !== "proposed")
      throw new Error(`optimizeOffline gave no proposal: ${JSON.stringify(offline.reasons)}`);
    const recorded: Proposal = offline.proposal;
    const cycleid = `C${Date.now()}`;
    const now = Date.now();
    await events.publish("prices", "rto.prices.v1", {
      effectiveFrom: now - 60_000,
      prices: Object.entries(PRICES).map(([symbol, value]) => ({
        symbol,
        value,
        unit: "USD/kg",
      })) as Prices["prices"],
      source: "test",
    });
    const tag = (id: string, variable: keyof typeof POINT, unit: string) => ({
      tag: id,
      variable,
      key: true,
      count: 60,
      unit,
      mean: POINT[variable],
      std: 0.01,
      sigma: 0.02,
      modelUnit: unit,
      modelMean: POINT[variable],
      modelStd: 0.01,
    });
    const snap = await events.publish(
      "snapshot",
      "rto.snapshot.v1",
      {
        startMs: now - 600_000,
        endMs: now,
        spanS: 600,
        lastCommandMs: null,
        tags: [tag("FI-101", "FA", "kg/s"), tag("FIC-102", "FB", "kg/s"), tag("TIC-103", "T_R", "degC")],
        excluded: [],
      },
      { cycleid },
    );
    const mdl = await events.publish(
      "model",
      "rto.model.v1",
      {
        status: "accepted",
        accepted: true,
        window: { snapshots: 1, reconciledIds: [], startMs: null, endMs: null },
        parameters: Object.entries(PARAMS).map(([symbol, value]) => ({
          symbol,
          unit: "1/s",
          fitted: true,
          value,
          sd: value * 0.01,
          ciLower: value * 0.98,
          ciUpper: value * 1.02,
          previous: symbol === "eta1" ? 2.189e8 : 4.31e13,
          inForce: value,
          accepted: true,
          atBound: false,
          reasons: [],
        })),
        fit: null,
        correlation: [],
        residuals: [],
        reasons: [],
        warnings: [],
      },
      { cycleid, causedBy: snap },
    );
    const prop = await events.publish("proposal", "rto.proposal.v1", recorded, { cycleid, causedBy: mdl });
    await events.publish(
      "validation",
      "rto.validation.v1",
      {
        proposalId: prop.id,
        verdict: "fail",
        mode: "advisory",
        next: "none",
        checks: [
          { name: "bounds", outcome: "pass", reason: "within bounds" },
          {
            name: "data-age",
            outcome: "fail",
            code: "VALIDATE_DATA_STALE",
            reason: "the snapshot is 2400 s old; the limit is 1800 s",
          },
        ],
        setpoints: [],
      },
      { causedBy: prop },
    );
    await events.publish(
      "cycle",
      "rto.cycle.v1",
      {
        status: "aborted",
        stage: "validate",
        outcome: "failed",
        reasons: [{ code: "VALIDATE_DATA_STALE", message: "data-age: the snapshot is 2400 s old" }],
      },
      { causedBy: prop },
    );
    const published = 6;

    // when the recorder has them
    expect(
      await waitFor(() => {
        rec.store.flush();
        return rec.store.byCycle(cycleid).length === published - 1;
      }, 5000),
    ).toBe(true);
    // a redelivery does not duplicate a row
    await events.publishEvent(events.subject("proposal"), prop);
    await new Promise((r) => setTimeout(r, 200));
    expect(rec.store.byCycle(cycleid)).toHaveLength(published - 1);

    // then explain gives the chain with the prices in force and the reasons
    const x = rec.explain(cycleid);
    expect(x.steps.filter((s) => s.stage !== "cycle").map((s) => s.stage)).toEqual([
      "snapshot",
      "model",
      "prices",
      "proposal",
      "validation",
    ]);
    expect(x.missing).toEqual(["reconciled", "command", "readback"]);
    expect(x.outcome).toBe("validate aborted (failed)");
    expect(x.reasons.filter((r) => r.code === "VALIDATE_DATA_STALE")).toHaveLength(2);
    expect(x.text).toMatch(/model @ .*eta1 = 2\.5e\+8 1\/s \(was 2\.189e\+8\)/);
    expect(x.text).toContain("pB 120 USD/kg");

    // and recompute, fed from the record, reproduces the proposal to solver tolerance
    const r = await rec.recompute(cycleid, offlineOptimizer(model), { tolerance: 1e-6 });
    expect(r.sources).toEqual({ parameters: "model", prices: "prices", current: "proposal" });
    expect(r.agrees).toBe(true);
    expect(r.maxAbsDiff).toBeLessThan(1e-6);
    expect(Math.abs(r.objective.diff)).toBeLessThan(1e-6 * Math.max(1, Math.abs(r.objective.recorded)));
    // and the tag query finds the snapshot means
    const fb = rec.store.byTag("FIC-102", now - 3_600_000, now + 3_600_000);
    expect(fb.snapshots.map((p) => p.value)).toEqual([POINT.FB]);
  });
});
