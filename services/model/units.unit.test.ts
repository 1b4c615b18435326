import type { MathJsInstance } from "mathjs";
import { describe, expect, test } from "vitest";
import { ExprIssue, inferDim, parseEquation, parseExpression, toJs } from "./expr.js";
import { affineConversion, newMath, parseUnit, type UnitInfo } from "./units.js";

function setup(units: Record<string, string>): { math: MathJsInstance; map: Map<string, UnitInfo> } {
  const math = newMath();
  const map = new Map<string, UnitInfo>();
  for (const [symbol, text] of Object.entries(units)) map.set(symbol, parseUnit(math, text) as UnitInfo);
  return { math, map };
}

const issue = (work: () => unknown): ExprIssue => {
  try {
    work();
  } catch (err) {
    if (err instanceof ExprIssue) return err;
    throw err;
  }
  throw new Error("no issue raised");
};

describe("unit inference", () => {
  test("an Arrhenius term with T in °C plus a number is dimensionless inside exp()", () => {
    // given E in K and T in °C; when exp(-E/(T + 273.15)) is inferred; then it is accepted
    const { math, map } = setup({ E: "K", T: "degC", k0: "1/s" });
    const d = inferDim(math, parseExpression(math, "k0 * exp(-E / (T + 273.15))"), map);
    expect(d.free).toBe(false);
    if (!d.free) expect(d.dims.slice(0, 3)).toEqual([0, 0, -1]);
  });

  test("a currency becomes a new base unit and keeps its dimension apart", () => {
    // given prices in USD/kg and flows in kg/s
    const { math, map } = setup({ p: "USD/kg", F: "kg/s", q: "kg/s" });
    // then p·F is USD/s and cannot be added to a flow
    const bad = issue(() => inferDim(math, parseExpression(math, "p * F + q"), map));
    expect(bad.code).toBe("MODEL_UNITS_MISMATCH");
    expect(bad.message).toContain("USD");
  });

  test("refuses a dimensioned quantity raised to a variable power, accepts a constant power", () => {
    const { math, map } = setup({ L: "m", n: "1" });
    expect(issue(() => inferDim(math, parseExpression(math, "L^n"), map)).code).toBe("MODEL_UNITS_MISMATCH");
    const d = inferDim(math, parseExpression(math, "sqrt(L^(2*2))"), map);
    if (!d.free) expect(d.dims[1]).toBe(2);
  });

  test("rejects an unparseable unit with a reason", () => {
    const math = newMath();
    expect(typeof parseUnit(math, "kg//s")).toBe("string");
  });

  test("converts °F to °C and t/h to kg/s as affine maps", () => {
    const math = newMath();
    const c = parseUnit(math, "degC") as UnitInfo;
    const f = parseUnit(math, "degF") as UnitInfo;
    const m = affineConversion(f, c);
    // 212 °F = 100 °C and 32 °F = 0 °C (unit definitions)
    expect(m.scale * 212 + m.offset).toBeCloseTo(100, 10);
    expect(m.scale * 32 + m.offset).toBeCloseTo(0, 10);
    const flow = affineConversion(parseUnit(math, "t/h") as UnitInfo, parseUnit(math, "kg/s") as UnitInfo);
    expect(flow.scale * 3.6).toBeCloseTo(1, 12);
  });
});

describe("expression parsing and code generation", () => {
  test("splits an equation on its single '=' and refuses '<=' in an equation", () => {
    const math = newMath();
    expect(parseEquation(math, "a = b + 1").rhs?.toString()).toBe("b + 1");
    expect(issue(() => parseEquation(math, "a <= b")).code).toBe("MODEL_EXPRESSION_UNSUPPORTED");
  });

  test("refuses assignments, matrices and unknown functions", () => {
    const math = newMath();
    for (const text of ["f(x) = x", "[1, 2]", "foo(x)", "x ? 1 : 2"]) {
      expect(["MODEL_EXPRESSION_UNSUPPORTED", "MODEL_EXPRESSION_PARSE"]).toContain(
        issue(() => parseExpression(math, text)).code,
      );
    }
  });

  test("folds the zeros and ones of an unsimplified derivative", () => {
    const math = newMath();
    const d = math.derivative(parseExpression(math, "3 * x + y"), "x", { simplify: false });
    const js = toJs(
      d,
      new Map([
        ["x", 0],
        ["y", 1],
      ]),
    );
    expect(js).toBe("(3)");
  });
});
