/**
 * The market service's configuration: the shared service options plus the schedule file and the
 * clock of the simulation. Validated once at start-up (loadConfig), then frozen.
 */
import { type BaseConfig, serviceConfigSchema } from "../kit/config.js";

/** The market service's own options (after defaults). */
export interface MarketOptions {
  /** Path of the price schedule YAML (`units` + `schedule`, see schedule.ts). Required. */
  scheduleFile: string;
  /** Simulated seconds per wall-clock second: 1 = real time, 60 = one simulated minute per second. Default 1. */
  timeScale: number;
  /** Simulated time at start-up, ISO 8601 (e.g. 2026-03-02T06:00:00Z). Default: the wall clock at start-up. */
  startAt?: string;
  /** Name written into each message's `source`. Default "market-schedule". */
  source: string;
}

/** The market service's whole config. */
export type MarketConfig = BaseConfig & { market: MarketOptions };

/** JSON Schema of the market service's config, with defaults. */
export const marketConfigSchema = serviceConfigSchema(
  {
    market: {
      type: "object",
      additionalProperties: false,
      required: ["scheduleFile"],
      properties: {
        scheduleFile: {
          type: "string",
          minLength: 1,
          maxLength: 1000,
          description: "Path of the price schedule YAML.",
        },
        timeScale: {
          type: "number",
          exclusiveMinimum: 0,
          maximum: 86400,
          default: 1,
          description: "Simulated seconds per wall-clock second. Default 1 (real time).",
        },
        startAt: {
          type: "string",
          format: "date-time",
          description: "Simulated time at start-up, ISO 8601. Default: the wall clock at start-up.",
        },
        source: {
          type: "string",
          minLength: 1,
          maxLength: 80,
          default: "market-schedule",
          description: "The prices' source name. Default market-schedule.",
        },
      },
    },
  },
  ["market"],
);
