import { readdirSync, readFileSync } from "node:fs";
import { basename } from "node:path";
import { fileURLToPath } from "node:url";
import { describe, expect, test } from "vitest";
import { MODEL_ERROR_CODES, SiteModelError } from "./errors.js";
import { loadSiteModel, loadSiteModelFile } from "./load.js";

const sites = fileURLToPath(new URL("../../test/fixtures/sites/", import.meta.url));
const readme = readFileSync(new URL("./README.md", import.meta.url), "utf8");

async function refusal(path: string): Promise<SiteModelError> {
  try {
    await loadSiteModelFile(path);
  } catch (err) {
    if (err instanceof SiteModelError) return err;
    throw err;
  }
  throw new Error(`${path} loaded but should have been refused`);
}

/** Each broken fixture, the code it must raise, and the line and JSON path it must name. */
const BROKEN: Record<string, { code: string; line: number; path: string }> = {
  "yaml-duplicate-key.yaml": { code: "MODEL_YAML_SYNTAX", line: 11, path: "/" },
  "schema-unknown-field.yaml": { code: "MODEL_SCHEMA", line: 4, path: "/tags/0/sigmaa" },
  "symbol-undeclared.yaml": {
    code: "MODEL_SYMBOL_UNDECLARED",
    line: 15,
    path: "/model/equations/0/expression",
  },
  "duplicate-symbol.yaml": { code: "MODEL_DUPLICATE_NAME", line: 9, path: "/constants/1/symbol" },
  "expression-parse.yaml": {
    code: "MODEL_EXPRESSION_PARSE",
    line: 15,
    path: "/model/equations/0/expression",
  },
  "units-mismatch.yaml": { code: "MODEL_UNITS_MISMATCH", line: 15, path: "/model/equations/0/expression" },
  "decision-unbounded.yaml": { code: "MODEL_DECISION_UNBOUNDED", line: 6, path: "/decisions/0" },
  "units-unknown.yaml": { code: "MODEL_UNITS_UNKNOWN", line: 10, path: "/prices/0/unit" },
  "not-square.yaml": { code: "MODEL_SQUARE", line: 15, path: "/model/equations" },
  "tag-unknown.yaml": { code: "MODEL_TAG_UNKNOWN", line: 6, path: "/decisions/0/setpointTag" },
  "exp-dimensioned.yaml": { code: "MODEL_UNITS_MISMATCH", line: 18, path: "/objective/expression" },
  "output-cycle.yaml": { code: "MODEL_OUTPUT_CYCLE", line: 15, path: "/model/outputs/0/expression" },
  "bounds-inverted.yaml": { code: "MODEL_BOUNDS_INVALID", line: 4, path: "/tags/0/range/min" },
};

describe("loadSiteModelFile refuses each broken fixture", () => {
  const files = readdirSync(`${sites}broken`).filter((f) => f.endsWith(".yaml"));

  test("every broken fixture has an expectation, and there are at least ten", () => {
    expect(files.sort()).toEqual(Object.keys(BROKEN).sort());
    expect(files.length).toBeGreaterThanOrEqual(10);
  });

  test.each(Object.entries(BROKEN))("%s fails with its code, line and field", async (file, want) => {
    // given a fixture with one deliberate fault; when loaded
    const err = await refusal(`${sites}broken/${file}`);
    // then the error carries the code and spot, and the message names file:line and the JSON path
    expect(err.code).toBe(want.code);
    expect(err.at).toMatchObject({ line: want.line, path: want.path });
    expect(err.message).toContain(`${file}:${want.line}:`);
    if (want.path !== "/") expect(err.message).toContain(want.path);
  });
});

describe("loadSiteModel", () => {
  const valid = readFileSync(`${sites}tiny-valid.yaml`, "utf8");

  test("loads the minimal model with policy defaults filled in", () => {
    const model = loadSiteModel(valid, "tiny-valid.yaml");
    expect(model.site.id).toBe("tiny");
    // Source: Cao & Rhinehart (1995), J. Process Control 5(6), recommended λ1 = 0.2, λ2 = λ3 = 0.1 (published)
    expect([model.steadyState.lambda1, model.steadyState.lambda2, model.steadyState.lambda3]).toEqual([
      0.2, 0.1, 0.1,
    ]);
    expect(model.validation.requireApproval).toBe(true);
  });

  test("refuses malformed YAML with the line of the fault", () => {
    // given an unclosed flow map on line 8 (kept inline: a fixture this broken upsets the formatter)
    const text = valid.replace("value: 0.5 }", "value: 0.5");
    expect(() => loadSiteModel(text, "bad.yaml")).toThrow(
      expect.objectContaining({
        code: "MODEL_YAML_SYNTAX",
        message: expect.stringMatching(/^bad\.yaml:\d+: YAML/),
      }),
    );
  });

  test("returns a deeply frozen model", () => {
    const model = loadSiteModel(valid, "tiny-valid.yaml");
    expect(Object.isFrozen(model)).toBe(true);
    expect(Object.isFrozen(model.decisions[0])).toBe(true);
    expect(Object.isFrozen(model.document.model.equations)).toBe(true);
    expect(() => (model.layout.slots as Map<string, number>).set("z", 1)).toThrow(TypeError);
  });

  test("names the field of a schema error deep in a block-style document", () => {
    // given a constraint declared soft without its penalty, on line 21
    const text = `${valid}constraints:\n  - name: cap\n    kind: soft\n    expression: M <= 5\n`;
    try {
      loadSiteModel(text, "x.yaml");
      expect.unreachable();
    } catch (err) {
      expect(err).toBeInstanceOf(SiteModelError);
      expect((err as SiteModelError).code).toBe("MODEL_SCHEMA");
      expect((err as SiteModelError).at).toMatchObject({ line: 21, path: "/constraints/0" });
      expect((err as SiteModelError).message).toContain("penalty");
    }
  });

  test("refuses non-finite numbers and over-long strings by schema", () => {
    expect(() => loadSiteModel(valid.replace("value: 0.5", "value: .inf"), "x.yaml")).toThrow(
      expect.objectContaining({
        code: "MODEL_SCHEMA",
        at: expect.objectContaining({ path: "/constants/0/value" }),
      }),
    );
    expect(() =>
      loadSiteModel(valid.replace("name: Tiny tank", `name: ${"x".repeat(300)}`), "x.yaml"),
    ).toThrow(expect.objectContaining({ code: "MODEL_SCHEMA" }));
  });

  test("refuses a symbol named like a built-in constant", () => {
    expect(() =>
      loadSiteModel(valid.replace("symbol: k,", "symbol: pi,").replaceAll("k * M", "pi * M"), "x.yaml"),
    ).toThrow(
      expect.objectContaining({
        code: "MODEL_SYMBOL_RESERVED",
        at: expect.objectContaining({ path: "/constants/0/symbol" }),
      }),
    );
  });

  test("refuses a structurally singular system that is square", () => {
    // given two unknowns where both equations hold only M
    const text = valid
      .replace(
        "    - { symbol: M, unit: kg, initial: 1, min: 0 }",
        "    - { symbol: M, unit: kg, initial: 1, min: 0 }\n    - { symbol: N, unit: kg, initial: 1 }",
      )
      .replace("unit: kg/s }", "unit: kg/s }\n    - { name: twice, expression: 2 * Fin - k * M = 0 }");
    expect(() => loadSiteModel(text, "x.yaml")).toThrow(
      expect.objectContaining({ code: "MODEL_STRUCTURALLY_SINGULAR" }),
    );
  });

  test("refuses kg/s added to g/s (same dimension, different scale)", () => {
    const text = valid
      .replace("expression: Fin - k * M = 0", "expression: Fin - k * M - G = 0")
      .replace("constants:\n", "constants:\n  - { symbol: G, unit: g/s, value: 1 }\n");
    expect(() => loadSiteModel(text, "x.yaml")).toThrow(
      expect.objectContaining({ code: "MODEL_UNITS_MISMATCH" }),
    );
  });

  test("accepts units: ignore on an exotic correlation", () => {
    const text = valid.replace(
      "expression: Fin - k * M = 0, unit: kg/s",
      "expression: Fin - k * M^1.2 = 0, units: ignore",
    );
    expect(loadSiteModel(text, "x.yaml").equations).toHaveLength(1);
  });
});

describe("the Williams–Otto fixtures", () => {
  test("map tags to model units, including a source in kg/h and a tag in t/h", async () => {
    const plant = await loadSiteModelFile(`${sites}williams-otto-plant.yaml`);
    const fa = plant.tagById.get("FI-101");
    // 1 t/h = 1000/3600 kg/s; 1 kg/h = 0.001 t/h (unit definitions, no source needed)
    expect(fa?.toModel.scale).toBeCloseTo(1000 / 3600, 12);
    expect(fa?.source?.toTag.scale).toBeCloseTo(0.001, 12);
    expect(plant.tagById.get("TIC-103")?.toModel).toEqual({ scale: 1, offset: 0 });
    expect(plant.balances[0]).toMatchObject({ name: "total-mass", bilinear: false });
    expect(plant.layout.blocks.decisions.symbols).toEqual(["FB", "T_R"]);
    expect(plant.layout.units.get("profit")).toBe("USD/s");
  });
});

describe("the error-code registry", () => {
  test("README lists every code, and only those", () => {
    const documented = [...readme.matchAll(/^\| `(MODEL_[A-Z_]+)`\s*\|/gm)].map((m) => m[1]);
    expect(documented.sort()).toEqual(Object.keys(MODEL_ERROR_CODES).sort());
  });

  test("the loader's codes are all registered", () => {
    for (const want of Object.values(BROKEN)) expect(Object.keys(MODEL_ERROR_CODES)).toContain(want.code);
    expect(basename(sites)).toBe("sites");
  });
});
