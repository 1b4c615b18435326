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
  /**
   * Smallest spread of the operating points accepted for a plant-gradient estimate: the root of the
   * smallest eigenvalue of their weighted scatter, each decision divided by its move limit. Default 0.2.
   */
  minSpread: number;
  /**
   * Excitation step of modifier adaptation, as a fraction of the move limits; 0 turns excitation off
   * (and lets modifier adaptation stall once the operating points coincide). Default 0.5.
   */
  excitation: number;
  /** Most repeated steady states at one operating point averaged into it. Default 5. */
  maxSamplesPerPoint: number;
  /** Distinct operating points the mismatch plane is fitted to (at least n+1 are used). Default 6. */
  maxPoints: number;
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
        minSpread: { type: "number", minimum: 0, maximum: 10, default: 0.2 },
        maxPoints: { type: "integer", minimum: 2, maximum: 100, default: 6 },
        excitation: { type: "number", minimum: 0, maximum: 1, default: 0.5 },
        maxSamplesPerPoint: { type: "integer", minimum: 1, maximum: 1000, default: 5 },
        maxIterations: { type: "integer", minimum: 1, maximum: 10000, default: 100 },
        tolerance: { type: "number", exclusiveMinimum: 0, maximum: 0.1, default: 1e-8 },
        snapshotsKept: { type: "integer", minimum: 1, maximum: 1000, default: 20 },
      },
    },
  },
  ["optimize"],
);
