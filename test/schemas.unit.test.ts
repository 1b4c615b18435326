import { readdirSync, readFileSync } from "node:fs";
import { join } from "node:path";
import { describe, expect, it } from "vitest";
import { SCHEMA_DIR, schemaRegistry } from "../services/kit/schemas.js";

const fixturesDir = join(SCHEMA_DIR, "fixtures");
const registry = schemaRegistry();

function listJson(dir: string): string[] {
  try {
    return readdirSync(dir).filter((f) => f.endsWith(".json"));
  } catch {
    return [];
  }
}

function validatorFor(name: string) {
  if (name === "envelope") return registry.envelope;
  if (!registry.has(name)) throw new Error(`fixtures for unknown schema ${name}`);
  const v = registry.validatorOf(name);
  if (!v) throw new Error(`no validator for ${name}`);
  return v;
}

describe("message schemas", () => {
  const schemaFiles = readdirSync(SCHEMA_DIR).filter((f) =>
    /^(envelope|rto\..+\.v\d+)\.schema\.json$/.test(f),
  );

  it.each(schemaFiles)("%s has valid and invalid fixtures, and each is judged as labelled", (file) => {
    const name = file.replace(/\.schema\.json$/, "");
    const valid = listJson(join(fixturesDir, name, "valid"));
    const invalid = listJson(join(fixturesDir, name, "invalid"));
    expect(valid.length, `${name}: valid fixtures`).toBeGreaterThanOrEqual(1);
    expect(invalid.length, `${name}: invalid fixtures`).toBeGreaterThanOrEqual(2);
    const validate = validatorFor(name);
    for (const f of valid) {
      const ok = validate(JSON.parse(readFileSync(join(fixturesDir, name, "valid", f), "utf8")));
      expect(ok, `${name}/valid/${f}: ${JSON.stringify(validate.errors)}`).toBe(true);
    }
    for (const f of invalid) {
      expect(
        validate(JSON.parse(readFileSync(join(fixturesDir, name, "invalid", f), "utf8"))),
        `${name}/invalid/${f}`,
      ).toBe(false);
    }
  });

  it.each(schemaFiles)("%s is strict: closed objects, bounded strings and arrays", (file) => {
    const problems: string[] = [];
    const walk = (node: unknown, path: string) => {
      if (!node || typeof node !== "object") return;
      const n = node as Record<string, unknown>;
      if (n.type === "object" || (Array.isArray(n.type) && n.type.includes("object"))) {
        // `data` of the envelope is the one open object: its schema is chosen by `type`.
        if (n.additionalProperties !== false && !path.endsWith("/properties/data"))
          problems.push(`${path}: open object`);
      }
      if (
        n.type === "string" &&
        n.maxLength === undefined &&
        n.format === undefined &&
        n.enum === undefined
      ) {
        problems.push(`${path}: unbounded string`);
      }
      if (n.type === "array" && n.maxItems === undefined) problems.push(`${path}: unbounded array`);
      for (const [k, v] of Object.entries(n)) {
        if (Array.isArray(v)) {
          for (const [i, x] of v.entries()) walk(x, `${path}/${k}/${i}`);
        } else walk(v, `${path}/${k}`);
      }
    };
    walk(JSON.parse(readFileSync(join(SCHEMA_DIR, file), "utf8")), "#");
    expect(problems).toEqual([]);
  });
});
