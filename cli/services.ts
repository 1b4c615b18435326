/**
 * The suite's services, by name, for the composition root: each one's config schema and start
 * function, loaded on demand (a `check` or `whatif` should not pay for loading every service).
 * The CLI may import every service; services never import each other.
 */
import type { SigningKey } from "../services/kit/command-signing.js";
import type { Deps, Service } from "../services/kit/service.js";
import type { PriceSchedule } from "../services/market/schedule.js";
import type { SiteModel } from "../services/model/index.js";
import { CliError } from "./errors.js";

/**
 * Every service, in start order: the recorder first (it hears everything), then the console, then
 * validate and the plant (so the plant's gateway has heard validate's heartbeat, and says
 * "recovered", before steady listens: steady would take that readback for a setpoint move and wait
 * a whole settle time), then the pipeline.
 */
export const SERVICE_NAMES = [
  "recorder",
  "console",
  "validate",
  "plant-sim",
  "market",
  "ingest",
  "steady",
  "reconcile",
  "estimate",
  "optimize",
] as const;

/** A service's name. */
export type ServiceName = (typeof SERVICE_NAMES)[number];

/** True when `name` is one of the suite's services. */
export function isServiceName(name: string): name is ServiceName {
  return (SERVICE_NAMES as readonly string[]).includes(name);
}

/** What the composition root can hand a service besides its config. */
export interface SuiteDeps extends Deps {
  /** The site model, loaded once for every stage. */
  model?: SiteModel;
  /** validate's command-signing key. */
  signingKey?: SigningKey;
  /** The market's price schedule, already parsed. */
  schedule?: PriceSchedule;
}

/** A config object before validation. */
export type RawConfig = Record<string, unknown>;

/** How to run one service. */
export interface ServiceEntry {
  readonly name: ServiceName;
  /** The service's JSON Schema (kit/config.ts serviceConfigSchema). */
  schema: Record<string, unknown>;
  /** Starts it with a config that passed `schema`. */
  start(config: Readonly<RawConfig>, deps: SuiteDeps): Promise<Service>;
}

/** Structural type of the console module, which another part of the tree provides. */
interface ConsoleModule {
  start(config: unknown, deps: Deps): Promise<Service>;
}

/** Loads one service's schema and start function. Throws CLI_SERVICE_UNKNOWN / CLI_SERVICE_UNAVAILABLE. */
export async function loadService(name: string): Promise<ServiceEntry> {
  if (!isServiceName(name)) {
    throw new CliError(
      "CLI_SERVICE_UNKNOWN",
      `no service '${name}': choose one of ${SERVICE_NAMES.join(", ")} (or 'all')`,
    );
  }
  // Configs arrive as plain objects checked against the service's own schema by the caller; the
  // casts below only name the type that schema guarantees.
  switch (name) {
    case "recorder": {
      const [m, c] = await Promise.all([
        import("../services/recorder/index.js"),
        import("../services/recorder/config.js"),
      ]);
      return { name, schema: c.recorderConfigSchema, start: (cfg, deps) => m.start(cfg as never, deps) };
    }
    case "ingest": {
      const [m, c] = await Promise.all([
        import("../services/ingest/index.js"),
        import("../services/ingest/config.js"),
      ]);
      return { name, schema: c.ingestConfigSchema, start: (cfg, deps) => m.start(cfg as never, deps) };
    }
    case "steady": {
      const [m, c] = await Promise.all([
        import("../services/steady/index.js"),
        import("../services/steady/config.js"),
      ]);
      return { name, schema: c.steadyConfigSchema, start: (cfg, deps) => m.start(cfg as never, deps) };
    }
    case "reconcile": {
      const m = await import("../services/reconcile/index.js");
      return { name, schema: m.reconcileConfigSchema, start: (cfg, deps) => m.start(cfg as never, deps) };
    }
    case "estimate": {
      const m = await import("../services/estimate/index.js");
      return { name, schema: m.estimateConfigSchema, start: (cfg, deps) => m.start(cfg as never, deps) };
    }
    case "optimize": {
      const [m, c] = await Promise.all([
        import("../services/optimize/index.js"),
        import("../services/optimize/config.js"),
      ]);
      return { name, schema: c.optimizeConfigSchema, start: (cfg, deps) => m.start(cfg as never, deps) };
    }
    case "validate": {
      const [m, c] = await Promise.all([
        import("../services/validate/index.js"),
        import("../services/validate/config.js"),
      ]);
      return {
        name,
        schema: c.validateConfigSchema,
        start: (cfg, deps) => {
          const { signingKey, ...rest } = deps;
          if (!signingKey) {
            throw new CliError(
              "CLI_KEY_MISSING",
              "validate needs a command-signing key: set STEADFAST_COMMAND_KEY_FILE (preferred) or STEADFAST_COMMAND_KEY",
            );
          }
          return m.start(cfg as never, { ...rest, signingKey });
        },
      };
    }
    case "console": {
      const c = await import("../services/console/config.js");
      // The console's index is loaded by path so that the CLI still builds while it is absent.
      const spec = "../services/console/index.js";
      let m: ConsoleModule;
      try {
        m = (await import(spec)) as ConsoleModule;
      } catch (err) {
        throw new CliError(
          "CLI_SERVICE_UNAVAILABLE",
          `the console cannot be loaded: ${(err as Error).message}`,
          {
            cause: err,
          },
        );
      }
      return { name, schema: c.consoleConfigSchema, start: (cfg, deps) => m.start(cfg, deps) };
    }
    case "market": {
      const [m, c] = await Promise.all([
        import("../services/market/index.js"),
        import("../services/market/config.js"),
      ]);
      return { name, schema: c.marketConfigSchema, start: (cfg, deps) => m.start(cfg as never, deps) };
    }
    case "plant-sim": {
      const [m, c] = await Promise.all([
        import("../services/plant-sim/index.js"),
        import("../services/plant-sim/config.js"),
      ]);
      return { name, schema: c.plantSimConfigSchema, start: (cfg, deps) => m.start(cfg as never, deps) };
    }
    default: {
      const _exhaustive: never = name;
      throw new CliError("CLI_SERVICE_UNKNOWN", `no service '${String(_exhaustive)}'`);
    }
  }
}
