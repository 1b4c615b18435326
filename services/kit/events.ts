/**
 * The typed layer over a Bus: publish validated events; receive, parse, validate, de-duplicate and
 * handle them, and send whatever cannot be handled to the site's dead-letter stream with the reason.
 * The raw message is acknowledged only when the handler finished or the message was dead-lettered.
 */
import type { Bus, SubscribeOptions, Subscription } from "./bus.js";
import {
  type AnyEvent,
  createEvent,
  decodeEvent,
  type Emitter,
  type Event,
  type EventOptions,
  encodeEvent,
  type Refusal,
} from "./envelope.js";
import type { DeadLetter, EventDataMap, EventType } from "./generated/messages.js";
import type { Logger } from "./log.js";
import { type KitMetrics, streamLabel } from "./metrics.js";
import { subject } from "./subjects.js";

/** Options of the event layer. */
export interface EventsOptions {
  /** Largest accepted payload, bytes. Default 1 MiB. */
  maxBytes?: number;
  /** Handler attempts before a message is dead-lettered. Default 3. */
  maxAttempts?: number;
  /** Pause between handler attempts, ms (doubles each time). Default 50. */
  retryDelayMs?: number;
  /** Event ids remembered for de-duplication. Default 10000. */
  dedupeSize?: number;
}

/** What a handler is told besides the event. */
export interface HandlerContext {
  /** Neutral subject it came on. */
  subject: string;
  /** The broker may have delivered it before. */
  redelivered: boolean;
  /** Present for requests: send one reply event. */
  reply?: <T extends EventType>(type: T, data: EventDataMap[T]) => Promise<void>;
}

/** Handles one event of the accepted types. */
export type EventHandler<T extends EventType> = (
  event: Event<T>,
  ctx: HandlerContext,
) => Promise<void> | void;

/** A bounded set of recently seen ids, oldest evicted first. */
export class SeenIds {
  private readonly set = new Set<string>();
  constructor(private readonly capacity: number) {}
  has(id: string): boolean {
    return this.set.has(id);
  }
  add(id: string): void {
    if (this.set.has(id)) return;
    this.set.add(id);
    if (this.set.size > this.capacity) {
      const oldest = this.set.values().next().value;
      if (oldest !== undefined) this.set.delete(oldest);
    }
  }
  get size(): number {
    return this.set.size;
  }
}

/** Dependencies of the event layer. */
export interface EventsDeps {
  bus: Bus;
  emitter: Emitter;
  log: Logger;
  metrics?: KitMetrics;
}

/** Counts kept for the heartbeat. */
export interface EventCounts {
  in: number;
  out: number;
  deadLettered: number;
}

/** Typed publish and subscribe for one service. */
export class Events {
  readonly counts: EventCounts = { in: 0, out: 0, deadLettered: 0 };
  private readonly seen: SeenIds;
  private readonly maxBytes: number;
  private readonly maxAttempts: number;
  private readonly retryDelayMs: number;

  constructor(
    private readonly deps: EventsDeps,
    options: EventsOptions = {},
  ) {
    this.maxBytes = options.maxBytes ?? 1024 * 1024;
    this.maxAttempts = options.maxAttempts ?? 3;
    this.retryDelayMs = options.retryDelayMs ?? 50;
    this.seen = new SeenIds(options.dedupeSize ?? 10_000);
  }

  /** The site this service belongs to. */
  get site(): string {
    return this.deps.emitter.site;
  }

  /** Neutral subject of one of this site's streams. */
  subject(stream: string): string {
    return subject(this.deps.emitter.site, stream);
  }

  /** Builds, validates and publishes an event on this site's `stream`. Throws on an invalid event (a bug). */
  async publish<T extends EventType>(
    stream: string,
    type: T,
    data: EventDataMap[T],
    options: EventOptions & { retain?: boolean } = {},
  ): Promise<Event<T>> {
    const event = createEvent(this.deps.emitter, type, data, options);
    await this.publishEvent(this.subject(stream), event, options.retain ?? false);
    return event;
  }

  /** Publishes an already built event on a neutral subject. */
  async publishEvent(to: string, event: Event | AnyEvent, retain = false): Promise<void> {
    await this.deps.bus.publish(to, encodeEvent(event), { msgId: event.id, retain });
    this.counts.out++;
    this.deps.metrics?.messagesOut.inc({ stream: streamLabel(to) });
  }

  /**
   * Subscribes to a neutral subject filter, accepting the listed event types. Anything else —
   * unparseable, invalid, too large, of another type, or a handler that keeps failing — goes to
   * the dead-letter stream with the reason, and the service goes on.
   */
  async on<T extends EventType>(
    filter: string,
    types: readonly T[],
    handler: EventHandler<T>,
    options: SubscribeOptions = {},
  ): Promise<Subscription> {
    const accepted = new Set<string>(types);
    return this.deps.bus.subscribe(
      filter,
      async (msg) => {
        // The label is only needed for metrics; computing it per message costs a split and a join.
        const metrics = this.deps.metrics;
        const label = metrics ? streamLabel(msg.subject) : "";
        this.counts.in++;
        metrics?.messagesIn.inc({ stream: label });
        const decoded = decodeEvent(this.deps.emitter.registry, msg.payload, this.maxBytes);
        if (!decoded.ok) {
          await this.deadLetter(msg.subject, msg.payload, decoded);
          return;
        }
        const event = decoded.event;
        if (!accepted.has(event.type)) {
          await this.deadLetter(msg.subject, msg.payload, {
            ok: false,
            reason: "unknown-type",
            detail: `type '${event.type}' is not accepted on this subscription (accepts ${[...accepted].join(", ")})`,
            eventId: event.id,
            eventType: event.type,
          });
          return;
        }
        if (this.seen.has(event.id)) return;
        const ctx: HandlerContext = { subject: msg.subject, redelivered: msg.redelivered };
        if (msg.respond) {
          const respond = msg.respond;
          ctx.reply = async (type, data) => {
            await respond(encodeEvent(createEvent(this.deps.emitter, type, data, { causedBy: event })));
          };
        }
        const stop = metrics?.handlerSeconds.startTimer({ stream: label });
        let lastError: unknown;
        for (let attempt = 1; attempt <= this.maxAttempts; attempt++) {
          try {
            await handler(event as Event<T>, ctx);
            this.seen.add(event.id);
            stop?.();
            return;
          } catch (err) {
            lastError = err;
            this.deps.log.warn({ err, eventId: event.id, attempt, subject: msg.subject }, "handler failed");
            if (attempt < this.maxAttempts) await sleep(this.retryDelayMs * 2 ** (attempt - 1));
          }
        }
        stop?.();
        this.seen.add(event.id);
        const e = lastError as { code?: string; message?: string } | undefined;
        await this.deadLetter(
          msg.subject,
          msg.payload,
          {
            ok: false,
            reason: "handler-failed",
            detail: `${e?.code ? `${e.code}: ` : ""}${e?.message ?? String(lastError)}`.slice(0, 2000),
            eventId: event.id,
            eventType: event.type,
          },
          this.maxAttempts,
        );
      },
      options,
    );
  }

  /** Publishes a dead letter on this site's `deadletter` stream. */
  async deadLetter(from: string, payload: Uint8Array, refusal: Refusal, attempts?: number): Promise<void> {
    const data: DeadLetter = {
      reason: refusal.reason,
      detail: refusal.detail.slice(0, 2000),
      subject: from.slice(0, 300),
      service: this.deps.emitter.service,
      payloadBytes: payload.byteLength,
      payloadHead: Buffer.from(payload.buffer, payload.byteOffset, Math.min(1024, payload.byteLength))
        .toString("utf8")
        .slice(0, 2048),
    };
    if (refusal.errors?.length) data.errors = refusal.errors;
    if (refusal.eventId) data.eventId = refusal.eventId;
    if (refusal.eventType) data.eventType = refusal.eventType;
    if (attempts !== undefined) data.attempts = attempts;
    this.counts.deadLettered++;
    this.deps.metrics?.deadLettered.inc({ stream: streamLabel(from), reason: refusal.reason });
    this.deps.log.warn({ subject: from, reason: refusal.reason, detail: data.detail }, "dead-lettered");
    await this.publish("deadletter", "rto.deadletter.v1", data);
  }
}

function sleep(ms: number): Promise<void> {
  return new Promise((r) => setTimeout(r, ms));
}
