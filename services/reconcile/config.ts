/** The reconcile service's configuration: the shared options, the site model and the stage's options. */
import { type BaseConfig, serviceConfigSchema } from "../kit/config.js";

/** Options of the reconcile stage (see stage.ts for each one's meaning). */
export interface ReconcileSection {
  /** Family-wise significance level of the tests. Default 0.05. */
  alpha: number;
  /** Most measurements removed by serial elimination per snapshot. Default 5. */
  maxEliminations: number;
  /** "model" (site-model sigma) or "model+window". Default "model". */
  sigmaSource: "model" | "model+window";
  /** Smallest fraction of balance tags that must be in the snapshot. Default 0.5. */
  minMeasuredFraction: number;
  /** Smallest global-test dof before elimination. Default 1. */
  minRedundancy: number;
}

/** The reconcile service's config after defaults. */
export interface ReconcileConfig extends BaseConfig {
  /** Path of the site-model YAML file. */
  siteModel: string;
  reconcile: ReconcileSection;
}

/** JSON Schema of the config, with defaults. */
export const reconcileConfigSchema = serviceConfigSchema(
  {
    siteModel: {
      type: "string",
      minLength: 1,
      maxLength: 1000,
      description: "Path of the site-model YAML file.",
    },
    reconcile: {
      type: "object",
      additionalProperties: false,
      default: {},
      properties: {
        alpha: {
          type: "number",
          exclusiveMinimum: 0,
          exclusiveMaximum: 1,
          default: 0.05,
          description: "Test level. Default 0.05.",
        },
        maxEliminations: {
          type: "integer",
          minimum: 0,
          maximum: 100,
          default: 5,
          description: "Serial eliminations per snapshot. Default 5.",
        },
        sigmaSource: {
          enum: ["model", "model+window"],
          default: "model",
          description: "Measurement sigma. Default model.",
        },
        minMeasuredFraction: {
          type: "number",
          minimum: 0,
          maximum: 1,
          default: 0.5,
          description: "Balance tags needed, fraction. Default 0.5.",
        },
        minRedundancy: {
          type: "integer",
          minimum: 0,
          maximum: 1000,
          default: 1,
          description: "Global-test dof needed. Default 1.",
        },
      },
    },
  },
  ["siteModel"],
);
