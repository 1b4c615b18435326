/**
 * The recorder's configuration: the shared service options plus the SQLite file, batching and
 * retention. Validated once, then frozen.
 */
import { type BaseConfig, serviceConfigSchema } from "../kit/config.js";

/** The recorder's own options (after defaults). */
export interface RecorderOptions {
  /** SQLite file of the audit store (":memory:" for tests). Required. */
  dbFile: string;
  /** Rows per insert transaction. Default 500. */
  batchSize: number;
  /** Longest a received event waits in the queue before it is written, ms. Default 200. */
  flushMs: number;
  /** Oldest event kept, days; 0 keeps every age. Default 90. */
  retentionDays: number;
  /** Most events kept; 0 keeps any number. Default 5 000 000. */
  maxRows: number;
  /** Period of retention pruning, s. Default 3600. */
  pruneEveryS: number;
  /**
   * Durable subscription name. NATS: a JetStream durable consumer, so the recorder catches up on
   * what the stream kept while it was away (the stream itself is the durable store; SQLite is the
   * index). MQTT: needs a stable bus.clientId (persistent session). Default none.
   */
  durable?: string;
  /** Where a new durable subscription starts: "new" or "all" kept messages. Default "all". */
  deliverFrom: "new" | "all";
}

/** The recorder's whole config. */
export type RecorderConfig = BaseConfig & { recorder: RecorderOptions };

/** JSON Schema of the recorder's config, with defaults. */
export const recorderConfigSchema = serviceConfigSchema(
  {
    recorder: {
      type: "object",
      additionalProperties: false,
      required: ["dbFile"],
      properties: {
        dbFile: { type: "string", minLength: 1 },
        batchSize: { type: "integer", minimum: 1, maximum: 100000, default: 500 },
        flushMs: { type: "integer", minimum: 1, maximum: 60000, default: 200 },
        retentionDays: { type: "number", minimum: 0, default: 90 },
        maxRows: { type: "integer", minimum: 0, default: 5000000 },
        pruneEveryS: { type: "number", exclusiveMinimum: 0, default: 3600 },
        durable: { type: "string", pattern: "^[a-z0-9-]+$", maxLength: 64 },
        deliverFrom: { enum: ["new", "all"], default: "all" },
      },
    },
  },
  ["recorder"],
);
