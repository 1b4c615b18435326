/** The estimate service's configuration: the shared options, the site model and the stage's options. */
import { type BaseConfig, serviceConfigSchema } from "../kit/config.js";
import { STAT_WARNING_CODES, type StatWarningCode } from "./stats.js";

/** Options of the estimate stage and service (see stage.ts for each one's meaning). */
export interface EstimateSection {
  /** Reconciled snapshots fitted together (the latest k). Default 1. */
  window: number;
  /** Parameters to fit; empty: all of the site model's. Default []. */
  parameters: string[];
  /** "measurement" or "reconciled" weights. Default "measurement". */
  weights: "measurement" | "reconciled";
  /** Confidence level of the intervals. Default 0.95. */
  confidence: number;
  /** Confidence of the chi-square fit gate. Default 0.99. */
  fitConfidence: number;
  /** Apply the chi-square fit gate. Default true. */
  checkFit: boolean;
  /** Largest confidence half-width as a fraction of |value|. Default 0.5. */
  maxRelativeHalfWidth: number;
  /** Identifiability warnings that reject. Default ["STAT_RANK_DEFICIENT"]. */
  rejectOnWarnings: StatWarningCode[];
  /** Levenberg–Marquardt iteration limit. Default 100. */
  maxIterations: number;
  /** Estimates kept in the in-memory history. Default 1000. */
  historySize: number;
  /** Wait for the retained parameter state at start, ms; 0 skips restoring it. Default 1000. */
  restoreTimeoutMs: number;
}

/** The estimate service's config after defaults. */
export interface EstimateConfig extends BaseConfig {
  /** Path of the site-model YAML file. */
  siteModel: string;
  estimate: EstimateSection;
}

/** JSON Schema of the config, with defaults. */
export const estimateConfigSchema = serviceConfigSchema(
  {
    siteModel: {
      type: "string",
      minLength: 1,
      maxLength: 1000,
      description: "Path of the site-model YAML file.",
    },
    estimate: {
      type: "object",
      additionalProperties: false,
      default: {},
      properties: {
        window: {
          type: "integer",
          minimum: 1,
          maximum: 100,
          default: 1,
          description: "Snapshots per fit. Default 1.",
        },
        parameters: {
          type: "array",
          maxItems: 200,
          items: { type: "string", maxLength: 64 },
          default: [],
          description: "Parameters to fit; empty: all. Default [].",
        },
        weights: {
          enum: ["measurement", "reconciled"],
          default: "measurement",
          description: "Residual weights. Default measurement.",
        },
        confidence: {
          type: "number",
          exclusiveMinimum: 0,
          exclusiveMaximum: 1,
          default: 0.95,
          description: "CI level. Default 0.95.",
        },
        fitConfidence: {
          type: "number",
          exclusiveMinimum: 0,
          exclusiveMaximum: 1,
          default: 0.99,
          description: "Chi-square gate level. Default 0.99.",
        },
        checkFit: { type: "boolean", default: true, description: "Apply the chi-square gate. Default true." },
        maxRelativeHalfWidth: {
          type: "number",
          exclusiveMinimum: 0,
          default: 0.5,
          description: "CI half-width limit, fraction. Default 0.5.",
        },
        rejectOnWarnings: {
          type: "array",
          maxItems: 10,
          items: { enum: Object.keys(STAT_WARNING_CODES) },
          default: ["STAT_RANK_DEFICIENT"],
          description: "Warnings that reject. Default [STAT_RANK_DEFICIENT].",
        },
        maxIterations: {
          type: "integer",
          minimum: 1,
          maximum: 10000,
          default: 100,
          description: "LM iterations. Default 100.",
        },
        historySize: {
          type: "integer",
          minimum: 1,
          maximum: 1000000,
          default: 1000,
          description: "History kept. Default 1000.",
        },
        restoreTimeoutMs: {
          type: "integer",
          minimum: 0,
          maximum: 60000,
          default: 1000,
          description: "State restore wait, ms. Default 1000.",
        },
      },
    },
  },
  ["siteModel"],
);
