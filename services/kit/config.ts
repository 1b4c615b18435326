/**
 * Service configuration: a JSON Schema with defaults, filled from a file and the environment,
 * validated once at start-up, then frozen. A bad field stops the service with its JSON path.
 */
import { readFileSync } from "node:fs";
import { parse as parseYaml } from "yaml";
import { KitError } from "./errors.js";
import { createAjv } from "./schemas.js";

/** JSON-Schema fragment of the options every service shares. */
export const baseConfigProperties = {
  site: { type: "string", pattern: "^[a-z0-9-]+$", maxLength: 40, description: "Site id." },
  instance: {
    type: "string",
    pattern: "^[A-Za-z0-9_.-]+$",
    maxLength: 64,
    default: "0",
    description: "Instance name, unique among replicas of one service. Default '0'.",
  },
  bus: {
    type: "object",
    additionalProperties: false,
    default: {},
    properties: {
      transport: {
        enum: ["mqtt", "nats", "embedded"],
        default: "mqtt",
        description: "Broker kind. Default mqtt.",
      },
      url: { type: "string", default: "mqtt://127.0.0.1:1883", description: "Broker URL." },
      clientId: { type: "string", maxLength: 64, description: "Stable MQTT client id (persistent session)." },
      username: { type: "string", maxLength: 64 },
      password: { type: "string", maxLength: 256 },
    },
  },
  http: {
    type: "object",
    additionalProperties: false,
    default: {},
    properties: {
      enabled: {
        type: "boolean",
        default: true,
        description: "Serve /healthz, /readyz, /metrics. Default true.",
      },
      host: { type: "string", default: "127.0.0.1", description: "Interface. Default loopback." },
      port: {
        type: "integer",
        minimum: 0,
        maximum: 65535,
        default: 0,
        description: "Port; 0 picks a free one. Default 0.",
      },
    },
  },
  heartbeatS: {
    type: "number",
    exclusiveMinimum: 0,
    maximum: 3600,
    default: 5,
    description: "Heartbeat period, s. Default 5.",
  },
  maxMessageBytes: {
    type: "integer",
    minimum: 1024,
    default: 1048576,
    description: "Largest accepted message, bytes. Default 1 MiB.",
  },
  logLevel: { enum: ["trace", "debug", "info", "warn", "error", "fatal", "silent"], default: "info" },
} as const;

/** The options every service shares (after defaults). */
export interface BaseConfig {
  site: string;
  instance: string;
  bus: {
    transport: "mqtt" | "nats" | "embedded";
    url: string;
    clientId?: string;
    username?: string;
    password?: string;
  };
  http: { enabled: boolean; host: string; port: number };
  heartbeatS: number;
  maxMessageBytes: number;
  logLevel: "trace" | "debug" | "info" | "warn" | "error" | "fatal" | "silent";
}

/** A service's config schema: the shared options plus its own section(s). */
export function serviceConfigSchema(
  own: Record<string, unknown> = {},
  required: string[] = [],
): Record<string, unknown> {
  return {
    type: "object",
    additionalProperties: false,
    required: ["site", ...required],
    properties: { ...baseConfigProperties, ...own },
  };
}

function deepFreeze<T>(value: T): T {
  if (value && typeof value === "object") {
    for (const v of Object.values(value)) deepFreeze(v);
    Object.freeze(value);
  }
  return value;
}

/**
 * Environment overrides: `STEADFAST_<PATH>` with `__` between levels and snake case inside a
 * level, e.g. STEADFAST_BUS__CLIENT_ID=r1-ingest → { bus: { clientId: "r1-ingest" } }. Values
 * that parse as JSON (numbers, booleans, objects) are taken as such.
 */
export function envOverrides(
  env: Record<string, string | undefined>,
  prefix = "STEADFAST_",
): Record<string, unknown> {
  const out: Record<string, unknown> = {};
  for (const [name, raw] of Object.entries(env)) {
    if (!name.startsWith(prefix) || raw === undefined) continue;
    const path = name
      .slice(prefix.length)
      .split("__")
      .map((p) => p.toLowerCase().replace(/_([a-z0-9])/g, (_m, c: string) => c.toUpperCase()));
    let value: unknown = raw;
    try {
      value = JSON.parse(raw);
    } catch {
      // a plain string
    }
    let node = out;
    path.forEach((key, i) => {
      if (i === path.length - 1) {
        node[key] = value;
        return;
      }
      node[key] ??= {};
      node = node[key] as Record<string, unknown>;
    });
  }
  return out;
}

function merge(a: Record<string, unknown>, b: Record<string, unknown>): Record<string, unknown> {
  const out: Record<string, unknown> = { ...a };
  for (const [k, v] of Object.entries(b)) {
    const prev = out[k];
    out[k] =
      v &&
      typeof v === "object" &&
      !Array.isArray(v) &&
      prev &&
      typeof prev === "object" &&
      !Array.isArray(prev)
        ? merge(prev as Record<string, unknown>, v as Record<string, unknown>)
        : v;
  }
  return out;
}

/** Reads a JSON or YAML config file into an object. */
export function readConfigFile(path: string): Record<string, unknown> {
  const text = readFileSync(path, "utf8");
  const value = path.endsWith(".json") ? JSON.parse(text) : parseYaml(text);
  return (value ?? {}) as Record<string, unknown>;
}

/**
 * Validates `sources` (merged left to right: later wins) against `schema`, fills defaults, and
 * returns a frozen config. Throws KitError KIT_CONFIG_INVALID naming the JSON path of the bad field.
 */
export function loadConfig<T>(
  schema: Record<string, unknown>,
  ...sources: Array<Record<string, unknown>>
): Readonly<T> {
  const ajv = createAjv({ useDefaults: true });
  const validate = ajv.compile(schema);
  const value = sources.reduce((acc, s) => merge(acc, s), {} as Record<string, unknown>);
  if (!validate(value)) {
    const e = validate.errors?.[0];
    const path = e?.instancePath || "/";
    const field =
      e?.params && "missingProperty" in e.params
        ? `${path === "/" ? "" : path}/${String(e.params.missingProperty)}`
        : path;
    const extra =
      e?.params && "additionalProperty" in e.params ? ` ('${String(e.params.additionalProperty)}')` : "";
    throw new KitError("KIT_CONFIG_INVALID", `config field ${field}${extra}: ${e?.message ?? "invalid"}`);
  }
  return deepFreeze(value) as Readonly<T>;
}
