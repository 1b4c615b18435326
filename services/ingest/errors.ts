/**
 * Typed errors for ingestion. Callers branch on `code`, never on message text.
 * A retired code is never reused; `INGEST_ERROR_CODES` is the registry, and DEVELOPERS.md lists it.
 */
import { SteadfastError } from "../kit/errors.js";

/** Registry of ingest's error codes, with the one-line meaning shown in the docs. */
export const INGEST_ERROR_CODES = {
  INGEST_TAG_SPEC_INVALID:
    "a tag spec has a bad range or limit, or repeats a tag id; the message names the tag",
  INGEST_CSV_HEADER: "a CSV file has no header, or its header does not fit the long or wide format",
  INGEST_CSV_ROW:
    "a CSV row has the wrong number of fields or an unterminated quote; the error names the line",
  INGEST_CSV_TIME:
    "a CSV time cell is not an ISO 8601 time or epoch number, or falls in a DST gap when told to refuse",
  INGEST_CSV_VALUE: "a CSV value cell is not a number; the error names the line and column",
  INGEST_TIME_ZONE: "the configured time zone is not a valid IANA zone name",
  INGEST_SPARKPLUG_TOPIC: "an MQTT topic is not a Sparkplug B (spBv1.0) topic",
  INGEST_SPARKPLUG_PAYLOAD: "a Sparkplug B payload could not be decoded",
  INGEST_SPARKPLUG_CONFIG: "Sparkplug B is enabled but no MQTT broker URL is configured for it",
  INGEST_REPLAY_OPTIONS: "CSV replay was given neither a bus nor a callback, or a bad speed-up",
} as const;

export type IngestErrorCode = keyof typeof INGEST_ERROR_CODES;

/** An error raised by ingestion (services/ingest). `line` is the 1-based source line where there is one. */
export class IngestError extends SteadfastError {
  override readonly name = "IngestError";
  constructor(
    readonly code: IngestErrorCode,
    message: string,
    readonly line?: number,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}
