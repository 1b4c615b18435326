import { fileURLToPath } from "node:url";
import { describe, expect, test } from "vitest";
import { loadSiteModel, loadSiteModelFile } from "./load.js";
import type { ModelLogEntry, SiteModel, WrtBlock } from "./site-model.js";
import { solveSteadyState } from "./solve.js";

const fixture = (name: string): string =>
  fileURLToPath(new URL(`../../test/fixtures/sites/${name}`, import.meta.url));

/** Central differences of f over one block, with a relative step (common practice, no source). */
function finiteDifference(
  model: SiteModel,
  point: Float64Array,
  wrt: WrtBlock,
  f: (p: Float64Array) => Float64Array,
): Float64Array {
  const { offset, symbols } = model.layout.blocks[wrt];
  const rows = f(point).length;
  const out = new Float64Array(rows * symbols.length);
  symbols.forEach((_, c) => {
    const slot = offset + c;
    const x = point[slot] as number;
    const h = 1e-6 * Math.max(1, Math.abs(x));
    const p = point.slice();
    p[slot] = x + h;
    const up = f(p);
    p[slot] = x - h;
    const down = f(p);
    for (let r = 0; r < rows; r += 1)
      out[r * symbols.length + c] = ((up[r] as number) - (down[r] as number)) / (2 * h);
  });
  return out;
}

function expectClose(symbolic: Float64Array, numeric: Float64Array, rel: number): void {
  expect(symbolic.length).toBe(numeric.length);
  const scale = Math.max(...[...numeric].map(Math.abs), 1e-300);
  for (let k = 0; k < symbolic.length; k += 1) {
    expect(Math.abs((symbolic[k] as number) - (numeric[k] as number))).toBeLessThanOrEqual(rel * scale);
  }
}

describe("symbolic derivatives agree with central differences", () => {
  test.each(["williams-otto-plant.yaml", "williams-otto-model.yaml"])(
    "for residuals, outputs, objective and constraints of %s",
    async (file) => {
      // given a solved Williams–Otto point (and a constraint block added for coverage)
      const model = await loadSiteModelFile(fixture(file));
      const { point } = solveSteadyState(model, { decisions: { FB: 4.6, T_R: 87 } });
      for (const wrt of ["unknowns", "decisions", "parameters"] as const) {
        if (model.layout.blocks[wrt].symbols.length === 0) continue;
        // when the symbolic Jacobians are compared with central differences of the compiled values
        // then they agree to ~1e-7 of the largest entry (the difference quotient's own error)
        expectClose(
          model.jacobian(point, wrt),
          finiteDifference(model, point, wrt, (p) => model.residuals(p)),
          1e-7,
        );
        expectClose(
          model.outputJacobian(point, wrt),
          finiteDifference(model, point, wrt, (p) => model.evalOutputs(p)),
          1e-7,
        );
        expectClose(
          model.objectiveGradient(point, wrt),
          finiteDifference(model, point, wrt, (p) => Float64Array.of(model.evalObjective(p))),
          1e-7,
        );
      }
      // and no entry needed a numeric fallback
      expect(model.numericDerivatives).toEqual([]);
    },
  );

  test("constraint Jacobians follow the g ≤ 0 convention for <= and >=", () => {
    // given constraints written both ways round
    const model = loadSiteModel(SMALL_WITH_CONSTRAINTS, "small.yaml");
    const point = model.newPoint();
    model.setBlock(point, "decisions", { u: 2 });
    model.setBlock(point, "unknowns", { x: 3 });
    // when evaluated: g1 = x^2 - 10 (x^2 <= 10), g2 = 1 - u*x (u*x >= 1)
    const g = model.evalConstraints(point);
    expect([...g]).toEqual([9 - 10, 1 - 6]);
    // then the Jacobians are the derivatives of g, matching differences
    expectClose(
      model.constraintJacobian(point, "unknowns"),
      finiteDifference(model, point, "unknowns", (p) => model.evalConstraints(p)),
      1e-8,
    );
    expect([...model.constraintJacobian(point, "decisions")]).toEqual([0, -3]);
    expect(model.constraints.map((c) => [c.name, c.kind, c.sense, c.penalty])).toEqual([
      ["cap", "hard", "le", undefined],
      ["floor", "soft", "le", 5],
    ]);
  });

  test("a function without a symbolic derivative falls back to differences and is logged", () => {
    // given an objective with max(), which mathjs derivative() does not handle
    const notes: ModelLogEntry[] = [];
    const model = loadSiteModel(
      SMALL_WITH_CONSTRAINTS.replace("expression: x * u", 'expression: "max(x * u, 1)"'),
      "small.yaml",
      { logger: (entry) => notes.push(entry) },
    );
    const point = model.newPoint();
    model.setBlock(point, "decisions", { u: 2 });
    model.setBlock(point, "unknowns", { x: 3 });
    // when the objective gradient is taken
    const grad = model.objectiveGradient(point, "unknowns");
    // then it is right (d(x·u)/dx = u = 2 where x·u > 1) and the fallback was reported with its place
    expect(grad[0]).toBeCloseTo(2, 8);
    expect(notes.map((n) => [n.code, n.at.path])).toContainEqual([
      "MODEL_DERIVATIVE_NUMERIC",
      "/objective/expression",
    ]);
    expect(model.numericDerivatives).toContain("objective / d x");
  });
});

const SMALL_WITH_CONSTRAINTS = `
site: { id: small, name: Small }
tags: [{ id: FC-1, variable: u, unit: "1", sigma: 1, range: { min: 0, max: 10 } }]
decisions: [{ symbol: u, unit: "1", setpointTag: FC-1, min: 0, max: 10, initial: 1 }]
model:
  unknowns: [{ symbol: x, unit: "1", initial: 1 }]
  equations: [{ name: e, expression: x - u - 1 = 0 }]
objective: { sense: max, expression: x * u, unit: "1" }
constraints:
  - { name: cap, expression: x^2 <= 10, kind: hard }
  - { name: floor, expression: u * x >= 1, kind: soft, penalty: 5 }
`;
