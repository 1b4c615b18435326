/**
 * Site-model loading: YAML (with node ranges for line numbers) → strict JSON Schema (ajv 2020) →
 * semantic checks and compilation (site-model.ts). Every refusal is a `SiteModelError` naming file,
 * line and JSON path.
 */
import { readFileSync } from "node:fs";
import { readFile } from "node:fs/promises";
import { Ajv2020, type ErrorObject, type ValidateFunction } from "ajv/dist/2020.js";
import { isMap, isScalar, isSeq, LineCounter, type Node, parseDocument } from "yaml";
import type { SiteModelDocument } from "./document.js";
import { SiteModelError, type SourceSpot } from "./errors.js";
import { type CompileOptions, compileSiteModel, type SiteModel } from "./site-model.js";

/** Largest site-model file accepted, in bytes: a guard against a wrong path, not a design limit. */
export const MAX_SITE_MODEL_BYTES = 2_000_000;

const SCHEMA_URL = new URL("../../schemas/site-model.schema.json", import.meta.url);

let validator: ValidateFunction | undefined;

/** The compiled site-model schema (compiled once per process). */
export function siteModelValidator(): ValidateFunction {
  if (validator === undefined) {
    const schema = JSON.parse(readFileSync(SCHEMA_URL, "utf8")) as object;
    const ajv = new Ajv2020({ strict: true, allErrors: false, allowUnionTypes: false });
    validator = ajv.compile(schema);
  }
  return validator;
}

function pointerToPath(pointer: string): (string | number)[] {
  if (pointer === "") return [];
  return pointer
    .slice(1)
    .split("/")
    .map((s) => s.replace(/~1/g, "/").replace(/~0/g, "~"))
    .map((s) => (/^\d+$/.test(s) ? Number(s) : s));
}

/** Builds a JSON-path → line finder over a parsed YAML document (nearest existing ancestor wins). */
function spotFinder(root: Node | null, lines: LineCounter, file: string): (path: string) => SourceSpot {
  return (path) => {
    let node: Node | null = root;
    let best: Node | null = root;
    let keyNode: Node | null = null;
    for (const part of pointerToPath(path)) {
      if (isMap(node)) {
        const pair = node.items.find((p) => (isScalar(p.key) ? p.key.value : p.key) === part);
        if (pair === undefined) break;
        keyNode = isScalar(pair.key) ? pair.key : null;
        node = (pair.value as Node | null) ?? null;
      } else if (isSeq(node) && typeof part === "number") {
        node = (node.items[part] as Node | undefined) ?? null;
        keyNode = null;
      } else {
        break;
      }
      if (node === null) break;
      best = node;
    }
    const at = keyNode?.range?.[0] ?? best?.range?.[0];
    const line = at === undefined ? 1 : lines.linePos(at).line;
    return { file, line, path: path === "" ? "/" : path };
  };
}

function describeSchemaError(e: ErrorObject): string {
  switch (e.keyword) {
    case "additionalProperties":
      return `unknown field "${(e.params as { additionalProperty: string }).additionalProperty}" (allowed: see schemas/site-model.schema.json)`;
    case "required":
      return `missing required field "${(e.params as { missingProperty: string }).missingProperty}"`;
    case "enum":
      return `must be one of ${JSON.stringify((e.params as { allowedValues: unknown[] }).allowedValues)}`;
    default:
      return e.message ?? e.keyword;
  }
}

/** Where an ajv error points: for an unknown field, the field itself; otherwise the instance path. */
function errorPath(e: ErrorObject): string {
  if (e.keyword === "additionalProperties") {
    const extra = (e.params as { additionalProperty: string }).additionalProperty;
    return `${e.instancePath}/${extra.replace(/~/g, "~0").replace(/\//g, "~1")}`;
  }
  return e.instancePath;
}

/**
 * Loads a site model from YAML text. `file` is used in messages only.
 * Throws `SiteModelError` (MODEL_YAML_SYNTAX, MODEL_SCHEMA, or a semantic code) on the first problem.
 */
export function loadSiteModel(text: string, file: string, options: CompileOptions = {}): SiteModel {
  if (text.length > MAX_SITE_MODEL_BYTES) {
    throw new SiteModelError(
      "MODEL_FILE_READ",
      { file, line: 0, path: "/" },
      `${file}: ${text.length} characters exceeds the ${MAX_SITE_MODEL_BYTES}-character limit`,
    );
  }
  const lines = new LineCounter();
  const yamlDoc = parseDocument(text, { lineCounter: lines, prettyErrors: false, uniqueKeys: true });
  const yamlError = yamlDoc.errors[0];
  if (yamlError !== undefined) {
    const line = lines.linePos(yamlError.pos[0]).line;
    const reason = yamlError.message.split("\n")[0] ?? yamlError.code;
    throw new SiteModelError(
      "MODEL_YAML_SYNTAX",
      { file, line, path: "/" },
      `${file}:${line}: YAML ${yamlError.code}: ${reason}`,
      { cause: yamlError },
    );
  }
  const spot = spotFinder(yamlDoc.contents as Node | null, lines, file);
  let data: unknown;
  try {
    data = yamlDoc.toJS({ maxAliasCount: 100 });
  } catch (err) {
    throw new SiteModelError(
      "MODEL_YAML_SYNTAX",
      { file, line: 1, path: "/" },
      `${file}:1: YAML cannot be converted: ${(err as Error).message}`,
      { cause: err },
    );
  }
  const validate = siteModelValidator();
  if (!validate(data)) {
    const errors = validate.errors ?? [];
    // With if/then/else and anyOf, ajv reports the branch errors first; the deepest path is the most useful.
    const first =
      [...errors].sort((a, b) => errorPath(b).split("/").length - errorPath(a).split("/").length)[0] ??
      errors[0];
    const path = first ? errorPath(first) : "";
    const at = spot(path);
    throw new SiteModelError(
      "MODEL_SCHEMA",
      at,
      `${file}:${at.line}: ${at.path}: ${first ? describeSchemaError(first) : "does not match the schema"}`,
    );
  }
  return compileSiteModel(data as SiteModelDocument, file, spot, options);
}

/** Reads and loads a site-model file (see `loadSiteModel`); a read failure is MODEL_FILE_READ. */
export async function loadSiteModelFile(path: string, options: CompileOptions = {}): Promise<SiteModel> {
  let text: string;
  try {
    text = await readFile(path, "utf8");
  } catch (err) {
    throw new SiteModelError(
      "MODEL_FILE_READ",
      { file: path, line: 0, path: "/" },
      `${path}: cannot read the site model: ${(err as Error).message}`,
      { cause: err },
    );
  }
  return loadSiteModel(text, path, options);
}
