import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import type { Reconciled } from "../kit/generated/messages.js";
import { loadSiteModel, type SiteModel, solveSteadyState } from "../model/index.js";
import { ParameterHistory } from "./history.js";
import { estimateParameters, type ReconciledSnapshot } from "./stage.js";

const fixture = (name: string) => new URL(`../../test/fixtures/sites/${name}`, import.meta.url);
const tank = loadSiteModel(readFileSync(fixture("recon-est.yaml"), "utf8"), "recon-est.yaml");

/** A seeded generator, so a failing run can be repeated. */
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

/**
 * Reconciled data for the tank at its steady state for `UA` and decisions/disturbances `inputs`, every tag
 * "reconciled", values perturbed by noise × sigma (noise: a generator, or none).
 */
function reconciledAt(
  model: SiteModel,
  UA: number,
  inputs: { decisions?: Record<string, number> } = {},
  noise?: () => number,
  id = "r0",
): ReconciledSnapshot {
  const r = solveSteadyState(model, { parameters: { UA }, ...inputs });
  const tags: Reconciled["tags"] = model.tags.map((t) => {
    const slot = model.layout.slots.get(t.variable);
    const truth = slot !== undefined ? (r.point[slot] as number) : (r.outputs[t.variable] as number);
    const value = truth + (noise ? noise() * t.sigma : 0);
    return {
      tag: t.id,
      variable: t.variable,
      unit: t.unit,
      status: "reconciled",
      measured: value,
      sigma: t.sigma,
      value,
      sd: t.sigma,
      adjustment: 0,
    };
  });
  return {
    id,
    data: {
      method: "bilinear",
      passThrough: null,
      startMs: 0,
      endMs: 300_000,
      sigmaSource: "model",
      tags,
      globalTest: null,
      initialGlobalTest: null,
      measurementTests: [],
      nodalTests: [],
      grossErrors: [],
      eliminated: [],
      warnings: [],
    },
  };
}

describe("estimate stage", () => {
  it("recovers UA exactly from noise-free data generated at UA = 15, starting from 10", () => {
    // given a reconciled snapshot of the tank at UA = 15 and UA = 10 in force
    const snap = reconciledAt(tank, 15);
    // when the parameters are estimated
    const out = estimateParameters(tank, [snap], { UA: 10 });
    // then UA = 15 is found with an analytic Jacobian, accepted and put in force
    const ua = out.data.parameters[0];
    expect(out.data.status).toBe("accepted");
    expect(ua?.value).toBeCloseTo(15, 8);
    expect(ua?.previous).toBe(10);
    expect(out.inForce.UA).toBeCloseTo(15, 8);
    expect(out.data.fit?.jacobian).toBe("analytic");
    expect(out.data.fit?.converged).toBe(true);
    expect(out.data.fit?.weightedRss).toBeLessThan(1e-12);
  });

  it("brackets the true UA in its 95 % interval on noisy data, with a sd that matches the sensitivities", () => {
    // given measurements with one-sigma Gaussian noise (seeded) on the outputs only
    const noisy = reconciledAt(tank, 15, {}, gaussian(11));
    for (const t of noisy.data.tags) {
      if (tank.tagById.get(t.tag)?.variableKind === "unknowns") continue;
      const exact = reconciledAt(tank, 15).data.tags.find((x) => x.tag === t.tag);
      t.value = exact?.value ?? null;
    }
    // when estimated
    const out = estimateParameters(tank, [noisy], {});
    // then the interval holds 15, and sd = σ/‖dX/dUA‖ with the sensitivity taken here by central
    // differences of the steady state (an independent check of the analytic chain rule and the scaling)
    const ua = out.data.parameters[0];
    const value = ua?.value as number;
    expect(ua?.ciLower).toBeLessThan(15);
    expect(ua?.ciUpper).toBeGreaterThan(15);
    const h = 1e-4 * value;
    const at = (UA: number) => solveSteadyState(tank, { parameters: { UA } }).unknowns;
    const [up, down] = [at(value + h), at(value - h)];
    const dT = ((up.T as number) - (down.T as number)) / (2 * h);
    const dTc = ((up.Tcout as number) - (down.Tcout as number)) / (2 * h);
    expect((ua?.sd as number) / (0.2 / Math.hypot(dT, dTc))).toBeCloseTo(1, 6);
    // Source: the standard normal 0.975 quantile 1.959964 (common practice, no source).
    expect((ua?.ciUpper as number) - value).toBeCloseTo(1.959964 * (ua?.sd as number), 5);
  });

  it("narrows the interval when a window of three operating points is fitted together", () => {
    // given three snapshots at different cooling-water flows
    const window = [2, 3, 4].map((Fc, k) =>
      reconciledAt(tank, 15, { decisions: { Fc } }, gaussian(20 + k), `r${k}`),
    );
    // when the window and its last snapshot alone are estimated
    const all = estimateParameters(tank, window, {});
    const last = estimateParameters(tank, window.slice(2), {});
    // then the window has 3× the residuals and a tighter sd
    expect(all.data.fit?.residuals).toBe(3 * (last.data.fit?.residuals ?? 0));
    expect(all.data.parameters[0]?.sd).toBeLessThan(last.data.parameters[0]?.sd as number);
    expect(all.data.window.reconciledIds).toEqual(["r0", "r1", "r2"]);
  });

  it("rejects a move beyond maxChangePerCycle and keeps the previous UA in force", () => {
    // given data at UA = 15 while UA = 3 is in force (limit: 10 kW/K per cycle)
    const out = estimateParameters(tank, [reconciledAt(tank, 15)], { UA: 3 });
    // then the estimate is rejected for the move limit and 3 stays in force
    expect(out.data.status).toBe("rejected");
    expect(out.data.parameters[0]?.reasons.map((r) => r.code)).toContain("ACCEPT_MOVE_LIMIT");
    expect(out.data.parameters[0]?.inForce).toBe(3);
    expect(out.inForce.UA).toBe(3);
  });

  it("rejects a fit that the data push onto the parameter's bound", () => {
    // given data generated at UA = 60, above the site model's max of 40
    const out = estimateParameters(tank, [reconciledAt(tank, 60)], { UA: 35 });
    // then UA stops at 40 and the estimate is rejected
    expect(out.data.parameters[0]?.atBound).toBe(true);
    expect(out.data.parameters[0]?.value).toBeCloseTo(40, 9);
    expect(out.data.status).toBe("rejected");
    expect(out.inForce.UA).toBe(35);
  });

  it("rejects a fit whose residuals fail the chi-square gate", () => {
    // given the jacket outlet temperature 3 K off the model (a mismatch no UA explains)
    const snap = reconciledAt(tank, 15);
    const t6 = snap.data.tags.find((t) => t.tag === "TI-6");
    const t3 = snap.data.tags.find((t) => t.tag === "TI-3");
    if (!t6 || !t3) throw new Error("fixture lacks TI-3/TI-6");
    t6.value = (t6.value as number) + 3;
    t3.value = (t3.value as number) + 3;
    // when estimated
    const out = estimateParameters(tank, [snap], { UA: 15 });
    // then the fit-quality reason is given and UA stays at 15
    expect(out.data.reasons.map((r) => r.code)).toContain("ACCEPT_CHI_SQUARE");
    expect(out.inForce.UA).toBe(15);
  });

  it("fails with ESTIMATE_INPUT_MISSING when a decision has no value, keeping the parameters", () => {
    // given a snapshot without the cooling-water flow tags
    const snap = reconciledAt(tank, 15);
    snap.data.tags = snap.data.tags.filter((t) => t.variable !== "Fc");
    // when estimated
    const out = estimateParameters(tank, [snap], { UA: 12 });
    // then nothing is fitted and the reason names the decision
    expect(out.data.status).toBe("failed");
    expect(out.data.fit).toBeNull();
    expect(out.data.reasons[0]).toMatchObject({ code: "ESTIMATE_INPUT_MISSING" });
    expect(out.data.reasons[0]?.message).toMatch(/Fc/);
    expect(out.inForce.UA).toBe(12);
  });

  it("fails with ESTIMATE_TOO_FEW_RESIDUALS when only one model value is measured", () => {
    // given a snapshot whose tank and outlet temperatures were eliminated
    const snap = reconciledAt(tank, 15);
    for (const t of snap.data.tags) if (t.tag === "TI-3" || t.tag === "FI-3") t.status = "eliminated";
    // when estimated
    const out = estimateParameters(tank, [snap], {});
    // then it fails for lack of residuals
    expect(out.data.reasons[0]?.code).toBe("ESTIMATE_TOO_FEW_RESIDUALS");
    expect(out.inForce.UA).toBe(10);
  });

  it("says no-parameters for a site without adjustable parameters", () => {
    // given the tiny site
    const tiny = loadSiteModel(readFileSync(fixture("tiny-valid.yaml"), "utf8"), "tiny-valid.yaml");
    // when estimated
    const out = estimateParameters(tiny, [reconciledAt(tank, 15)], {});
    // then there is nothing to do
    expect(out.data.status).toBe("no-parameters");
    expect(out.data.parameters).toEqual([]);
  });
});

describe("parameter history", () => {
  it("answers per-parameter trends in time order, filtered and bounded", () => {
    // given a history of 3 kept from 5 estimates of UA falling by 1 per day, one of them rejected
    const h = new ParameterHistory(3);
    const day = 86_400_000;
    for (let k = 0; k < 5; k++) {
      const out = estimateParameters(tank, [reconciledAt(tank, 20 - k)], { UA: 20 - k + 0.5 });
      out.data.window.endMs = k * day;
      if (k === 3) {
        out.data.status = "rejected";
        for (const p of out.data.parameters) p.accepted = false;
      }
      h.record({ id: `e${k}`, cycleid: `c${k}`, data: out.data });
    }
    // when queried
    const all = h.query("UA");
    const accepted = h.query("UA", { acceptedOnly: true });
    const recent = h.query("UA", { sinceMs: 3 * day, limit: 1 });
    // then the oldest two are gone, the trend falls, and the filters apply
    expect(h.size).toBe(3);
    expect(all.map((p) => p.eventId)).toEqual(["e2", "e3", "e4"]);
    expect(all.map((p) => Math.round(p.value as number))).toEqual([18, 17, 16]);
    expect(accepted.map((p) => p.eventId)).toEqual(["e2", "e4"]);
    expect(recent.map((p) => p.eventId)).toEqual(["e4"]);
    expect(h.symbols()).toEqual(["UA"]);
  });

  it("inserts a late estimate in time order", () => {
    // given two estimates recorded out of order
    const h = new ParameterHistory();
    const a = estimateParameters(tank, [reconciledAt(tank, 15)], {}).data;
    h.record({ id: "late", data: a }, 2000);
    h.record({ id: "early", data: a }, 1000);
    // then queries return them by time
    expect(h.query("UA").map((p) => p.eventId)).toEqual(["early", "late"]);
  });
});
