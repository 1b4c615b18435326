/**
 * The demo site, Kestrel Bay Chemicals reactor R-1 (infra/sites/kestrel-r1): the facts the scenario is
 * built on, shown on the simulated plant (plant.yaml) and the optimizer's model (site.yaml). The scenario
 * and its numbers are ours (README.md beside the files); no outside values are checked here.
 */
import { readFile } from "node:fs/promises";
import { beforeAll, describe, expect, test } from "vitest";
import { loadSiteModel, type SiteModel } from "../services/model/index.js";
import {
  cleanUa,
  DEMO_SITE_DIR,
  loadDemoPlant,
  loadDemoSite,
  modifierAdaptationRto,
  optimizeModel,
  plantOptimum,
  plantSnapshot,
  sequentialNlp,
  twoStepRto,
} from "./support/demo-site.js";

let site: SiteModel;
let plant: SiteModel;

beforeAll(async () => {
  [site, plant] = await Promise.all([loadDemoSite(), loadDemoPlant()]);
});

const constant = (model: SiteModel, symbol: string): number => {
  const c = model.constants.find((k) => k.symbol === symbol);
  if (!c) throw new Error(`${model.file} has no constant ${symbol}`);
  return c.value;
};

describe("the demo site files", () => {
  test("load without error, and the plant trips above the site's hard temperature limit", () => {
    // then: one site, the plant with one reaction (and one unknown) more than the model
    expect(site.site.id).toBe("kestrel-r1");
    expect(plant.site.id).toBe("kestrel-r1");
    expect(plant.unknowns.length).toBe(site.unknowns.length + 1);
    expect(site.numericDerivatives).toEqual([]);
    const limit = site.constraints.find((c) => c.name === "temperature-limit");
    expect(limit?.kind).toBe("hard");
    expect(constant(site, "T_limit")).toBeLessThan(constant(plant, "T_trip"));
    const tR = site.decisions.find((d) => d.symbol === "T_R");
    expect(tR?.max).toBeLessThan(constant(plant, "T_trip"));
  });

  test("the plant publishes every tag and honours every decision, parameter and constraint of the site", () => {
    // then
    expect(plant.tags.map((t) => t.id)).toEqual(site.tags.map((t) => t.id));
    expect(plant.decisions.map((d) => d.symbol)).toEqual(site.decisions.map((d) => d.symbol));
    expect(plant.parameters.map((p) => p.symbol)).toEqual(site.parameters.map((p) => p.symbol));
    expect(plant.constraints.map((c) => c.name)).toEqual(site.constraints.map((c) => c.name));
    expect(plant.prices.map((p) => p.symbol)).toEqual(site.prices.map((p) => p.symbol));
  });

  test("the price schedule names only the site's prices, in time order over one day", async () => {
    // given
    const { parse } = await import("yaml");
    const schedule = parse(await readFile(`${DEMO_SITE_DIR}prices.yaml`, "utf8")) as {
      schedule: { at: string; prices: Record<string, number> }[];
    };
    const symbols = new Set(site.prices.map((p) => p.symbol));
    // then
    const minutes = schedule.schedule.map((e) => {
      const [h, m] = e.at.split(":").map(Number);
      return (h as number) * 60 + (m as number);
    });
    expect(minutes[0]).toBe(0);
    expect(minutes.every((m, i) => i === 0 || m > (minutes[i - 1] as number))).toBe(true);
    expect(minutes.at(-1)).toBeLessThan(24 * 60);
    for (const entry of schedule.schedule) {
      expect(Object.keys(entry.prices).sort()).toEqual([...symbols].sort());
      for (const v of Object.values(entry.prices)) expect(v).toBeGreaterThan(0);
    }
  });
});

describe("the plant optimum", () => {
  test("with a clean jacket is interior: no constraint and no decision bound is active", () => {
    // when
    const best = plantOptimum(plant);
    // then
    expect(best.active).toEqual([]);
    for (const d of plant.decisions) {
      expect(best.decisions[d.symbol]).toBeGreaterThan(d.min + 0.05 * (d.max - d.min));
      expect(best.decisions[d.symbol]).toBeLessThan(d.max - 0.05 * (d.max - d.min));
    }
    // with a margin on the cooling duty of more than 10 % of the jacket's capacity
    const qMax = best.steady.outputs.Q_max as number;
    expect(-(best.constraints["cooling-capacity"] as number)).toBeGreaterThan(0.1 * qMax);
  });

  test("with the jacket fouled to 60 % of its clean UA is cooling-limited, at a positive shadow price", () => {
    // given
    const clean = plantOptimum(plant);
    // when
    const fouled = plantOptimum(plant, { uaFactor: 0.6 });
    // then
    expect(fouled.active.map((a) => a.name)).toEqual(["cooling-capacity"]);
    const cooling = fouled.active[0];
    expect(cooling?.kind).toBe("constraint");
    expect(cooling?.shadowPrice).toBeGreaterThan(0);
    expect(Math.abs(fouled.constraints["cooling-capacity"] as number)).toBeLessThan(1e-6);
    // the plant cuts feed B to stay within the jacket's duty, and earns less
    expect(fouled.decisions.FB).toBeLessThan((clean.decisions.FB as number) - 0.5);
    expect(fouled.objective).toBeLessThan(0.85 * clean.objective);
  });

  test("the shadow price of the cooling limit is what one more kW of jacket capacity earns", () => {
    // given: the fouled optimum and its shadow price (USD/s per kW)
    const fouled = plantOptimum(plant, { uaFactor: 0.6 });
    const price = fouled.active[0]?.shadowPrice as number;
    // when: the optimum profit's slope in UA, by central differences of re-optimizations
    const ua = cleanUa(plant);
    const h = 0.002;
    const up = plantOptimum(plant, { uaFactor: 0.6 + h }).objective;
    const down = plantOptimum(plant, { uaFactor: 0.6 - h }).objective;
    const slopePerUa = (up - down) / (2 * h * ua);
    // then: envelope theorem, dProfit*/dUA = shadow price · ∂Q_max/∂UA (Q itself does not depend on UA)
    const point = fouled.steady.point.slice();
    const uaSlot = plant.layout.slots.get("UA") as number;
    const qMaxIndex = plant.layout.outputIndex.get("Q_max") as number;
    point[uaSlot] = 0.6 * ua + 1e-3;
    const qUp = plant.evalOutputs(point)[qMaxIndex] as number;
    point[uaSlot] = 0.6 * ua - 1e-3;
    const qDown = plant.evalOutputs(point)[qMaxIndex] as number;
    const dQmaxDUa = (qUp - qDown) / 2e-3;
    expect(slopePerUa).toBeGreaterThan(0);
    expect(Math.abs(slopePerUa - price * dQmaxDUa) / slopePerUa).toBeLessThan(0.01);
  });

  test("moves to a higher feed-B rate when product P is worth more", () => {
    // given
    const base = plantOptimum(plant);
    // when
    const dearer = plantOptimum(plant, { prices: { pP: 3.6 } });
    // then
    expect(dearer.active).toEqual([]);
    expect(dearer.decisions.FB).toBeGreaterThan((base.decisions.FB as number) + 0.05);
    expect(dearer.objective).toBeGreaterThan(base.objective);
  });

  test("with a fouled jacket, moves to less feed B and less profit as the cooling water warms up", () => {
    // when: a cool morning, the design value and a hot afternoon
    const runs = [20, 25, 30].map((tcw) =>
      plantOptimum(plant, { uaFactor: 0.6, disturbances: { Tcw_in: tcw } }),
    );
    // then: cooling-limited throughout, and each degree of warmer water costs feed and profit
    for (const r of runs) expect(r.active.map((a) => a.name)).toEqual(["cooling-capacity"]);
    const fb = runs.map((r) => r.decisions.FB as number);
    const profit = runs.map((r) => r.objective);
    expect(fb[1]).toBeLessThan((fb[0] as number) - 0.1);
    expect(fb[2]).toBeLessThan((fb[1] as number) - 0.1);
    expect(profit[1]).toBeLessThan(profit[0] as number);
    expect(profit[2]).toBeLessThan(profit[1] as number);
  });

  test("with a clean jacket, does not move with the cooling-water temperature (the limit is slack)", () => {
    // when
    const cool = plantOptimum(plant, { disturbances: { Tcw_in: 20 } });
    const warm = plantOptimum(plant, { disturbances: { Tcw_in: 30 } });
    // then: only the cooling-utility term changes, and it does not depend on Tcw_in
    expect(cool.active).toEqual([]);
    expect(warm.active).toEqual([]);
    expect(warm.decisions.FB).toBeCloseTo(cool.decisions.FB as number, 6);
    expect(warm.decisions.T_R).toBeCloseTo(cool.decisions.T_R as number, 4);
  });
});

describe("plant-model mismatch", () => {
  test("the two-step approach settles at least 2 % below the plant optimum profit", () => {
    // given
    const best = plantOptimum(plant);
    // when: fit UA and activity to the plant's steady state, optimize the model, apply; ten times
    const run = twoStepRto(site, plant, { iterations: 10 });
    // then: it has settled (the last two iterates agree) ...
    const last = run.history.at(-1)?.plantObjective as number;
    const before = run.history.at(-2)?.plantObjective as number;
    expect(Math.abs(last - before) / best.objective).toBeLessThan(1e-5);
    // ... short of the plant optimum by more than 2 %
    const gap = (best.objective - last) / best.objective;
    expect(gap).toBeGreaterThan(0.02);
    // ... because the fitted activity absorbs the reaction the model lacks (the plant's is 1)
    expect(run.fit?.parameters.act).toBeLessThan(0.95);
    // ... and the fitted model's reactor runs hotter than the plant's optimum
    expect(run.history.at(-1)?.decisions.T_R).toBeGreaterThan((best.decisions.T_R as number) + 3);
  });

  test("modifier adaptation with finite-difference plant gradients closes the gap to within 0.5 %", () => {
    // given
    const best = plantOptimum(plant);
    // when
    const run = modifierAdaptationRto(site, plant, { gain: 0.7, iterations: 12 });
    // then: within 0.5 % by the 10th iteration, and it stays there
    const gaps = run.history.map((h) => (best.objective - h.plantObjective) / best.objective);
    const first = gaps.findIndex((g) => g <= 0.005);
    expect(first).toBeGreaterThanOrEqual(0);
    expect(first).toBeLessThan(10);
    for (const g of gaps.slice(first)) expect(g).toBeLessThan(0.005);
    // at the end the decisions are those of the plant optimum, and no plant limit is broken
    const u = run.history.at(-1)?.decisions ?? {};
    expect(u.FB).toBeCloseTo(best.decisions.FB as number, 3);
    expect(u.T_R).toBeCloseTo(best.decisions.T_R as number, 1);
    for (const g of Object.values(run.history.at(-1)?.plantConstraints ?? {})) expect(g).toBeLessThan(0);
  });
});

describe("the profit measured from the plant's tags", () => {
  test("is the plant's true profit, the unanalysed tar's disposal included, across the operating range", () => {
    // given operating points from cool to hot (the tar grows with temperature)
    for (const u of [
      [1.8, 62],
      [2.2, 68.4],
      [2.2, 75],
      [2.6, 82],
    ]) {
      // when the site's profit is computed from the plant's noise-free tags, the rest (the jacket duty,
      // no tag) from the site's own steady state at the same decisions
      const { steady, tags } = plantSnapshot(plant, u);
      const point = sequentialNlp(site).evaluate(u).solve.point.slice();
      for (const t of site.tags) {
        const slot = site.layout.slots.get(t.variable);
        const v = tags[t.id];
        if (slot !== undefined && v !== undefined) point[slot] = v * t.toModel.scale + t.toModel.offset;
      }
      // then it is the plant's profit to within the model's error in the duty's small cost (a profit
      // charging disposal on F·xW alone had been 0.02–0.04 USD/s high, the tar's disposal)
      expect(Math.abs(site.evalObjective(point) - steady.objective), `at ${u}`).toBeLessThan(2e-3);
    }
  });
});

describe("balances at the plant's steady state", () => {
  test("close to solver tolerance after a step in both decisions", () => {
    // given: the clean optimum, then a step of +0.3 kg/s feed B and +3 K
    const best = plantOptimum(plant);
    const u = [(best.decisions.FB as number) + 0.3, (best.decisions.T_R as number) + 3];
    // when
    const { steady, tags } = plantSnapshot(plant, u);
    // then: Newton converged
    expect(steady.solve.converged).toBe(true);
    expect(steady.solve.residualNorm).toBeLessThan(1e-8);
    const v = {
      ...steady.solve.unknowns,
      ...steady.solve.outputs,
      ...plant.getBlock(steady.solve.point, "disturbances"),
    };
    const num = (s: string): number => v[s] as number;
    const fa = num("FA");
    const fb = u[0] as number;
    const f = num("F");
    // total mass: feeds in = effluent out, with the effluent's composition summing to 1 (not imposed)
    const massOut = f * (num("xA") + num("xB") + num("xP") + num("xW") + num("xD"));
    expect(Math.abs(fa + fb - massOut) / (fa + fb)).toBeLessThan(1e-9);
    // the site's reconciliation balance closes on the plant's (noise-free) tags
    const balance = site.balances.find((b) => b.name === "total-mass");
    const sum = (balance?.terms ?? []).reduce((s, t) => s + t.coeff * (tags[t.tag] as number), 0);
    expect(Math.abs(sum)).toBeLessThan(1e-9);
    // energy: reaction extents from the effluent composition alone, heat released less the feeds'
    // sensible heat equals the jacket duty on the coolant side and on the jacket side
    const extent2 = (f * num("xW")) / 2;
    const extent3 = f * num("xD");
    const extent1 = (f * num("xP") + extent2) / 2;
    const released =
      -constant(plant, "dH1") * extent1 - constant(plant, "dH2") * extent2 - constant(plant, "dH3") * extent3;
    const sensible = f * constant(plant, "cp") * ((u[1] as number) - constant(plant, "T_feed"));
    const tIn = num("Tcw_in");
    const tOut = num("Tcw_out");
    const coolantSide = num("Fcw") * constant(plant, "cp_w") * (tOut - tIn);
    const jacketSide = cleanUa(plant) * ((u[1] as number) - (tIn + tOut) / 2);
    expect(Math.abs(released - sensible - coolantSide) / released).toBeLessThan(1e-9);
    expect(Math.abs(coolantSide - jacketSide) / released).toBeLessThan(1e-9);
    // and the step really moved the plant
    expect(Math.abs(num("xP") - (best.steady.unknowns.xP as number))).toBeGreaterThan(1e-3);
  });
});

describe("sequentialNlp over any site model", () => {
  /** The site model with one constraint line replaced. */
  async function variant(from: string, to: string): Promise<SiteModel> {
    const text = await readFile(`${DEMO_SITE_DIR}site.yaml`, "utf8");
    expect(text).toContain(from);
    return loadSiteModel(text.replace(from, to), "site-variant.yaml");
  }

  test("holds a hard equality constraint", async () => {
    // given: the waste fraction pinned at 3 %
    const model = await variant("expression: xW <= xW_max", "expression: xW == 0.03");
    // when
    const best = optimizeModel(model);
    // then
    expect(best.steady.unknowns.xW).toBeCloseTo(0.03, 8);
    expect(best.active.map((a) => a.name)).toContain("product-quality");
  });

  test("treats a soft constraint as an elastic one: a high penalty holds it, a low one lets it go", async () => {
    // given: a temperature limit of 65 °C, below the unconstrained optimum, made soft
    const soft = (penalty: number) =>
      variant(
        "expression: T_R <= T_limit\n    kind: hard",
        `expression: T_R <= 65\n    kind: soft\n    penalty: ${penalty}`,
      );
    const free = optimizeModel(site);
    expect(free.decisions.T_R).toBeGreaterThan(66);
    // when
    const strict = optimizeModel(await soft(10));
    const loose = optimizeModel(await soft(1e-4));
    // then: USD 10 per s per K outweighs any gain; USD 0.0001 per s per K does not
    expect(strict.decisions.T_R).toBeCloseTo(65, 5);
    expect(loose.decisions.T_R).toBeGreaterThan(66);
    expect(loose.objective).toBeGreaterThan(strict.objective);
  });

  test("reports the steady state's failure with a typed error, not a wrong number", () => {
    // given: a decision that is not a number
    const nlp = sequentialNlp(site);
    // then
    expect(() => nlp.evaluate([Number.NaN, 70])).toThrow(
      expect.objectContaining({ code: "DEMO_STEADY_STATE_FAILED" }),
    );
  });
});
