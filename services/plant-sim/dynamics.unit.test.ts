import { beforeAll, describe, expect, test } from "vitest";
import { loadSiteModelFile, type SiteModel, solveSteadyState } from "../model/index.js";
import type { StateForm } from "./dynamics.js";
import { PlantSimError } from "./errors.js";
import { createPlant, type PlantOptions } from "./plant.js";

const FIXTURE = new URL("../../test/fixtures/sites/williams-otto-plant.yaml", import.meta.url).pathname;
const W_KG = 2105;

/** Each species balance of the CSTR is a mass balance in kg/s; its capacity is the holdup W (kg). */
const CSTR_STATES: StateForm[] = [
  ["XA", "balance-A"],
  ["XB", "balance-B"],
  ["XC", "balance-C"],
  ["XE", "balance-E"],
  ["XG", "balance-G"],
  ["XP", "balance-P"],
].map(([unknown, equation]) => ({
  unknown: unknown as string,
  form: "capacity",
  equation: equation as string,
  capacity: W_KG,
}));

const FAST_LOOPS: PlantOptions["loops"] = {
  FB: { closedLoopTauS: 30, rampPerS: 0.01 },
  T_R: { closedLoopTauS: 60, rampPerS: 0.05 },
};

let model: SiteModel;
beforeAll(async () => {
  model = await loadSiteModelFile(FIXTURE);
});

const X = ["XA", "XB", "XC", "XE", "XG", "XP"];

describe("plant dynamics on the Williams–Otto reactor", () => {
  test("starts at the steady state of its initial decisions and stays there", () => {
    // given the plant at FB = 4 kg/s, T_R = 75 °C
    const plant = createPlant(model, { states: CSTR_STATES, loops: FAST_LOOPS });
    const before = plant.values();
    // when an hour passes with nothing changed
    plant.step(3600);
    const after = plant.values();
    // then no state has moved by more than the integrator tolerance
    for (const s of X) expect(Math.abs((after[s] as number) - (before[s] as number))).toBeLessThan(1e-7);
  });

  test("reaches the steady state of new decisions to solver tolerance and the balances close there", () => {
    // given the plant at rest, and the steady state the model solves at FB = 5, T_R = 85
    const plant = createPlant(model, { states: CSTR_STATES, loops: FAST_LOOPS });
    const target = solveSteadyState(model, { decisions: { FB: 5, T_R: 85 } });
    expect(target.converged).toBe(true);
    // when the setpoints step and six simulated hours pass (about 60 residence times W/F)
    expect(plant.setTarget("FB", 5).ok).toBe(true);
    expect(plant.setTarget("T_R", 85).ok).toBe(true);
    plant.step(6 * 3600);
    const v = plant.values();
    // then every mass fraction equals the solved steady state to 1e-8
    for (const s of X) expect(Math.abs((v[s] as number) - (target.unknowns[s] as number))).toBeLessThan(1e-8);
    // and the species fractions sum to one (the species balances add up to the total mass balance)
    // Source: Williams & Otto (1960), AIEE Trans. I 79(5):458–473 — the reactions conserve mass (published).
    expect(Math.abs(X.reduce((a, s) => a + (v[s] as number), 0) - 1)).toBeLessThan(1e-8);
    // and the measured flows close the total-mass balance FA + FB − F = 0 (in model units, kg/s)
    const tags = new Map(plant.trueTagValues().map((t) => [t.tag, t.value]));
    const faKgPerS = (tags.get("FI-101") as number) / 3.6; // t/h → kg/s
    expect(
      Math.abs(faKgPerS + (tags.get("FIC-102") as number) - (tags.get("FI-110") as number)),
    ).toBeLessThan(1e-9);
  });

  test("moves the decisions no faster than their ramp limits", () => {
    // given FB ramped at 0.01 kg/s per s
    const plant = createPlant(model, { states: CSTR_STATES, loops: FAST_LOOPS });
    plant.setTarget("FB", 6);
    // when 50 s pass
    plant.step(50);
    // then the working setpoint moved 0.5 kg/s and the flow itself less
    const fb = plant.loops().find((l) => l.symbol === "FB");
    expect(fb?.sp).toBeCloseTo(4.5, 10);
    expect(fb?.pv).toBeLessThan(4.5);
  });

  test("reaches the same steady state when a state follows a first-order lag instead", () => {
    // given XG as a lag state (τ = 200 s) and the others as balances
    const states = CSTR_STATES.map((s) =>
      s.unknown === "XG" ? ({ unknown: "XG", form: "lag", tauS: 200 } as const) : s,
    );
    const plant = createPlant(model, { states, loops: FAST_LOOPS, holdS: 30 });
    const target = solveSteadyState(model, { decisions: { FB: 4.5, T_R: 80 } });
    // when the decisions move and five hours pass
    plant.setTarget("FB", 4.5);
    plant.setTarget("T_R", 80);
    plant.step(5 * 3600);
    // then the plant sits on the solved steady state
    const v = plant.values();
    for (const s of X) expect(Math.abs((v[s] as number) - (target.unknowns[s] as number))).toBeLessThan(1e-7);
    expect(plant.stats().lagSolves).toBeGreaterThan(0);
  });

  test("follows a fouling-type drift and a daily disturbance cycle", () => {
    // given k10 losing 30 % with τ = 2 days, and FA swinging ±0.1 kg/s over a day; and a twin without the drift
    const tau = 2 * 86400;
    const disturbances = [{ symbol: "FA", amplitude: 0.1, periodS: 86400 }];
    const plant = createPlant(model, {
      states: CSTR_STATES,
      drifts: [{ symbol: "k10", kind: "fouling", fraction: 0.3, tauS: tau }],
      disturbances,
      holdS: 60,
    });
    const twin = createPlant(model, { states: CSTR_STATES, disturbances, holdS: 60 });
    // when a quarter day passes, then two days
    plant.step(86400 / 4);
    const q = plant.values();
    plant.step(2 * 86400 - 86400 / 4);
    twin.step(2 * 86400);
    const v = plant.values();
    // then FA is at the top of its cycle after a quarter day, and k10 has lost 30 % · (1 − 1/e) after τ
    expect(q.FA).toBeCloseTo(1.8275 + 0.1, 10);
    expect(v.k10).toBeCloseTo(1.6599e6 * (1 - 0.3 * (1 - Math.exp(-1))), 3);
    // and the plant followed: with a slower first reaction less A is converted than in the twin
    expect(v.XA as number).toBeGreaterThan((twin.values().XA as number) + 0.005);
  });

  test("refuses setpoints outside the plant's limits and converts units of a tag setpoint", () => {
    const plant = createPlant(model, { states: CSTR_STATES, loops: FAST_LOOPS });
    // when asked for FB = 7 kg/s (max 6)
    const out = plant.setTarget("FB", 7);
    // then it refuses with a limit code
    expect(out.ok).toBe(false);
    expect(out.ok ? "" : out.code).toBe("PLANT_LIMIT");
    // and a setpoint of 18 000 kg/h on FIC-102.SP becomes 5 kg/s; 358.15 K on TIC-103 becomes 85 °C
    expect(plant.setTargetByTag("FIC-102.SP", 18000, "kg/h").ok).toBe(true);
    expect(plant.setTargetByTag("TIC-103", 358.15, "K").ok).toBe(true);
    const loops = new Map(plant.loops().map((l) => [l.symbol, l.target]));
    expect(loops.get("FB")).toBeCloseTo(5, 12);
    expect(loops.get("T_R")).toBeCloseTo(85, 10);
    expect(plant.setTargetByTag("FIC-102", 1, "degC").ok).toBe(false);
  });

  test("trips above its trip temperature, drives to safe setpoints and refuses more until reset", () => {
    // given a trip at T_R > 95 °C
    const plant = createPlant(model, {
      states: CSTR_STATES,
      loops: { T_R: { closedLoopTauS: 30, rampPerS: 1 } },
      trips: [{ symbol: "T_R", above: 95 }],
    });
    // when the temperature is driven to 99 °C
    plant.setTarget("T_R", 99);
    plant.step(600);
    // then the plant tripped, heads back to 75 °C, and refuses new setpoints
    expect(plant.tripped?.symbol).toBe("T_R");
    expect(plant.loops().find((l) => l.symbol === "T_R")?.target).toBe(75);
    const r = plant.setTarget("T_R", 80);
    expect(r.ok ? "" : r.code).toBe("PLANT_TRIPPED");
    plant.resetTrip();
    expect(plant.setTarget("T_R", 80).ok).toBe(true);
  });

  test("refuses a state form whose sign would make the state run away", () => {
    const flipped = CSTR_STATES.map((s) => (s.unknown === "XA" ? { ...s, sign: -1 as const } : s));
    expect(() => createPlant(model, { states: flipped })).toThrow(/XA.*run away/);
  });

  test("refuses a config that leaves an unknown without dynamics", () => {
    expect(() => createPlant(model, { states: CSTR_STATES.slice(1) })).toThrow(PlantSimError);
  });
});
