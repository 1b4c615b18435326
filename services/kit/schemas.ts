/**
 * The message contracts: every schema in schemas/ compiled once, at start-up, in strict mode.
 * Validators are built here and nowhere else, so a service never compiles a schema on a hot path.
 */
import { readdirSync, readFileSync } from "node:fs";
import { join } from "node:path";
import { Ajv2020, type ErrorObject, type ValidateFunction } from "ajv/dist/2020.js";
import addFormatsModule from "ajv-formats";
import type { EventDataMap, EventEnvelope, EventType } from "./generated/messages.js";

// ajv-formats is CommonJS; under NodeNext its default import is the module object.
const addFormats = addFormatsModule as unknown as typeof addFormatsModule.default;

/** Folder of the JSON Schemas, found from this file so that it works from source and from dist/. */
export const SCHEMA_DIR = new URL("../../schemas/", import.meta.url).pathname;

/** One validator error, in the shape the dead-letter schema keeps. */
export interface SchemaIssue {
  path: string;
  message: string;
}

/** Converts ajv's errors into short path/message pairs (at most 20, as the dead-letter schema allows). */
export function issuesOf(errors: ErrorObject[] | null | undefined): SchemaIssue[] {
  return (errors ?? []).slice(0, 20).map((e) => ({
    path: (e.instancePath || "/").slice(0, 500),
    message:
      `${e.message ?? "invalid"}${e.params && Object.keys(e.params).length ? ` ${JSON.stringify(e.params)}` : ""}`.slice(
        0,
        500,
      ),
  }));
}

/** Creates the project's ajv instance: draft 2020-12, strict, formats in "fast" mode (full mode costs 10–20× more on ISO times, see LIBRARY-NOTES). */
export function createAjv(options: { useDefaults?: boolean; coerceTypes?: boolean } = {}): Ajv2020 {
  const ajv = new Ajv2020({
    strict: true,
    allErrors: false,
    useDefaults: options.useDefaults ?? false,
    coerceTypes: options.coerceTypes ?? false,
  });
  addFormats(ajv, { mode: "fast", formats: ["date-time", "uri", "uri-reference", "uuid", "uri-template"] });
  return ajv;
}

/** The compiled contracts of every event type. */
export class SchemaRegistry {
  readonly envelope: ValidateFunction<EventEnvelope>;
  private readonly data = new Map<string, { id: string; validate: ValidateFunction }>();

  constructor(dir: string = SCHEMA_DIR) {
    const ajv = createAjv();
    const files = readdirSync(dir).filter((f) => f.endsWith(".schema.json"));
    for (const f of files) ajv.addSchema(JSON.parse(readFileSync(join(dir, f), "utf8")));
    const env = ajv.getSchema("https://steadfast.dev/schemas/envelope.schema.json");
    if (!env) throw new Error("schemas/envelope.schema.json is missing");
    this.envelope = env as ValidateFunction<EventEnvelope>;
    for (const f of files) {
      const m = /^(rto\..+\.v\d+)\.schema\.json$/.exec(f);
      if (!m?.[1]) continue;
      const schema = JSON.parse(readFileSync(join(dir, f), "utf8")) as { $id: string };
      const validate = ajv.getSchema(schema.$id);
      if (!validate) throw new Error(`schema ${f} did not compile`);
      this.data.set(m[1], { id: schema.$id, validate });
    }
  }

  /** True when `type` names a known event type. */
  has(type: string): type is EventType {
    return this.data.has(type);
  }

  /** The `$id` of the data schema of `type` (goes into the envelope's `dataschema`). */
  schemaId(type: EventType): string {
    const entry = this.data.get(type);
    if (!entry) throw new Error(`no schema for ${type}`);
    return entry.id;
  }

  /** The compiled validator of the data of `type`, or undefined for an unknown type. */
  validatorOf<T extends EventType>(type: T): ValidateFunction<EventDataMap[T]> | undefined {
    return this.data.get(type)?.validate as ValidateFunction<EventDataMap[T]> | undefined;
  }

  /** All known event types. */
  types(): string[] {
    return [...this.data.keys()];
  }
}

let shared: SchemaRegistry | undefined;
/** The process-wide registry (schemas compile once per process). */
export function schemaRegistry(): SchemaRegistry {
  shared ??= new SchemaRegistry();
  return shared;
}
