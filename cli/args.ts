/**
 * Argument handling shared by the subcommands, on node:util parseArgs (no extra dependency).
 * Every malformed input becomes a CliError CLI_USAGE that says which flag and what was expected.
 */
import { type ParseArgsConfig, parseArgs } from "node:util";
import { CliError } from "./errors.js";

/** Options of one subcommand, in parseArgs' terms. */
export type OptionSpec = NonNullable<ParseArgsConfig["options"]>;

/** Parsed flags and positionals. */
export interface Parsed {
  values: Record<string, string | boolean | string[] | boolean[] | undefined>;
  positionals: string[];
}

/**
 * Parses `argv` against `options` (strict: an unknown flag is refused). `usage` is appended to the
 * error so the user sees how to call the command.
 */
export function parseCommandArgs(argv: string[], options: OptionSpec, usage: string): Parsed {
  try {
    const { values, positionals } = parseArgs({ args: argv, options, allowPositionals: true, strict: true });
    return { values: values as Parsed["values"], positionals };
  } catch (err) {
    throw new CliError("CLI_USAGE", `${(err as Error).message}\nusage: ${usage}`, { cause: err });
  }
}

/** A string flag's value, or undefined. */
export function str(p: Parsed, name: string): string | undefined {
  const v = p.values[name];
  return typeof v === "string" ? v : undefined;
}

/** A repeatable string flag's values (empty when absent). */
export function list(p: Parsed, name: string): string[] {
  const v = p.values[name];
  if (Array.isArray(v)) return v.filter((x): x is string => typeof x === "string");
  return typeof v === "string" ? [v] : [];
}

/** A boolean flag. */
export function flag(p: Parsed, name: string): boolean {
  return p.values[name] === true;
}

/** A required string flag; CLI_USAGE when absent. */
export function required(p: Parsed, name: string, usage: string): string {
  const v = str(p, name);
  if (v === undefined || v === "") throw new CliError("CLI_USAGE", `--${name} is required\nusage: ${usage}`);
  return v;
}

/** A finite number from flag `name`; CLI_USAGE when it does not parse or breaks `min`/`max`. */
export function numberFlag(
  text: string | undefined,
  name: string,
  limits: { min?: number; max?: number; integer?: boolean; exclusiveMin?: number } = {},
): number | undefined {
  if (text === undefined) return undefined;
  const v = Number(text);
  const bad =
    text.trim() === "" ||
    !Number.isFinite(v) ||
    (limits.integer === true && !Number.isInteger(v)) ||
    (limits.min !== undefined && v < limits.min) ||
    (limits.max !== undefined && v > limits.max) ||
    (limits.exclusiveMin !== undefined && v <= limits.exclusiveMin);
  if (bad) {
    const range = [
      limits.integer ? "an integer" : "a number",
      limits.exclusiveMin !== undefined ? `> ${limits.exclusiveMin}` : "",
      limits.min !== undefined ? `≥ ${limits.min}` : "",
      limits.max !== undefined ? `≤ ${limits.max}` : "",
    ]
      .filter(Boolean)
      .join(" ");
    throw new CliError("CLI_USAGE", `--${name} must be ${range}, got '${text}'`);
  }
  return v;
}

/** A TCP port (0 = any free port). */
export function portFlag(text: string | undefined, name: string): number | undefined {
  return numberFlag(text, name, { integer: true, min: 0, max: 65535 });
}

const SYMBOL = /^[A-Za-z_][A-Za-z0-9_]*$/;

/**
 * `sym=value` pairs (e.g. `--price pP=3.6 --price pB=1.3`) into a record. Refuses a missing `=`, a
 * name that is not a model symbol, a value that is not a finite number, and a symbol given twice.
 */
export function parseAssignments(items: readonly string[], name: string): Record<string, number> {
  const out: Record<string, number> = {};
  for (const item of items) {
    const eq = item.indexOf("=");
    const sym = eq < 0 ? "" : item.slice(0, eq).trim();
    const raw = eq < 0 ? "" : item.slice(eq + 1).trim();
    if (!SYMBOL.test(sym) || raw === "") {
      throw new CliError("CLI_USAGE", `--${name} takes symbol=value (e.g. --${name} pP=3.6), got '${item}'`);
    }
    const v = Number(raw);
    if (!Number.isFinite(v)) {
      throw new CliError("CLI_USAGE", `--${name} ${sym}: '${raw}' is not a finite number`);
    }
    if (sym in out) throw new CliError("CLI_USAGE", `--${name} ${sym} is given twice`);
    out[sym] = v;
  }
  return out;
}

/** A broker URL and the transport it implies. */
export interface BusTarget {
  transport: "mqtt" | "nats";
  url: string;
}

/** `mqtt://`, `mqtts://`, `ws://`, `wss://` → MQTT; `nats://`, `tls://` → NATS. Anything else is refused. */
export function parseBusUrl(text: string): BusTarget {
  let u: URL;
  try {
    u = new URL(text);
  } catch {
    throw new CliError(
      "CLI_USAGE",
      `--bus must be a URL such as mqtt://host:1883 or nats://host:4222, got '${text}'`,
    );
  }
  const scheme = u.protocol.replace(/:$/, "");
  if (!u.hostname) throw new CliError("CLI_USAGE", `--bus ${text}: no host`);
  if (["mqtt", "mqtts", "ws", "wss"].includes(scheme)) return { transport: "mqtt", url: text };
  if (["nats", "tls"].includes(scheme)) return { transport: "nats", url: text };
  throw new CliError(
    "CLI_USAGE",
    `--bus ${text}: unknown scheme '${scheme}' (use mqtt:// for Mosquitto or nats:// for NATS)`,
  );
}

/** A site id as the subjects need it ([a-z0-9-], 1–40 characters). */
export function siteFlag(text: string | undefined, fallback: string): string {
  const site = text ?? fallback;
  if (!/^[a-z0-9-]{1,40}$/.test(site)) {
    throw new CliError("CLI_USAGE", `--site must be 1–40 characters of [a-z0-9-], got '${site}'`);
  }
  return site;
}
