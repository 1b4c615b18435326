/**
 * Typed errors for the shared runtime. Callers branch on `code`, never on message text.
 * A retired code is never reused; `KIT_ERROR_CODES` is the registry, and DEVELOPERS.md lists it.
 */

/** Base of every error the project throws on purpose: a stable `code` and an optional `cause`. */
export abstract class SteadfastError extends Error {
  abstract readonly code: string;
  constructor(message: string, options?: ErrorOptions) {
    super(message, options);
  }
}

/** Registry of the kit's error codes, with the one-line meaning shown in the docs. */
export const KIT_ERROR_CODES = {
  KIT_CONFIG_INVALID: "a service's configuration failed its schema; the message names the JSON path",
  KIT_SUBJECT_INVALID: "a site id or stream name is not [a-z0-9-] (dots separate stream words)",
  KIT_EVENT_INVALID: "an event the service tried to publish failed its schema (a bug in the sender)",
  KIT_SCHEMA_UNKNOWN: "no schema is registered for the event type",
  KIT_BUS_CLOSED: "the bus was used after close()",
  KIT_BUS_CAPABILITY: "the transport lacks a capability asked for (e.g. load-sharing groups on aedes)",
  KIT_BUS_CONNECT: "the transport could not connect to its broker",
  KIT_REQUEST_TIMEOUT: "a request got no reply in time",
  KIT_BROKER_UNAVAILABLE: "no broker could be found or started for the tests",
} as const;

export type KitErrorCode = keyof typeof KIT_ERROR_CODES;

/** An error raised by the shared runtime (services/kit). */
export class KitError extends SteadfastError {
  override readonly name = "KitError";
  constructor(
    readonly code: KitErrorCode,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}
