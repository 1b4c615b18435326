/**
 * Ingest's configuration: the shared service options plus the site model file, the raw inputs and
 * the Sparkplug B host. Validated once at start-up (loadConfig), then frozen.
 */
import { type BaseConfig, serviceConfigSchema } from "../kit/config.js";

/** Ingest's own options (after defaults). */
export interface IngestOptions {
  /** Path of the site-model YAML file (tags, ranges, limits, source mappings). Required. */
  siteModelFile: string;
  /** Seconds between rto.tag-health.v1 reports. Default 10 s. */
  tagHealthIntervalS: number;
  /** Seconds between sweeps for tags that went silent (stale markers). Default 1 s. */
  staleCheckIntervalS: number;
  /** Let source quality "uncertain" pass as good. Default false. */
  acceptUncertain: boolean;
  /** Seconds a source time may lie ahead of ingest's clock before it counts as clock skew. Default 300 s. */
  maxClockSkewS: number;
  /** JSON batches (rto.measurements.v1 envelopes) on rto.<site>.raw.<source>. */
  raw: {
    /** Subscribe to rto.<site>.raw.>. Default true. */
    enabled: boolean;
    /** Load-sharing group for replicas (MQTT 5 shared subscription, NATS queue group). Default none. */
    group?: string;
  };
  /** Sparkplug B host application on an MQTT broker (a connection of its own: see README). */
  sparkplug: {
    /** Default false. */
    enabled: boolean;
    /** MQTT broker URL of the Sparkplug namespace. Default: bus.url when bus.transport is mqtt or embedded. */
    url?: string;
    /** Sparkplug group ids to subscribe to (spBv1.0/<group>/#). Default ["+"] (every group). */
    groups: string[];
    /** Host application id: when set, ingest publishes its STATE (spBv1.0/STATE/<hostId>). Default none. */
    hostId?: string;
    /** How long an out-of-order message waits for the missing seq before a rebirth is asked, ms. Default 2000 ms. */
    reorderTimeoutMs: number;
    /** Least time between two rebirth requests to one edge node, ms. Default 5000 ms. */
    rebirthHoldOffMs: number;
    /** Period of the reorder-window check, ms. Default 250 ms. */
    tickMs: number;
    username?: string;
    password?: string;
  };
}

/** Ingest's whole config. */
export type IngestConfig = BaseConfig & { ingest: IngestOptions };

/** JSON Schema of ingest's config, with defaults. */
export const ingestConfigSchema = serviceConfigSchema(
  {
    ingest: {
      type: "object",
      additionalProperties: false,
      required: ["siteModelFile"],
      properties: {
        siteModelFile: { type: "string", minLength: 1, description: "Path of the site-model YAML file." },
        tagHealthIntervalS: {
          type: "number",
          exclusiveMinimum: 0,
          maximum: 86400,
          default: 10,
          description: "Seconds between tag-health reports. Default 10.",
        },
        staleCheckIntervalS: {
          type: "number",
          exclusiveMinimum: 0,
          maximum: 3600,
          default: 1,
          description: "Seconds between sweeps for silent tags. Default 1.",
        },
        acceptUncertain: {
          type: "boolean",
          default: false,
          description: "Uncertain quality passes. Default false.",
        },
        maxClockSkewS: {
          type: "number",
          exclusiveMinimum: 0,
          default: 300,
          description: "Largest lead of a source time over ingest's clock, s. Default 300.",
        },
        raw: {
          type: "object",
          additionalProperties: false,
          default: {},
          properties: {
            enabled: { type: "boolean", default: true },
            group: { type: "string", pattern: "^[a-z0-9-]+$", maxLength: 40 },
          },
        },
        sparkplug: {
          type: "object",
          additionalProperties: false,
          default: {},
          properties: {
            enabled: { type: "boolean", default: false },
            url: { type: "string", minLength: 1 },
            groups: {
              type: "array",
              items: { type: "string", pattern: "^[^/#]+$", maxLength: 200 },
              minItems: 1,
              maxItems: 100,
              default: ["+"],
            },
            hostId: { type: "string", pattern: "^[^/#+]+$", maxLength: 200 },
            reorderTimeoutMs: { type: "integer", minimum: 1, default: 2000 },
            rebirthHoldOffMs: { type: "integer", minimum: 0, default: 5000 },
            tickMs: { type: "integer", minimum: 10, maximum: 60000, default: 250 },
            username: { type: "string", maxLength: 64 },
            password: { type: "string", maxLength: 256 },
          },
        },
      },
    },
  },
  ["ingest"],
);
