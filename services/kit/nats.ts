/**
 * NATS adapter (nats.js v3). Core NATS for live subscriptions and queue groups; JetStream for
 * durability: a stream over each site's subjects, publishes with `Nats-Msg-Id` = event id so the
 * server drops duplicates, durable pull consumers with explicit acks and bounded redelivery, and a
 * KV bucket for state. A NATS cluster is the distributed engine; nothing here replaces it.
 *
 * Core publishes are coalesced: nats.js queues a publish and writes its buffer to the socket in a
 * microtask, so a handler that publishes one event per message costs one socket write per message
 * (the subscription loop awaits the handler, and the microtask runs before the next message). Here a
 * core publish goes into an outbox that is handed to nats.js at the end of the event-loop turn
 * (setImmediate), so the outputs of all messages that arrived in one socket read leave in one write.
 * Nothing is reordered: every other operation on the connection (JetStream publish, KV, request,
 * reply, ack, drain) first empties the outbox, and the outbox keeps publish order.
 */
import {
  AckPolicy,
  DeliverPolicy,
  type JetStreamClient,
  type JetStreamManager,
  jetstream,
  jetstreamManager,
  StorageType,
} from "@nats-io/jetstream";
import { type KV, Kvm } from "@nats-io/kv";
import { connect, type NatsConnection, nanos } from "@nats-io/transport-node";
import type { Bus, Capabilities, PublishOptions, RawHandler, SubscribeOptions, Subscription } from "./bus.js";
import { KitError } from "./errors.js";
import { assertSubject, matches } from "./subjects.js";

/** A JetStream stream the adapter keeps (creates when missing). */
export interface StreamSpec {
  /** Stream name, e.g. "rto-r1". */
  name: string;
  /** Subjects it captures, e.g. ["rto.r1.>"]. */
  subjects: string[];
  /** Oldest message kept, s. Default 7 days. */
  maxAgeS?: number;
  /** Duplicate-detection window for Nats-Msg-Id, s. Default 120. */
  duplicateWindowS?: number;
}

/** The stream that keeps one site's events. */
export function siteStream(site: string): StreamSpec {
  return { name: `rto-${site}`, subjects: [`rto.${site}.>`] };
}

/** Options of the NATS adapter. */
export interface NatsBusOptions {
  /** Server URL(s), e.g. nats://127.0.0.1:4222. */
  servers: string | string[];
  /** Connection name shown by the server. */
  name?: string;
  /** JetStream streams to keep; publishes to their subjects go through JetStream. Default none. */
  streams?: StreamSpec[];
  /** KV bucket for retained state. Default "rto-state". */
  stateBucket?: string;
  /** How long the server waits for an ack before redelivering, s. Default 30. */
  ackWaitS?: number;
  /** Deliveries before JetStream gives up on a message. Default 5. */
  maxDeliver?: number;
  /** Credentials, when the server asks for them. */
  user?: string;
  pass?: string;
  /** Called with errors the adapter cannot return to a caller. */
  onError?: (err: Error) => void;
  /**
   * Bytes of coalesced core publishes after which the outbox is handed to nats.js at once rather
   * than at the end of the event-loop turn. Default 65536 (nats.js itself writes at 32 KiB).
   */
  outboxBytes?: number;
}

/** Connects to NATS, makes sure the configured streams exist, and returns a Bus. */
export async function connectNats(options: NatsBusOptions): Promise<Bus> {
  let nc: NatsConnection;
  try {
    nc = await connect({
      servers: options.servers,
      name: options.name ?? "steadfast",
      // nats.js gives up after 10 reconnects by default; a plant service must never give up.
      maxReconnectAttempts: -1,
      reconnectTimeWait: 250,
      reconnectJitter: 250,
      ...(options.user ? { user: options.user } : {}),
      ...(options.pass ? { pass: options.pass } : {}),
    });
  } catch (err) {
    throw new KitError(
      "KIT_BUS_CONNECT",
      `NATS connect to ${String(options.servers)} failed: ${(err as Error).message}`,
      {
        cause: err,
      },
    );
  }
  const bus = new NatsBus(nc, options);
  await bus.init();
  return bus;
}

class NatsBus implements Bus {
  readonly transport = "nats" as const;
  readonly capabilities: Capabilities = {
    groups: true,
    durable: true,
    survivesBrokerRestart: true,
    state: true,
    requestReply: true,
  };
  private js!: JetStreamClient;
  private jsm!: JetStreamManager;
  private kv: KV | undefined;
  private readonly stops = new Set<() => Promise<void>>();
  private closing = false;
  /** Core publishes not yet handed to nats.js, in publish order (see the module comment). */
  private outbox: { subject: string; payload: Uint8Array }[] = [];
  private outboxSize = 0;
  private outboxTimer: NodeJS.Immediate | undefined;
  private readonly outboxLimit: number;

  constructor(
    private readonly nc: NatsConnection,
    private readonly o: NatsBusOptions,
  ) {
    this.outboxLimit = o.outboxBytes ?? 65_536;
  }

  /** Hands the coalesced core publishes to nats.js, in order (it writes them in one socket write). */
  private readonly flushOutbox = (): void => {
    if (this.outboxTimer !== undefined) {
      clearImmediate(this.outboxTimer);
      this.outboxTimer = undefined;
    }
    if (this.outbox.length === 0) return;
    const list = this.outbox;
    this.outbox = [];
    this.outboxSize = 0;
    for (const m of list) {
      try {
        this.nc.publish(m.subject, m.payload);
      } catch (err) {
        // publish() made the refusable ones at once; only a connection closed within this turn gets here.
        this.o.onError?.(err as Error);
      }
    }
  };

  async init(): Promise<void> {
    this.js = jetstream(this.nc);
    this.jsm = await jetstreamManager(this.nc);
    for (const s of this.o.streams ?? []) await this.ensureStream(s);
    (async () => {
      for await (const s of this.nc.status()) {
        if (s.type === "error") this.o.onError?.(new Error(`NATS: ${JSON.stringify(s)}`));
      }
    })().catch(() => undefined);
  }

  private async ensureStream(s: StreamSpec): Promise<void> {
    const config = {
      name: s.name,
      subjects: s.subjects,
      storage: StorageType.File,
      max_age: nanos((s.maxAgeS ?? 7 * 86_400) * 1000),
      duplicate_window: nanos((s.duplicateWindowS ?? 120) * 1000),
    };
    try {
      await this.jsm.streams.info(s.name);
    } catch {
      await this.jsm.streams.add(config);
    }
  }

  private streamOf(subject: string): StreamSpec | undefined {
    return (this.o.streams ?? []).find((s) => s.subjects.some((f) => matches(f, subject)));
  }

  private async state(): Promise<KV> {
    this.kv ??= await new Kvm(this.nc).create(this.o.stateBucket ?? "rto-state", { history: 1 });
    return this.kv;
  }

  async publish(subject: string, payload: Uint8Array, options: PublishOptions = {}): Promise<void> {
    if (this.closing) throw new KitError("KIT_BUS_CLOSED", "publish after close()");
    assertSubject(subject);
    if (this.streamOf(subject)) {
      this.flushOutbox();
      await this.js.publish(subject, payload, options.msgId ? { msgID: options.msgId } : {});
    } else {
      // A publish nats.js would refuse (closed connection, payload over the server's max_payload) is
      // made at once, so that the caller gets nats.js's error as before.
      const max = this.nc.info?.max_payload;
      if (this.nc.isClosed() || (max !== undefined && payload.byteLength > max)) {
        this.flushOutbox();
        this.nc.publish(subject, payload);
      } else {
        this.outbox.push({ subject, payload });
        this.outboxSize += payload.byteLength;
        if (this.outboxSize >= this.outboxLimit) this.flushOutbox();
        else this.outboxTimer ??= setImmediate(this.flushOutbox);
      }
    }
    if (options.retain) {
      this.flushOutbox();
      await (await this.state()).put(subject, payload);
    }
  }

  async subscribe(
    filter: string,
    handler: RawHandler,
    options: SubscribeOptions = {},
  ): Promise<Subscription> {
    if (this.closing) throw new KitError("KIT_BUS_CLOSED", "subscribe after close()");
    assertSubject(filter, true);
    if (options.group) assertSubject(options.group);
    return options.durable
      ? this.subscribeDurable(filter, handler, options)
      : this.subscribeCore(filter, handler, options);
  }

  private async subscribeCore(
    filter: string,
    handler: RawHandler,
    options: SubscribeOptions,
  ): Promise<Subscription> {
    const sub = this.nc.subscribe(filter, options.group ? { queue: options.group } : {});
    // Core NATS delivers only to interest the server already knows: resolve once it does, so a
    // publish right after subscribe() is not lost.
    await this.nc.flush();
    const done = (async () => {
      for await (const m of sub) {
        try {
          await handler({
            subject: m.subject,
            payload: m.data,
            redelivered: false,
            ...(m.reply
              ? {
                  respond: async (p: Uint8Array) => {
                    this.flushOutbox();
                    m.respond(p);
                  },
                }
              : {}),
          });
        } catch (err) {
          this.o.onError?.(err as Error);
        }
      }
    })();
    const stop = async () => {
      sub.unsubscribe();
      await done;
    };
    this.stops.add(stop);
    return {
      unsubscribe: async () => {
        this.stops.delete(stop);
        await stop();
      },
    };
  }

  private async subscribeDurable(
    filter: string,
    handler: RawHandler,
    options: SubscribeOptions,
  ): Promise<Subscription> {
    const stream = this.streamOf(filter.replace(/\.>$/, ".x").replace(/\*/g, "x"));
    if (!stream) {
      throw new KitError(
        "KIT_BUS_CAPABILITY",
        `durable subscription on '${filter}': no JetStream stream captures it`,
      );
    }
    const durable = options.durable as string;
    assertSubject(durable);
    try {
      await this.jsm.consumers.info(stream.name, durable);
    } catch {
      await this.jsm.consumers.add(stream.name, {
        durable_name: durable,
        ack_policy: AckPolicy.Explicit,
        filter_subject: filter,
        deliver_policy: options.deliverFrom === "all" ? DeliverPolicy.All : DeliverPolicy.New,
        ack_wait: nanos((this.o.ackWaitS ?? 30) * 1000),
        max_deliver: this.o.maxDeliver ?? 5,
      });
    }
    const consumer = await this.js.consumers.get(stream.name, durable);
    const messages = await consumer.consume({ max_messages: 256 });
    const done = (async () => {
      for await (const m of messages) {
        try {
          await handler({ subject: m.subject, payload: m.data, redelivered: m.redelivered });
          // The handler's core publishes go on the wire before the ack, so a crash cannot ack a
          // message whose outputs were never sent.
          this.flushOutbox();
          m.ack();
        } catch (err) {
          this.o.onError?.(err as Error);
          this.flushOutbox();
          // Back off before the redelivery; max_deliver bounds the attempts.
          m.nak(1000);
        }
      }
    })();
    const stop = async () => {
      await messages.close();
      await done;
    };
    this.stops.add(stop);
    return {
      unsubscribe: async () => {
        this.stops.delete(stop);
        await stop();
      },
    };
  }

  async request(
    subject: string,
    payload: Uint8Array,
    options: { timeoutMs?: number } = {},
  ): Promise<Uint8Array> {
    assertSubject(subject);
    this.flushOutbox();
    try {
      const reply = await this.nc.request(subject, payload, { timeout: options.timeoutMs ?? 5000 });
      return reply.data;
    } catch (err) {
      throw new KitError("KIT_REQUEST_TIMEOUT", `no reply on '${subject}': ${(err as Error).message}`, {
        cause: err,
      });
    }
  }

  async readState(subject: string): Promise<Uint8Array | undefined> {
    assertSubject(subject);
    this.flushOutbox();
    const entry = await (await this.state()).get(subject);
    return entry && entry.operation === "PUT" ? entry.value : undefined;
  }

  async close(): Promise<void> {
    if (this.closing) return;
    this.closing = true;
    await Promise.all([...this.stops].map((s) => s()));
    this.flushOutbox();
    await this.nc.drain();
  }
}
