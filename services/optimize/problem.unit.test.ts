import { readFileSync } from "node:fs";
import { beforeAll, describe, expect, test } from "vitest";
import { loadSiteModel, loadSiteModelFile, type SiteModel } from "../model/index.js";
import { loadHighs } from "./lp.js";
import { buildSiteProblem, decisionBounds, isLinearSite } from "./problem.js";
import { solveNlp } from "./sqp.js";
import { type LpCache, optimizeOffline, runOptimization } from "./stage.js";

const SITES = new URL("../../test/fixtures/sites/", import.meta.url).pathname;
const plantText = readFileSync(`${SITES}williams-otto-plant.yaml`, "utf8");
const tinyText = readFileSync(`${SITES}tiny-valid.yaml`, "utf8");
/** The plant model with extra constraints appended (the fixture has none). */
const plantWith = (constraints: string): SiteModel =>
  loadSiteModel(`${plantText}\nconstraints:\n${constraints}\n`, "williams-otto-plant+constraints.yaml");
const tinyWith = (constraints: string): SiteModel =>
  loadSiteModel(`${tinyText}\nconstraints:\n${constraints}\n`, "tiny+constraints.yaml");

let plant: SiteModel;
let model: SiteModel;
let tiny: SiteModel;
beforeAll(async () => {
  plant = await loadSiteModelFile(`${SITES}williams-otto-plant.yaml`);
  model = await loadSiteModelFile(`${SITES}williams-otto-model.yaml`);
  tiny = await loadSiteModelFile(`${SITES}tiny-valid.yaml`);
});

const proposed = (r: ReturnType<typeof runOptimization>) => {
  if (r.status !== "proposed") throw new Error(`expected a proposal, got ${JSON.stringify(r.reasons)}`);
  return r.proposal;
};

describe("the NLP built from a site model", () => {
  test("finds the Williams–Otto plant optimum through the site model (sequential)", () => {
    // given the three-reaction plant model at (4 kg/s, 75 °C), move limits off
    const built = buildSiteProblem(plant, { current: { FB: 4, T_R: 75 } }, { moveLimits: false });
    if (!built.ok) throw new Error(built.message);
    // when
    const r = solveNlp(built.nlp, { tolerance: 1e-10 });
    // then
    expect(r.status).toBe("optimal");
    // Source: Marchetti, Chachuat & Bonvin (2009), Ind. Eng. Chem. Res. 48(13), plant optimum (published, from memory);
    // reproduced (SciPy) 4.78742 kg/s, 89.7039 °C, 190.9803 $/s — CHECK-VALUES.md §1
    expect(r.x[0]).toBeCloseTo(4.78742, 4);
    expect(r.x[1]).toBeCloseTo(89.7039, 3);
    expect(r.f).toBeCloseTo(190.9803, 3);
  });

  test("gives the same optimum in the simultaneous formulation", () => {
    // given
    const seq = proposed(
      runOptimization({ model: plant, context: { current: { FB: 4, T_R: 75 } } }, { moveLimits: false }),
    );
    // when
    const sim = proposed(
      runOptimization(
        { model: plant, context: { current: { FB: 4, T_R: 75 } } },
        { moveLimits: false, formulation: "simultaneous" },
      ),
    );
    // then
    expect(sim.formulation).toBe("simultaneous");
    sim.setpoints.forEach((s, j) => {
      expect(Math.abs(s.proposed - seq.setpoints[j]!.proposed)).toBeLessThan(
        1e-5 * (1 + Math.abs(s.proposed)),
      );
    });
    expect(sim.objective.proposed).toBeCloseTo(seq.objective.proposed, 7);
    // Source: Marchetti, Chachuat & Bonvin (2009), plant optimum 190.98 $/s (published, from memory; reproduced 190.9803)
    expect(sim.objective.proposed).toBeCloseTo(190.9803, 3);
  });

  test("puts the nominal two-reaction model's optimum where the reference puts it", () => {
    // when
    const p = proposed(
      runOptimization({ model, context: { current: { FB: 4, T_R: 75 } } }, { moveLimits: false }),
    );
    // then
    // Source: CHECK-VALUES.md §1, nominal model optimum FB 4.769 kg/s, T_R 78.22 °C (reproduced (SciPy) from the
    // published model of Marchetti, Chachuat & Bonvin 2009)
    expect(p.setpoints[0]!.proposed).toBeCloseTo(4.769, 2);
    expect(p.setpoints[1]!.proposed).toBeCloseTo(78.22, 1);
  });

  test("tightens decision bounds by the move limit and prices the binding one", () => {
    // given (4, 75) with move limits ±0.5 kg/s and ±3 °C: the temperature limit binds
    const a = proposed(runOptimization({ model: plant, context: { current: { FB: 4, T_R: 75 } } }));
    const b = proposed(runOptimization({ model: plant, context: { current: { FB: 4, T_R: 75.01 } } }));
    // then
    expect(a.setpoints[1]).toMatchObject({ lower: 72, upper: 78, upperFrom: "move-limit", proposed: 78 });
    const limit = a.active.find((x) => x.kind === "move-limit");
    expect(limit?.name).toBe("T_R ≤ 78 (move limit ±3 around 75)");
    expect(limit?.unit).toBe("USD/s per degC");
    // the shadow price predicts the gain of a 0.01 °C wider window
    const fd = (b.objective.proposed - a.objective.proposed) / 0.01;
    expect(limit!.shadowPrice).toBeGreaterThan(0);
    expect(Math.abs(fd - limit!.shadowPrice)).toBeLessThan(0.01 * limit!.shadowPrice);
  });

  test("reports a current point beyond a bound by more than a move as conflicting bounds", () => {
    // when FB runs at 7 kg/s (bound 6, move limit 0.5)
    const b = decisionBounds(plant, { FB: 7, T_R: 75 });
    const r = runOptimization({ model: plant, context: { current: { FB: 7, T_R: 75 } } });
    // then
    expect(b.ok).toBe(false);
    expect(r.status).toBe("aborted");
    if (r.status !== "aborted") return;
    expect(r.reasons[0]?.code).toBe("OPTIMIZE_INFEASIBLE");
    expect(r.conflicting).toEqual(["FB ≥ 6.5 (move limit ±0.5 around 7)", "FB ≤ 6 (bound)"]);
  });

  test("names the hard constraint and the bound that make the problem infeasible", () => {
    // given a hard minimum on FB above its upper bound
    const site = plantWith("  - { name: min-feed-b, expression: FB >= 6.5, kind: hard }");
    // when
    const r = runOptimization({ model: site, context: { current: { FB: 5.8, T_R: 80 } } });
    // then
    expect(r.status).toBe("aborted");
    if (r.status !== "aborted") return;
    expect(r.reasons[0]?.code).toBe("OPTIMIZE_INFEASIBLE");
    expect(r.conflicting).toContain("min-feed-b");
    expect(r.conflicting).toContain("FB ≤ 6 (bound)");
  });

  test("fails with a reason naming the constraint that returns NaN", () => {
    // given a constraint that is NaN wherever XG < 0.5 (square root of a negative number)
    const site = plantWith("  - { name: odd-root, expression: sqrt(XG - 0.5) <= 1, kind: hard }");
    // when
    const r = runOptimization({ model: site, context: { current: { FB: 4, T_R: 75 } } });
    // then
    expect(r.status).toBe("aborted");
    if (r.status !== "aborted") return;
    expect(r.reasons[0]?.code).toBe("OPTIMIZE_NAN");
    expect(r.reasons[0]?.message).toContain("odd-root");
  });

  test("meets a soft limit whose penalty is dear and prices it below the penalty", () => {
    // given a soft temperature limit below the optimum's 89.7 °C with a penalty of 100 $/s per °C
    const site = plantWith("  - { name: t-soft, expression: T_R <= 85, kind: soft, penalty: 100 }");
    const shifted = plantWith("  - { name: t-soft, expression: T_R <= 85.01, kind: soft, penalty: 100 }");
    // when
    const p = proposed(
      runOptimization({ model: site, context: { current: { FB: 4.5, T_R: 85 } } }, { moveLimits: false }),
    );
    const q = proposed(
      runOptimization({ model: shifted, context: { current: { FB: 4.5, T_R: 85 } } }, { moveLimits: false }),
    );
    // then: met exactly (exact L1 penalty), with the marginal value as its shadow price
    expect(p.status).toBe("optimal");
    expect(p.setpoints[1]!.proposed).toBeCloseTo(85, 6);
    const c = p.constraints[0]!;
    expect(c).toMatchObject({
      name: "t-soft",
      kind: "soft",
      active: true,
      unit: "degC",
      shadowPriceUnit: "USD/s per degC",
    });
    expect(c.shadowPrice).toBeGreaterThan(0);
    expect(c.shadowPrice).toBeLessThan(100);
    const fd = (q.objective.proposed - p.objective.proposed) / 0.01;
    expect(Math.abs(fd - c.shadowPrice)).toBeLessThan(0.01 * c.shadowPrice);
  });

  test("violates a soft limit whose penalty is cheap, and says so", () => {
    // given the same limit at 0.01 $/s per °C
    const site = plantWith("  - { name: t-soft, expression: T_R <= 85, kind: soft, penalty: 0.01 }");
    // when
    const p = proposed(
      runOptimization({ model: site, context: { current: { FB: 4.5, T_R: 85 } } }, { moveLimits: false }),
    );
    // then
    expect(p.status).toBe("soft-violated");
    expect(p.setpoints[1]!.proposed).toBeGreaterThan(89);
    expect(p.constraints[0]!.violation).toBeGreaterThan(4);
    expect(p.constraints[0]!.shadowPrice).toBeCloseTo(0.01, 6);
  });
});

describe("the LP path for a linear site", () => {
  test("detects linear and nonlinear sites", () => {
    expect(isLinearSite(tiny, {})).toBe(true);
    expect(isLinearSite(plant, {})).toBe(false);
  });

  test("javascript-lp-solver and HiGHS agree on the tiny tank, with the bound's shadow price", async () => {
    // given the tiny tank: profit = price·k·M with Fin = k·M, so profit = price·Fin, Fin ≤ 10 kg/s
    const highs = await loadHighs();
    // when
    const js = proposed(
      runOptimization(
        { model: tiny, context: { current: { Fin: 5 } } },
        { lpSolver: "javascript-lp-solver" },
      ),
    );
    const hi = proposed(
      runOptimization({ model: tiny, context: { current: { Fin: 5 } }, highs }, { lpSolver: "highs" }),
    );
    // then — analytic: Fin* = 10 kg/s, profit 2 USD/kg · 10 kg/s = 20 USD/s, ∂profit/∂Fin = price = 2 (derived here)
    for (const p of [js, hi]) {
      expect(p.formulation).toBe("lp");
      expect(p.setpoints[0]!.proposed).toBeCloseTo(10, 8);
      expect(p.objective.proposed).toBeCloseTo(20, 8);
      expect(p.objective.current).toBeCloseTo(10, 8);
      const bound = p.active.find((a) => a.kind === "bound");
      expect(bound?.name).toBe("Fin ≤ 10 (bound)");
      expect(bound?.shadowPrice).toBeCloseTo(2, 8);
    }
    expect(js.solver.name).toBe("javascript-lp-solver");
    expect(hi.solver.name).toBe("highs");
  });

  test("prices a binding hard constraint and re-solves warm in a kept HiGHS model", async () => {
    // given M ≤ 16 kg: Fin* = k·16 = 8 kg/s; the limit is worth price·k = 1 USD/s per kg
    const site = tinyWith("  - { name: m-max, expression: M <= 16, kind: hard }");
    const highs = await loadHighs();
    const cache: LpCache = {};
    try {
      // when solved twice with different prices into the same cache
      const first = proposed(
        runOptimization(
          { model: site, context: { current: { Fin: 5 } }, highs, lpCache: cache },
          { lpSolver: "highs" },
        ),
      );
      const second = proposed(
        runOptimization(
          { model: site, context: { current: { Fin: 5 }, prices: { price: 3 } }, highs, lpCache: cache },
          { lpSolver: "highs" },
        ),
      );
      // then — analytic (derived here): profit 2·0.5·16 = 16 USD/s; at price 3, 24 USD/s and 1.5 USD/s per kg
      expect(first.solver.warmStart).toBe(false);
      expect(second.solver.warmStart).toBe(true);
      expect(first.setpoints[0]!.proposed).toBeCloseTo(8, 8);
      expect(first.objective.proposed).toBeCloseTo(16, 8);
      expect(first.constraints[0]).toMatchObject({
        name: "m-max",
        active: true,
        unit: "kg",
        shadowPriceUnit: "USD/s per kg",
      });
      expect(first.constraints[0]!.shadowPrice).toBeCloseTo(1, 8);
      expect(second.objective.proposed).toBeCloseTo(24, 8);
      expect(second.constraints[0]!.shadowPrice).toBeCloseTo(1.5, 8);
      expect(second.kkt.stationarity).toBeLessThan(1e-9);
    } finally {
      cache.lp?.dispose();
    }
  });

  test("names the conflicting rows and bounds of an infeasible LP", () => {
    // given M ≥ 30 kg, impossible with Fin ≤ 10 kg/s and M = Fin / 0.5
    const site = tinyWith("  - { name: m-min, expression: M >= 30, kind: hard }");
    // when
    const r = runOptimization({ model: site, context: { current: { Fin: 5 } } });
    // then
    expect(r.status).toBe("aborted");
    if (r.status !== "aborted") return;
    expect(r.reasons[0]?.code).toBe("OPTIMIZE_INFEASIBLE");
    expect(r.conflicting).toContain("m-min");
    expect(r.conflicting).toContain("Fin ≤ 10 (bound)");
  });

  test("optimizeOffline answers a what-if without a bus", async () => {
    // when
    const r = await optimizeOffline({ model: plant, current: { FB: 4.5, T_R: 88 }, prices: { pB: 120 } });
    // then: a dearer feed B lowers the proposed FB compared with the reference prices
    const base = await optimizeOffline({ model: plant, current: { FB: 4.5, T_R: 88 } });
    expect(r.status).toBe("proposed");
    expect(base.status).toBe("proposed");
    if (r.status !== "proposed" || base.status !== "proposed") return;
    expect(r.proposal.setpoints[0]!.proposed).toBeLessThan(base.proposal.setpoints[0]!.proposed);
    expect(r.proposal.prices.find((p) => p.symbol === "pB")?.value).toBe(120);
  });
});
