import { readFileSync } from "node:fs";
import { describe, expect, it } from "vitest";
import type { Snapshot } from "../kit/generated/messages.js";
import { loadSiteModel, type SiteModel, solveSteadyState } from "../model/index.js";
import { reconcileSnapshot } from "./stage.js";

const fixture = (name: string) => new URL(`../../test/fixtures/sites/${name}`, import.meta.url);
const tankText = readFileSync(fixture("recon-est.yaml"), "utf8");
const tank = loadSiteModel(tankText, "recon-est.yaml");

/** True values of every tag of `model` at its steady state for `parameters`, model units. */
function trueValues(model: SiteModel, parameters: Record<string, number>): Record<string, number> {
  const r = solveSteadyState(model, { parameters });
  const out: Record<string, number> = {};
  for (const t of model.tags) {
    const slot = model.layout.slots.get(t.variable);
    out[t.id] = slot !== undefined ? (r.point[slot] as number) : (r.outputs[t.variable] as number);
  }
  return out;
}

/** A snapshot of the given window means (model unit = tag unit in these fixtures). */
function snapshotOf(
  model: SiteModel,
  means: Record<string, number>,
  excluded: Snapshot["excluded"] = [],
): Snapshot {
  return {
    startMs: 1_000_000,
    endMs: 1_300_000,
    spanS: 300,
    lastCommandMs: null,
    excluded,
    tags: Object.entries(means).map(([id, mean]) => {
      const t = model.tagById.get(id);
      return {
        tag: id,
        variable: t?.variable ?? "x",
        key: t?.key ?? false,
        count: 31,
        unit: t?.unit ?? "1",
        mean,
        std: t?.sigma ?? 1,
        sigma: t?.sigma ?? 1,
        modelUnit: t?.unit ?? "1",
        modelMean: mean,
        modelStd: t?.sigma ?? 1,
      };
    }),
  };
}

// A heat exchanger with bypass: six flows on four linear balances, unit variances.
const exchangerYaml = `
site: { id: hx, name: Exchanger with bypass }
tags:
${[1, 2, 3, 4, 5, 6].map((i) => `  - { id: FI-${i}, variable: F${i}, unit: kg/s, sigma: 1, range: { min: 0, max: 200 } }`).join("\n")}
disturbances:
${[1, 2, 3, 4, 5, 6].map((i) => `  - { symbol: F${i}, unit: kg/s, tag: FI-${i}, default: 1 }`).join("\n")}
balances:
  - { name: split, terms: [{ tag: FI-1, coeff: 1 }, { tag: FI-2, coeff: -1 }, { tag: FI-3, coeff: -1 }] }
  - { name: exchanger, terms: [{ tag: FI-2, coeff: 1 }, { tag: FI-4, coeff: -1 }] }
  - { name: bypass, terms: [{ tag: FI-3, coeff: 1 }, { tag: FI-5, coeff: -1 }] }
  - { name: mixer, terms: [{ tag: FI-4, coeff: 1 }, { tag: FI-5, coeff: 1 }, { tag: FI-6, coeff: -1 }] }
model:
  unknowns: [{ symbol: z, unit: kg/s, initial: 1 }]
  equations: [{ name: dummy, expression: z - F1 = 0 }]
objective: { sense: max, expression: z, unit: kg/s }
`;

describe("reconcile stage", () => {
  it("reproduces the published heat-exchanger-with-bypass reconciliation through a site model", () => {
    // given the exchanger's site model and the published measurements
    const hx = loadSiteModel(exchangerYaml, "hx.yaml");
    const y = [101.91, 64.45, 34.65, 64.2, 36.44, 98.88];
    const snap = snapshotOf(hx, Object.fromEntries(y.map((v, i) => [`FI-${i + 1}`, v])));
    // when it is reconciled
    const out = reconcileSnapshot(snap, hx);
    // then the values and the global test match the reference
    if (!out.ok) throw new Error(JSON.stringify(out.reasons));
    expect(out.data.method).toBe("linear");
    // Source: Narasimhan & Jordache (2000), "Data Reconciliation and Gross Error Detection", ch. 3 (inputs
    // published), results reproduced (NumPy) in CHECK-VALUES.md §4.
    const expected = [100.22, 64.5, 35.72, 64.5, 35.72, 100.22];
    out.data.tags.forEach((t, i) => {
      expect(t.value).toBeCloseTo(expected[i] as number, 2);
    });
    // Source: as above, γ reproduced; χ²₀.₉₅(4) = 9.488 from NIST/SEMATECH e-Handbook §1.3.6.7.4 (published).
    expect(out.data.globalTest?.statistic).toBeCloseTo(6.4075, 3);
    expect(out.data.globalTest?.dof).toBe(4);
    expect(out.data.globalTest?.critical).toBeCloseTo(9.488, 3);
    expect(out.data.grossErrors).toEqual([]);
  });

  it("leaves a snapshot taken at the model's own steady state unchanged and passes the global test", () => {
    // given means exactly at the tank's steady state for UA = 15
    const snap = snapshotOf(tank, trueValues(tank, { UA: 15 }));
    // when reconciled
    const out = reconcileSnapshot(snap, tank);
    // then the bilinear heat balance is used, nothing is adjusted and no error is found
    if (!out.ok) throw new Error(JSON.stringify(out.reasons));
    expect(out.data.method).toBe("bilinear");
    expect(out.data.globalTest?.passed).toBe(true);
    for (const t of out.data.tags) expect(Math.abs(t.adjustment ?? 0)).toBeLessThan(1e-8);
    expect(out.data.tags.every((t) => t.status === "reconciled")).toBe(true);
  });

  it("names an outlet flow meter reading 0.25 kg/s high as the gross error and sizes it", () => {
    // given the steady state with FI-3 biased by +0.25 kg/s (about 8 sigma)
    const means = trueValues(tank, { UA: 15 });
    means["FI-3"] = (means["FI-3"] as number) + 0.25;
    // when reconciled
    const out = reconcileSnapshot(snapshotOf(tank, means), tank);
    // then FI-3 alone is eliminated, its size is recovered and the remaining data pass
    if (!out.ok) throw new Error(JSON.stringify(out.reasons));
    expect(out.data.initialGlobalTest?.passed).toBe(false);
    expect(out.data.eliminated).toEqual(["FI-3"]);
    expect(out.data.grossErrors[0]?.estimatedSize).toBeCloseTo(0.25, 6);
    expect(out.data.grossErrors[0]?.tiedWith).toEqual([]);
    expect(out.data.globalTest?.passed).toBe(true);
    expect(out.data.tags.find((t) => t.tag === "FI-3")?.status).toBe("eliminated");
    expect(out.data.tags.find((t) => t.tag === "FI-3")?.value).toBeCloseTo(3.5, 8);
  });

  it("reports temperature errors the heat balance alone cannot tell apart as tied", () => {
    // given the outlet coolant temperature 2 K high: temperatures appear only in the heat balance
    const means = trueValues(tank, { UA: 15 });
    means["TI-6"] = (means["TI-6"] as number) + 2;
    // when reconciled
    const out = reconcileSnapshot(snapshotOf(tank, means), tank);
    // then a gross error is found and TI-6 is among the indistinguishable candidates
    if (!out.ok) throw new Error(JSON.stringify(out.reasons));
    const g = out.data.grossErrors[0];
    expect(g).toBeDefined();
    expect([g?.tag, ...(g?.tiedWith ?? [])]).toContain("TI-6");
  });

  it("passes values through and says why when the site declares no balances", () => {
    // given a site without balances
    const tiny = loadSiteModel(readFileSync(fixture("tiny-valid.yaml"), "utf8"), "tiny-valid.yaml");
    // when a snapshot is reconciled
    const out = reconcileSnapshot(snapshotOf(tiny, { "FIC-1": 2.5 }), tiny);
    // then it passes through unchanged
    if (!out.ok) throw new Error(JSON.stringify(out.reasons));
    expect(out.data.method).toBe("pass-through");
    expect(out.data.passThrough).toMatch(/no balances/);
    expect(out.data.tags[0]).toMatchObject({ tag: "FIC-1", value: 2.5, sd: 0.01, status: "passed-through" });
    expect(out.data.globalTest).toBeNull();
  });

  it("aborts with RECONCILE_RANK_DEFICIENT naming the balances when one balance repeats another", () => {
    // given the tank with the coolant balance written twice
    const dependent = loadSiteModel(
      tankText.replace(
        "  - name: heat\n",
        "  - name: coolant-mass-again\n    terms: [{ tag: FIC-4, coeff: 2 }, { tag: FI-7, coeff: -2 }]\n  - name: heat\n",
      ),
      "dependent.yaml",
    );
    // when a good snapshot is reconciled
    const out = reconcileSnapshot(snapshotOf(dependent, trueValues(dependent, { UA: 15 })), dependent);
    // then the stage refuses and names the dependent balances
    expect(out.ok).toBe(false);
    if (out.ok) return;
    expect(out.reasons[0]?.code).toBe("RECONCILE_RANK_DEFICIENT");
    expect(out.reasons[0]?.message).toMatch(/coolant-mass.*coolant-mass-again/);
  });

  it("aborts with RECONCILE_TOO_FEW_VALUES and the exclusion reasons when most balance tags are missing", () => {
    // given a snapshot with only the two hot-feed tags, the others rejected upstream
    const all = trueValues(tank, { UA: 15 });
    const snap = snapshotOf(tank, { "FI-1": all["FI-1"] as number, "TI-1": all["TI-1"] as number }, [
      { tag: "FI-3", reason: "rejected: frozen" },
    ]);
    // when reconciled
    const out = reconcileSnapshot(snap, tank);
    // then the stage refuses, quoting why FI-3 is missing
    expect(out.ok).toBe(false);
    if (out.ok) return;
    expect(out.reasons[0]?.code).toBe("RECONCILE_TOO_FEW_VALUES");
    expect(out.reasons[0]?.message).toContain("FI-3 (rejected: frozen)");
  });

  it("aborts when the measured tags leave no balance to check, even above the measured fraction", () => {
    // given the tank without both coolant flow meters and the outlet flow: nothing redundant is left
    const all = trueValues(tank, { UA: 15 });
    for (const id of ["FIC-4", "FI-7", "FI-3"]) delete all[id];
    // when reconciled with no fraction limit
    const out = reconcileSnapshot(snapshotOf(tank, all), tank, { minMeasuredFraction: 0 });
    // then it is refused for lack of redundancy
    expect(out.ok).toBe(false);
    if (!out.ok) expect(out.reasons[0]?.message).toMatch(/check 0 independent/);
  });

  it("widens sigma by the window's standard error only when asked", () => {
    // given a consistent snapshot whose window std is 1 on 31 samples for every tag
    const snap = snapshotOf(tank, trueValues(tank, { UA: 15 }));
    for (const t of snap.tags) t.modelStd = 1;
    // when reconciled with each sigma source
    const model = reconcileSnapshot(snap, tank);
    const window = reconcileSnapshot(snap, tank, { sigmaSource: "model+window" });
    // then the weights are σ and √(σ² + 1/31)
    if (!model.ok || !window.ok) throw new Error("not reconciled");
    expect(model.data.tags[0]?.sigma).toBeCloseTo(0.02, 12);
    expect(window.data.tags[0]?.sigma).toBeCloseTo(Math.sqrt(0.02 ** 2 + 1 / 31), 12);
  });

  it("ignores a snapshot tag the site model does not know, with a warning", () => {
    // given a consistent snapshot plus a stray tag
    const snap = snapshotOf(tank, { ...trueValues(tank, { UA: 15 }), "XX-9": 1 });
    // when reconciled
    const out = reconcileSnapshot(snap, tank);
    // then it is reconciled and the stray tag is named in a warning
    if (!out.ok) throw new Error("not reconciled");
    expect(out.data.tags.some((t) => t.tag === "XX-9")).toBe(false);
    expect(out.data.warnings[0]).toMatchObject({ code: "RECONCILE_TAG_UNKNOWN" });
  });
});
