/**
 * validate's configuration: the shared service options plus the site model, the checks' limits that
 * the site model's validation policy does not carry, modes, overrides and dispatch. Validated once,
 * then frozen. The signing key is not configuration: main.ts reads it from the environment or a file.
 */
import { type BaseConfig, serviceConfigSchema } from "../kit/config.js";
import type { ValidationPolicy } from "../model/index.js";
import type { SetpointOverride } from "./checks.js";
import type { Mode } from "./modes.js";

/** validate's own options (after defaults). */
export interface ValidateOptions {
  /** Path of the site-model YAML file (decisions, validation policy). Required unless the model is injected. */
  siteModelFile?: string;
  /** Process unit id the commands address (e.g. "R-1"); the gateway refuses another. Required. */
  unit: string;
  /** RTO cycle period, s: a ramp must reach its target within it. Default 900. */
  cyclePeriodS: number;
  /** Overrides of the site model's validation policy, field by field. Default none. */
  policy: Partial<ValidationPolicy>;
  /** Largest accepted KKT residuals. Defaults: stationarity 1e-2 (objective unit per decision unit), complementarity 1e-2 (objective unit), feasibility 1e-4 (constraint unit). */
  kkt: { maxStationarity: number; maxComplementarity: number; maxFeasibility: number };
  /** Accept proposals whose status is soft-violated. Default true (a soft limit is priced, not forbidden). */
  allowSoftViolated: boolean;
  /** Accepted solver.status values (case-insensitive); empty accepts any. Default []. */
  acceptedSolverStatuses: string[];
  /** Require the cycle's model update to be accepted. Default true. */
  requireModelAccepted: boolean;
  /** Flip-flop guard. Defaults: windowCycles 3, minReversalFraction 0.02 (of the decision's range). */
  consistency: { windowCycles: number; minReversalFraction: number };
  /** Relative tolerance on limits. Default 1e-9. */
  tolerance: number;
  /** How long a proposal waits for approval in advisory mode, s. Default 900. */
  approvalTimeoutS: number;
  /** Mode at start when no retained mode state exists. Default advisory. */
  initialMode: Mode;
  /** Engineer-set overrides by setpoint tag (an operator mode event can replace them). Default none. */
  overrides: SetpointOverride[];
  /** Dispatch. */
  dispatch: {
    /** "gateway" (default): one command per proposal, the gateway ramps; "stepped": intermediate setpoints. */
    style: "gateway" | "stepped";
    /** Period of intermediate setpoints, s (stepped). Default 10. */
    stepS: number;
    /** Most commands per dispatch (stepped). Default 60. */
    maxSteps: number;
    /** Time the control side has to answer a command, s. Default 10. */
    readbackTimeoutS: number;
    /** Id of the signing key (the secret comes from main.ts). Default "k1". */
    keyId: string;
    /** File that keeps the last sequence number sent, so numbering survives a restart. Default none (resume from readbacks only). */
    stateFile?: string;
  };
  /** Dispatched moves kept for the flip-flop guard, cycles. Default 20. */
  historyCycles: number;
  /** Cycles whose snapshot and model events are remembered. Default 200. */
  rememberCycles: number;
  /** Period of the approval-expiry and readback-timeout sweep, ms. Default 250. */
  tickMs: number;
}

/** validate's whole config. */
export type ValidateConfig = BaseConfig & { validate: ValidateOptions };

const num = (description: string, extra: Record<string, unknown>) => ({
  type: "number",
  description,
  ...extra,
});

/** JSON Schema of validate's config, with defaults. */
export const validateConfigSchema = serviceConfigSchema(
  {
    validate: {
      type: "object",
      additionalProperties: false,
      required: ["unit"],
      properties: {
        siteModelFile: { type: "string", minLength: 1 },
        unit: { type: "string", pattern: "^[A-Za-z0-9][A-Za-z0-9_.-]*$", maxLength: 40 },
        cyclePeriodS: num("RTO cycle period, s.", { exclusiveMinimum: 0, default: 900 }),
        policy: {
          type: "object",
          additionalProperties: false,
          default: {},
          properties: {
            minImprovement: { type: "number" },
            maxDataAgeS: { type: "number", exclusiveMinimum: 0 },
            maxFitChiSquareRatio: { type: "number", exclusiveMinimum: 0 },
            requireApproval: { type: "boolean" },
            commandExpiryS: { type: "number", exclusiveMinimum: 0 },
          },
        },
        kkt: {
          type: "object",
          additionalProperties: false,
          default: {},
          properties: {
            maxStationarity: num("Largest stationarity residual.", { minimum: 0, default: 1e-2 }),
            maxComplementarity: num("Largest complementarity residual.", { minimum: 0, default: 1e-2 }),
            maxFeasibility: num("Largest feasibility residual.", { minimum: 0, default: 1e-4 }),
          },
        },
        allowSoftViolated: { type: "boolean", default: true },
        acceptedSolverStatuses: {
          type: "array",
          maxItems: 20,
          items: { type: "string", maxLength: 40 },
          default: [],
        },
        requireModelAccepted: { type: "boolean", default: true },
        consistency: {
          type: "object",
          additionalProperties: false,
          default: {},
          properties: {
            windowCycles: { type: "integer", minimum: 0, maximum: 100, default: 3 },
            minReversalFraction: num("Smallest reversing move, fraction of range.", {
              minimum: 0,
              maximum: 1,
              default: 0.02,
            }),
          },
        },
        tolerance: num("Relative tolerance on limits.", { minimum: 0, maximum: 1e-3, default: 1e-9 }),
        approvalTimeoutS: num("Approval expiry, s.", { exclusiveMinimum: 0, default: 900 }),
        initialMode: { enum: ["off", "advisory", "closed-loop"], default: "advisory" },
        overrides: {
          type: "array",
          maxItems: 200,
          default: [],
          items: {
            type: "object",
            additionalProperties: false,
            required: ["tag"],
            properties: {
              tag: { type: "string", minLength: 1, maxLength: 64 },
              hold: { type: "boolean" },
              min: { type: "number" },
              max: { type: "number" },
              note: { type: "string", maxLength: 500 },
            },
          },
        },
        dispatch: {
          type: "object",
          additionalProperties: false,
          default: {},
          properties: {
            style: { enum: ["gateway", "stepped"], default: "gateway" },
            stepS: num("Step period, s.", { exclusiveMinimum: 0, default: 10 }),
            maxSteps: { type: "integer", minimum: 1, maximum: 1000, default: 60 },
            readbackTimeoutS: num("Readback timeout, s.", { exclusiveMinimum: 0, default: 10 }),
            keyId: { type: "string", pattern: "^[A-Za-z0-9][A-Za-z0-9_.-]*$", maxLength: 64, default: "k1" },
            stateFile: { type: "string", minLength: 1 },
          },
        },
        historyCycles: { type: "integer", minimum: 1, maximum: 1000, default: 20 },
        rememberCycles: { type: "integer", minimum: 1, maximum: 100000, default: 200 },
        tickMs: { type: "integer", minimum: 10, maximum: 60000, default: 250 },
      },
    },
  },
  ["validate"],
);
