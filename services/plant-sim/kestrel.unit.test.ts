import { readFileSync } from "node:fs";
import { beforeAll, describe, expect, test } from "vitest";
import { parse } from "yaml";
import { loadSiteModelFile, type SiteModel, solveSteadyState } from "../model/index.js";
import type { PlantSimOptions } from "./config.js";
import { createSimulator } from "./sim.js";

const ROOT = new URL("../../", import.meta.url).pathname;
const cfg = (
  parse(readFileSync(`${ROOT}services/plant-sim/kestrel-r1.config.yaml`, "utf8")) as {
    plantSim: PlantSimOptions;
  }
).plantSim;
const SPECIES = ["xA", "xB", "xP", "xW", "xD"];

let model: SiteModel;
beforeAll(async () => {
  model = await loadSiteModelFile(`${ROOT}${cfg.plantModel}`);
});

describe("the demo plant kestrel-r1 under plant-sim", () => {
  test("settles at the plant's own steady state after a move and its balances close", () => {
    // given the plant with its demo config (no drifts or disturbances, to compare with a fixed solve)
    const sim = createSimulator(model, { states: cfg.states, ...(cfg.loops ? { loops: cfg.loops } : {}) });
    const target = solveSteadyState(model, { decisions: { FB: 2.2, T_R: 75 } });
    expect(target.converged).toBe(true);
    // when FB and T_R are moved and eight simulated hours pass
    expect(sim.plant.setTarget("FB", 2.2).ok).toBe(true);
    expect(sim.plant.setTarget("T_R", 75).ok).toBe(true);
    sim.step(8 * 3600);
    const v = sim.plant.values();
    // then every unknown (species, duty, return temperature) sits on the solved steady state
    for (const s of SPECIES)
      expect(Math.abs((v[s] as number) - (target.unknowns[s] as number))).toBeLessThan(1e-8);
    expect(Math.abs((v.Q as number) - (target.unknowns.Q as number))).toBeLessThan(1e-6);
    // and the species fractions add to one, and every model equation holds there
    expect(Math.abs(SPECIES.reduce((a, s) => a + (v[s] as number), 0) - 1)).toBeLessThan(1e-8);
    const point = model.newPoint();
    model.setBlock(point, "decisions", { FB: 2.2, T_R: 75 });
    model.setBlock(
      point,
      "unknowns",
      Object.fromEntries(model.unknowns.map((u) => [u.symbol, v[u.symbol] as number])),
    );
    const res = model.residuals(point);
    expect(Math.max(...Array.from(res, Math.abs))).toBeLessThan(1e-5);
  });

  test("runs a simulated week with fouling and the weather, and UA follows its trajectory", () => {
    // given the full demo config with 60 s holds
    const sim = createSimulator(model, { ...cfg, holdS: 60, periodS: 600 });
    // when a simulated week passes
    const batches = sim.step(7 * 86400);
    const v = sim.plant.values();
    // then UA has lost 60 % · (1 − e^(−1/3)) and the plant never tripped
    expect(v.UA).toBeCloseTo(60 * (1 - 0.6 * (1 - Math.exp(-(7 * 86400) / 1814400))), 8);
    expect(sim.plant.tripped).toBeUndefined();
    // and a batch came every 600 s, carrying every tag
    expect(batches).toHaveLength(7 * 144);
    const last = batches.at(-1);
    expect(last && !last.lost ? last.values.length : 0).toBe(model.tags.length);
  });
});
