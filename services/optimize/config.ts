/**
 * Optimize's configuration: the shared service options plus the site model file, the formulation,
 * the LP choice, the mismatch correction and the solver limits. Validated once at start-up
 * (loadConfig), then frozen.
 */
import { type BaseConfig, serviceConfigSchema } from "../kit/config.js";

/** Optimize's own options (after defaults). */
export interface OptimizeOptions {
  /** Path of the site-model YAML file. Required. */
  siteModelFile: string;
  /** NLP formulation: "sequential" (decisions only, model solved inside) or "simultaneous". Default "sequential". */
  formulation: "sequential" | "simultaneous";
  /** Tighten decision bounds to the current value ± maxMovePerCycle. Default true. */
  moveLimits: boolean;
  /** "auto": LP when the model is linear; "always": refuse a nonlinear model; "never": always SQP. Default "auto". */
  lp: "auto" | "always" | "never";
  /** LP solver: "auto" (javascript-lp-solver up to tinyLpMaxVariables, else HiGHS), "highs", "javascript-lp-solver". Default "auto". */
  lpSolver: "auto" | "highs" | "javascript-lp-solver";
  /** Largest LP (variables) that "auto" gives to javascript-lp-solver. Default 8. */
  tinyLpMaxVariables: number;
  /** Plant–model mismatch correction: "none", "bias" (output bias update) or "modifier" (modifier adaptation). Default "none". */
  mismatch: "none" | "bias" | "modifier";
  /** Filter gain K of the bias and modifier updates, in (0, 1]. Default 0.5. */
  gain: number;
  /** Largest condition number of the operating-point set accepted for a plant-gradient estimate. Default 100. */
  maxConditionNumber: number;
  /** SQP iteration limit. Default 100. */
  maxIterations: number;
  /** SQP optimality tolerance (relative, objective units). Default 1e-8. */
  tolerance: number;
  /** Snapshots kept to pair with model events of their cycle. Default 20. */
  snapshotsKept: number;
}

/** Optimize's whole config. */
export type OptimizeConfig = BaseConfig & { optimize: OptimizeOptions };

/** JSON Schema of optimize's config, with defaults. */
export const optimizeConfigSchema = serviceConfigSchema(
  {
    optimize: {
      type: "object",
      additionalProperties: false,
      required: ["siteModelFile"],
      properties: {
        siteModelFile: { type: "string", minLength: 1, description: "Path of the site-model YAML file." },
        formulation: { enum: ["sequential", "simultaneous"], default: "sequential" },
        moveLimits: { type: "boolean", default: true },
        lp: { enum: ["auto", "always", "never"], default: "auto" },
        lpSolver: { enum: ["auto", "highs", "javascript-lp-solver"], default: "auto" },
        tinyLpMaxVariables: { type: "integer", minimum: 0, maximum: 10000, default: 8 },
        mismatch: { enum: ["none", "bias", "modifier"], default: "none" },
        gain: { type: "number", exclusiveMinimum: 0, maximum: 1, default: 0.5 },
        maxConditionNumber: { type: "number", minimum: 1, default: 100 },
        maxIterations: { type: "integer", minimum: 1, maximum: 10000, default: 100 },
        tolerance: { type: "number", exclusiveMinimum: 0, maximum: 0.1, default: 1e-8 },
        snapshotsKept: { type: "integer", minimum: 1, maximum: 1000, default: 20 },
      },
    },
  },
  ["optimize"],
);
