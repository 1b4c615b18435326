/**
 * Steady's configuration: the shared service options plus the site model file and the few detector
 * options the site model's steadyState policy does not carry. Validated once, then frozen.
 */
import { type BaseConfig, serviceConfigSchema } from "../kit/config.js";

/** Steady's own options (after defaults). */
export interface SteadyOptions {
  /** Path of the site-model YAML file (key tags, steadyState policy). Required. */
  siteModelFile: string;
  /**
   * R above which a steady tag turns transient (the hysteresis' upper threshold). Default: 1.73 when the
   * policy's rCritical is the published 1.44 for λ = (0.2, 0.1, 0.1), else rCritical × 1.73/1.44
   * (the same relative gap; common practice, no source).
   */
  transientThreshold?: number;
  /** Samples per tag with no verdict. Default ceil(5 / min λ) (50 for the default λ). */
  warmupSamples?: number;
  /** Fewest good samples a tag needs in the window to enter a snapshot. Default 2. */
  minSnapshotSamples: number;
  /**
   * Flag a tag "noisy" (not steady) when its high-frequency variance exceeds what its site-model sigma
   * allows (detector.ts, noiseRatioLimit). Default true.
   */
  noiseTest: boolean;
  /** Confidence of the noise-level test. Default 0.999. */
  noiseConfidence?: number;
  /** Confidence below which a noisy tag is clear again (hysteresis). Default 0.99. */
  noiseClearConfidence?: number;
  /** Take command times from rto.<site>.command (issuedAt) and rto.<site>.readback. Default true. */
  followCommands: boolean;
}

/** Steady's whole config. */
export type SteadyConfig = BaseConfig & { steady: SteadyOptions };

/** JSON Schema of steady's config, with defaults. */
export const steadyConfigSchema = serviceConfigSchema(
  {
    steady: {
      type: "object",
      additionalProperties: false,
      required: ["siteModelFile"],
      properties: {
        siteModelFile: { type: "string", minLength: 1, description: "Path of the site-model YAML file." },
        transientThreshold: { type: "number", exclusiveMinimum: 0, description: "Upper R threshold." },
        warmupSamples: { type: "integer", minimum: 2, description: "Samples with no verdict per tag." },
        minSnapshotSamples: { type: "integer", minimum: 2, default: 2 },
        followCommands: { type: "boolean", default: true },
        noiseTest: { type: "boolean", default: true, description: "Noise-level test on declared sigma." },
        noiseConfidence: { type: "number", exclusiveMinimum: 0, exclusiveMaximum: 1 },
        noiseClearConfidence: { type: "number", exclusiveMinimum: 0, exclusiveMaximum: 1 },
      },
    },
  },
  ["steady"],
);
