import { fileURLToPath } from "node:url";
import { beforeAll, describe, expect, test } from "vitest";
import { loadSiteModel, loadSiteModelFile } from "./load.js";
import { luFactor, luSolve } from "./lu.js";
import type { SiteModel } from "./site-model.js";
import { solveSteadyState, steadyStateSensitivity } from "./solve.js";

const fixture = (name: string): string =>
  fileURLToPath(new URL(`../../test/fixtures/sites/${name}`, import.meta.url));

let plant: SiteModel;
let approx: SiteModel;
beforeAll(async () => {
  plant = await loadSiteModelFile(fixture("williams-otto-plant.yaml"));
  approx = await loadSiteModelFile(fixture("williams-otto-model.yaml"));
});

// Source: Williams & Otto (1960), "A generalized chemical processing model for the investigation of
// computer control", AIEE Trans. Part I 79(5); economics per Marchetti, Chachuat & Bonvin (2009),
// "Modifier-adaptation methodology for real-time optimization", Ind. Eng. Chem. Res. 48(13).
// Spot values reproduced (SciPy 1.17) from the published equations, CHECK-VALUES.md §1.
const SPOTS = [
  { fb: 4.0, tr: 75, x: [0.147061, 0.391236, 0.031357, 0.257254, 0.066697, 0.106395], profit: 151.0994 },
  { fb: 4.5, tr: 85, x: [0.104906, 0.385284, 0.019562, 0.28397, 0.09644, 0.109838], profit: 187.3835 },
  { fb: 6.0, tr: 100, x: [0.052401, 0.444533, 0.00817, 0.28185, 0.108182, 0.104864], profit: 170.3505 },
] as const;
const ORDER = ["XA", "XB", "XC", "XE", "XG", "XP"] as const;

describe("solveSteadyState on the Williams–Otto plant", () => {
  test.each(SPOTS)("reproduces every mass fraction and the profit at FB=$fb kg/s, T_R=$tr °C", (spot) => {
    // given the three-reaction plant; when it is solved at the spot's decisions
    const result = solveSteadyState(plant, { decisions: { FB: spot.fb, T_R: spot.tr } });
    // then it converges and matches the reproduced values (Source: as SPOTS above, reproduced)
    expect(result.converged).toBe(true);
    ORDER.forEach((symbol, i) => {
      expect(Math.abs((result.unknowns[symbol] as number) - spot.x[i]!)).toBeLessThan(1e-5);
    });
    expect(Math.abs((result.outputs.profit as number) - spot.profit)).toBeLessThan(1e-3);
    expect(result.residualNorm).toBeLessThan(1e-9);
  });

  test("earns 190.98 $/s at the published optimum and 190.9803 $/s at the reproduced one", () => {
    // given the plant at the published optimum
    const published = solveSteadyState(plant, { decisions: { FB: 4.787, T_R: 89.7 } });
    // Source: Marchetti, Chachuat & Bonvin (2009), Ind. Eng. Chem. Res. 48(13), plant optimum 190.98 $/s
    // (published; recalled from memory in CHECK-VALUES.md §1).
    expect(Math.abs((published.outputs.profit as number) - 190.98)).toBeLessThan(0.01);
    // when solved at the reproduced optimum
    const reproduced = solveSteadyState(plant, { decisions: { FB: 4.78742, T_R: 89.7039 } });
    // Source: same problem, optimum reproduced with SciPy 1.17 (CHECK-VALUES.md §1): φ* = 190.9803,
    // XA 0.087465, XP 0.109456.
    expect(Math.abs((reproduced.outputs.profit as number) - 190.9803)).toBeLessThan(1e-4);
    expect(Math.abs((reproduced.unknowns.XA as number) - 0.087465)).toBeLessThan(1e-6);
    expect(Math.abs((reproduced.unknowns.XP as number) - 0.109456)).toBeLessThan(1e-6);
  });

  test("the reproduced optimum is a stationary point of the reduced profit", () => {
    // given the plant at the reproduced optimum (interior in both decisions)
    const r = solveSteadyState(plant, { decisions: { FB: 4.78742, T_R: 89.7039 } });
    // when the reduced gradient is built from the sensitivity dX/du and the explicit gradients
    const s = steadyStateSensitivity(plant, r.point, "decisions") as Float64Array;
    const gx = plant.objectiveGradient(r.point, "unknowns");
    const gu = plant.objectiveGradient(r.point, "decisions");
    const reduced = [0, 1].map(
      (c) =>
        (gu[c] as number) +
        ORDER.reduce((acc, _, i) => acc + (gx[i] as number) * (s[i * 2 + c] as number), 0),
    );
    // then it is near zero: the optimum is given to 5-6 digits (Source: CHECK-VALUES.md §1, reproduced)
    expect(Math.abs(reduced[0] as number)).toBeLessThan(0.05);
    expect(Math.abs(reduced[1] as number)).toBeLessThan(0.01);
    // and away from it the profit gradient in FB is clearly nonzero (the check can fail)
    const off = solveSteadyState(plant, { decisions: { FB: 4.0, T_R: 89.7039 } });
    const s2 = steadyStateSensitivity(plant, off.point, "decisions") as Float64Array;
    const gx2 = plant.objectiveGradient(off.point, "unknowns");
    const gu2 = plant.objectiveGradient(off.point, "decisions");
    const dFB =
      (gu2[0] as number) + ORDER.reduce((acc, _, i) => acc + (gx2[i] as number) * (s2[i * 2] as number), 0);
    expect(dFB).toBeGreaterThan(1);
  });

  test("the steady-state sensitivity agrees with re-solving at perturbed decisions", () => {
    // given a converged point
    const base = solveSteadyState(plant, { decisions: { FB: 4.5, T_R: 85 } });
    const s = steadyStateSensitivity(plant, base.point, "decisions") as Float64Array;
    // when T_R is moved ±1e-3 °C and the plant is re-solved
    const up = solveSteadyState(plant, { decisions: { FB: 4.5, T_R: 85.001 } });
    const down = solveSteadyState(plant, { decisions: { FB: 4.5, T_R: 84.999 } });
    // then the central difference matches the implicit-function sensitivity
    ORDER.forEach((symbol, i) => {
      const fd = ((up.unknowns[symbol] as number) - (down.unknowns[symbol] as number)) / 0.002;
      expect(s[i * 2 + 1] as number).toBeCloseTo(fd, 7);
    });
  });
});

describe("solveSteadyState on the two-reaction model", () => {
  test("converges at nominal η and earns less than the plant near the plant optimum", () => {
    // given the approximate model at nominal η1, η2 (Marchetti et al. 2009, published nominal values)
    const model = solveSteadyState(approx, { decisions: { FB: 4.78742, T_R: 89.7039 } });
    const truth = solveSteadyState(plant, { decisions: { FB: 4.78742, T_R: 89.7039 } });
    // then it converges, its mass fractions sum to one, and it mispredicts the plant (the mismatch RTO must handle)
    expect(model.converged).toBe(true);
    const sum = Object.values(model.unknowns).reduce((a, b) => a + b, 0);
    expect(sum).toBeCloseTo(1, 10);
    expect(Math.abs((model.outputs.profit as number) - (truth.outputs.profit as number))).toBeGreaterThan(1);
  });

  test("solves for any η within the parameter bounds and moves XP the way the chemistry says", () => {
    // given a doubled η2 (faster loss of P to G)
    const nominal = solveSteadyState(approx, { decisions: { FB: 4, T_R: 80 } });
    const faster = solveSteadyState(approx, { decisions: { FB: 4, T_R: 80 }, parameters: { eta2: 8.62e13 } });
    // then both converge and XP falls while XG rises
    expect(faster.converged && nominal.converged).toBe(true);
    expect(faster.unknowns.XP as number).toBeLessThan(nominal.unknowns.XP as number);
    expect(faster.unknowns.XG as number).toBeGreaterThan(nominal.unknowns.XG as number);
  });
});

describe("solveSteadyState failure reasons", () => {
  const tiny = (equation: string, unknown = "{ symbol: x, unit: '1', initial: 1 }"): SiteModel =>
    loadSiteModel(
      [
        "site: { id: t, name: T }",
        "tags: [{ id: FC-1, variable: u, unit: '1', sigma: 1, range: { min: 0, max: 10 } }]",
        "decisions: [{ symbol: u, unit: '1', setpointTag: FC-1, min: 0, max: 10, initial: 1 }]",
        "model:",
        `  unknowns: [${unknown}]`,
        `  equations: [{ name: e, expression: "${equation}" }]`,
        "objective: { sense: min, expression: x, unit: '1' }",
      ].join("\n"),
      "tiny.yaml",
    );

  test("reports a singular Jacobian instead of dividing by zero", () => {
    // given x² = u started at x = 0, where the derivative vanishes
    const result = solveSteadyState(tiny("x^2 - u", "{ symbol: x, unit: '1', initial: 0 }"));
    expect(result.converged).toBe(false);
    expect(result.reason).toBe("singular-jacobian");
  });

  test("reports non-finite residuals at the start", () => {
    // given log(x) started at x = -1
    const result = solveSteadyState(tiny("log(x) - u", "{ symbol: x, unit: '1', initial: -1 }"));
    expect(result.reason).toBe("non-finite");
  });

  test("reports out-of-bounds when the root lies beyond an unknown's bound", () => {
    // given x = u + 5 with x ≤ 2
    const result = solveSteadyState(tiny("x - u - 5", "{ symbol: x, unit: '1', initial: 1, max: 2 }"));
    expect(result.converged).toBe(false);
    expect(result.reason).toBe("out-of-bounds");
    expect(result.unknowns.x).toBeLessThanOrEqual(2);
  });

  test("reports max-iterations when given too few iterations", () => {
    const result = solveSteadyState(plant, { decisions: { FB: 6, T_R: 100 } }, { maxIterations: 1 });
    expect(result.reason).toBe("max-iterations");
  });

  test("refuses a decision the model does not have", () => {
    expect(() => solveSteadyState(plant, { decisions: { FBX: 4 } })).toThrow(
      expect.objectContaining({ code: "MODEL_INPUT_INVALID" }),
    );
  });
});

describe("luFactor / luSolve", () => {
  test("solve a system that needs row pivoting", () => {
    // given A = [[0,2,1],[1,1,1],[2,1,0]] (zero first pivot) and x = (1,2,3)
    const a = Float64Array.from([0, 2, 1, 1, 1, 1, 2, 1, 0]);
    const b = Float64Array.from([0 + 4 + 3, 1 + 2 + 3, 2 + 2 + 0]);
    const pivot = new Int32Array(3);
    // when factored and solved
    expect(luFactor(a, 3, pivot)).toBe(true);
    const x = luSolve(a, 3, pivot, b);
    // then x is recovered
    expect([...x].map((v) => Number(v.toFixed(12)))).toEqual([1, 2, 3]);
  });

  test("flags a singular matrix", () => {
    expect(luFactor(Float64Array.from([1, 2, 2, 4]), 2, new Int32Array(2))).toBe(false);
  });
});
