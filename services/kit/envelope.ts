/**
 * CloudEvents 1.0 envelopes (structured JSON mode): creation with an injected clock, and
 * parse + validate of what arrives. Publishing an invalid event is a bug and throws; receiving
 * one is expected and returns a reason for the dead-letter stream.
 */
import type { Clock } from "./clock.js";
import { KitError } from "./errors.js";
import type { DeadLetter, EventDataMap, EventEnvelope, EventType } from "./generated/messages.js";
import { newId } from "./ids.js";
import { issuesOf, type SchemaIssue, type SchemaRegistry } from "./schemas.js";

/** An event of a known type, with its data typed by the schema. */
export type Event<T extends EventType = EventType> = Omit<EventEnvelope, "type" | "data"> & {
  type: T;
  data: EventDataMap[T];
};

/** Any event, discriminated on `type` so a `switch` can be checked for exhaustiveness. */
export type AnyEvent = { [K in EventType]: Event<K> }[EventType];

/** Who emits events: fills `source` and `site` of every envelope. */
export interface Emitter {
  site: string;
  service: string;
  instance: string;
  clock: Clock;
  registry: SchemaRegistry;
}

/** Options of one event. */
export interface EventOptions {
  /** RTO cycle the event belongs to; default: the cycle of `causedBy`, if any. */
  cycleid?: string;
  /** The event this one was computed from (sets `causationid`). */
  causedBy?: { id: string; cycleid?: string };
  /** Fixed id (for replay and tests); default: a new time-ordered id. */
  id?: string;
}

/** Builds and validates an event. Throws KitError KIT_EVENT_INVALID when `data` breaks its schema. */
export function createEvent<T extends EventType>(
  emitter: Emitter,
  type: T,
  data: EventDataMap[T],
  options: EventOptions = {},
): Event<T> {
  const now = emitter.clock.now();
  const event: Event<T> = {
    specversion: "1.0",
    id: options.id ?? newId(now),
    source: `/steadfast/${emitter.site}/${emitter.service}/${emitter.instance}`,
    type,
    time: new Date(now).toISOString(),
    datacontenttype: "application/json",
    dataschema: emitter.registry.schemaId(type),
    site: emitter.site,
    data,
  };
  const cycleid = options.cycleid ?? options.causedBy?.cycleid;
  if (cycleid) event.cycleid = cycleid;
  if (options.causedBy) event.causationid = options.causedBy.id;
  const check = checkEvent(emitter.registry, event);
  if (!check.ok) {
    throw new KitError(
      "KIT_EVENT_INVALID",
      `${emitter.service} built an invalid ${type}: ${check.detail} ${JSON.stringify(check.errors ?? [])}`,
    );
  }
  return event;
}

/** Serialises an event for the wire. */
export function encodeEvent(event: Event | AnyEvent): Buffer {
  return Buffer.from(JSON.stringify(event));
}

/** Why an inbound message was refused. */
export interface Refusal {
  ok: false;
  reason: DeadLetter["reason"];
  detail: string;
  errors?: SchemaIssue[];
  eventId?: string;
  eventType?: string;
}

/** Result of decoding an inbound message. */
export type Decoded = { ok: true; event: AnyEvent } | Refusal;

function checkEvent(registry: SchemaRegistry, value: unknown): Decoded {
  if (!registry.envelope(value)) {
    const e = value as Partial<EventEnvelope> | null;
    return {
      ok: false,
      reason: "schema-invalid",
      detail: "envelope does not match schemas/envelope.schema.json",
      errors: issuesOf(registry.envelope.errors),
      ...idAndType(e),
    };
  }
  const type = value.type;
  const validate = registry.has(type) ? registry.validatorOf(type) : undefined;
  if (!validate) {
    return {
      ok: false,
      reason: "unknown-type",
      detail: `no schema for event type '${type}'`,
      ...idAndType(value),
    };
  }
  if (!validate(value.data)) {
    return {
      ok: false,
      reason: "schema-invalid",
      detail: `data does not match the schema of ${type}`,
      errors: issuesOf(validate.errors).map((i) => ({ ...i, path: `/data${i.path === "/" ? "" : i.path}` })),
      ...idAndType(value),
    };
  }
  return { ok: true, event: value as unknown as AnyEvent };
}

function idAndType(e: Partial<EventEnvelope> | null): { eventId?: string; eventType?: string } {
  const out: { eventId?: string; eventType?: string } = {};
  if (e && typeof e === "object") {
    if (typeof e.id === "string") out.eventId = e.id.slice(0, 64);
    if (typeof e.type === "string") out.eventType = e.type.slice(0, 64);
  }
  return out;
}

/** Parses and validates an inbound payload. Never throws. */
export function decodeEvent(registry: SchemaRegistry, payload: Uint8Array, maxBytes: number): Decoded {
  if (payload.byteLength > maxBytes) {
    return {
      ok: false,
      reason: "too-large",
      detail: `payload of ${payload.byteLength} B exceeds the ${maxBytes} B limit`,
    };
  }
  let value: unknown;
  try {
    value = JSON.parse(Buffer.from(payload.buffer, payload.byteOffset, payload.byteLength).toString("utf8"));
  } catch (err) {
    return { ok: false, reason: "parse-error", detail: `not JSON: ${(err as Error).message}`.slice(0, 2000) };
  }
  return checkEvent(registry, value);
}
