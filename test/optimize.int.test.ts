import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { loadConfig } from "../services/kit/config.js";
import type { Event } from "../services/kit/envelope.js";
import type { ModelUpdate, Snapshot } from "../services/kit/generated/messages.js";
import { silentLogger } from "../services/kit/log.js";
import { type Runtime, type Service, startRuntime } from "../services/kit/service.js";
import { loadSiteModelFile } from "../services/model/index.js";
import { type OptimizeConfig, optimizeConfigSchema } from "../services/optimize/config.js";
import { start } from "../services/optimize/index.js";
import { mqttUrl, testSite, waitFor } from "./support/brokers.js";

const SITE_FILE = new URL("./fixtures/sites/williams-otto-plant.yaml", import.meta.url).pathname;

/** A snapshot of the Williams–Otto plant's decisions and feed A (values in model units, FA also in t/h). */
function snapshot(fbKgPerS: number, tempC: number): Snapshot {
  const tag = (
    id: string,
    variable: string,
    unit: string,
    mean: number,
    modelUnit: string,
    modelMean: number,
  ) => ({
    tag: id,
    variable,
    key: true,
    count: 30,
    unit,
    mean,
    std: 0,
    sigma: 0.01,
    modelUnit,
    modelMean,
    modelStd: 0,
  });
  return {
    startMs: 1_800_000_000_000,
    endMs: 1_800_000_300_000,
    spanS: 300,
    lastCommandMs: null,
    tags: [
      tag("FI-101", "FA", "t/h", 1.8275 * 3.6, "kg/s", 1.8275),
      tag("FIC-102", "FB", "kg/s", fbKgPerS, "kg/s", fbKgPerS),
      tag("TIC-103", "T_R", "degC", tempC, "degC", tempC),
    ],
    excluded: [],
  };
}

const modelDone: ModelUpdate = {
  status: "no-parameters",
  accepted: false,
  window: { snapshots: 0, reconciledIds: [], startMs: null, endMs: null },
  parameters: [],
  fit: null,
  correlation: [],
  residuals: [],
  reasons: [],
  warnings: [],
};

describe("optimize service on MQTT", () => {
  const site = testSite("opt");
  let service: Service;
  let probe: Runtime;
  const proposals: Event<"rto.proposal.v1">[] = [];
  const cycles: Event<"rto.cycle.v1">[] = [];

  beforeAll(async () => {
    const url = await mqttUrl();
    const config = loadConfig<OptimizeConfig>(optimizeConfigSchema, {
      site,
      bus: { transport: "mqtt", url },
      http: { enabled: false },
      logLevel: "silent",
      optimize: { siteModelFile: SITE_FILE },
    });
    service = await start(config, { model: await loadSiteModelFile(SITE_FILE), log: silentLogger() });
    probe = await startRuntime("probe", { ...config, instance: "probe" }, { log: silentLogger() });
    await probe.events.on(
      probe.events.subject("proposal"),
      ["rto.proposal.v1"],
      (e) => void proposals.push(e),
    );
    await probe.events.on(probe.events.subject("cycle"), ["rto.cycle.v1"], (e) => {
      if (e.source.includes("/optimize/")) cycles.push(e);
    });
  });
  afterAll(async () => {
    await service?.stop();
    await probe?.ready().stop();
  });

  const runCycle = async (cycleid: string, fb: number, t: number) => {
    await probe.events.publish("snapshot", "rto.snapshot.v1", snapshot(fb, t), { cycleid });
    await probe.events.publish("model", "rto.model.v1", modelDone, { cycleid });
    expect(await waitFor(() => cycles.some((c) => c.cycleid === cycleid), 15_000)).toBe(true);
    return cycles.find((c) => c.cycleid === cycleid)!;
  };

  it("proposes the plant optimum for a cycle from prices, a snapshot and a model event", async () => {
    // given the reference prices, feed B's given per gram (converted to the model's USD/kg)
    await probe.events.publish("prices", "rto.prices.v1", {
      effectiveFrom: 1_800_000_000_000,
      source: "test",
      prices: [
        { symbol: "pP", value: 1143.38, unit: "USD/kg" },
        { symbol: "pB", value: 0.11434, unit: "USD/g" },
      ],
    });
    // when a cycle runs near the optimum (inside one move of it)
    const cycle = await runCycle("c-1", 4.6, 88.5);
    // then
    expect(cycle.data).toMatchObject({ status: "stage-done", stage: "optimize", outcome: "proposed" });
    expect(await waitFor(() => proposals.some((p) => p.cycleid === "c-1"), 5_000)).toBe(true);
    const p = proposals.find((x) => x.cycleid === "c-1")!;
    expect(cycle.data.eventIds).toEqual([p.id]);
    // Source: Marchetti, Chachuat & Bonvin (2009), plant optimum FB 4.787 kg/s, T_R 89.70 °C, 190.98 $/s
    // (published, from memory; reproduced 4.78742, 89.7039, 190.9803 — CHECK-VALUES.md §1)
    expect(p.data.setpoints.map((s) => [s.tag, s.current])).toEqual([
      ["FIC-102", 4.6],
      ["TIC-103", 88.5],
    ]);
    expect(p.data.setpoints[0]!.proposed).toBeCloseTo(4.787, 3);
    expect(p.data.setpoints[1]!.proposed).toBeCloseTo(89.7, 2);
    expect(p.data.objective.proposed).toBeCloseTo(190.98, 2);
    expect(p.data.objective.change).toBeGreaterThan(0);
    expect(p.data.prices.find((x) => x.symbol === "pB")?.value).toBeCloseTo(114.34, 9);
    expect(p.data.solver.name).toBe("sqp");
  });

  it("aborts an infeasible cycle naming the conflicting limits, publishes no proposal, and keeps serving", async () => {
    // when FB is reported at 7 kg/s: bound 6 and move limit ±0.5 cannot both hold
    const bad = await runCycle("c-2", 7, 88);
    // then
    expect(bad.data).toMatchObject({ status: "aborted", stage: "optimize" });
    const text = JSON.stringify(bad.data.reasons);
    expect(bad.data.reasons?.[0]?.code).toBe("OPTIMIZE_INFEASIBLE");
    expect(text).toContain("FB ≥ 6.5 (move limit ±0.5 around 7)");
    expect(text).toContain("FB ≤ 6 (bound)");
    // and the next good cycle still gets its proposal
    const good = await runCycle("c-3", 4.5, 85);
    expect(good.data.status).toBe("stage-done");
    expect(await waitFor(() => proposals.some((p) => p.cycleid === "c-3"), 5_000)).toBe(true);
    expect(proposals.some((p) => p.cycleid === "c-2")).toBe(false);
  });
});
