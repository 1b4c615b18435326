/**
 * The one small interface every transport implements. Subjects are neutral (`rto.<site>.<stream>`,
 * words separated by dots, `*` and `>` wildcards in filters); each adapter spells them its own way.
 */

/** A message as the transport delivered it. */
export interface RawMessage {
  /** Neutral subject it arrived on. */
  subject: string;
  payload: Uint8Array;
  /** True when the broker says it may have been delivered before. */
  redelivered: boolean;
  /** Present when the sender waits for a reply (request/reply). */
  respond?: (payload: Uint8Array) => Promise<void>;
}

/**
 * Handles one message. The adapter acknowledges the message to the broker only after the returned
 * promise settles, so a crash mid-handler means redelivery, not loss.
 */
export type RawHandler = (msg: RawMessage) => Promise<void> | void;

/** Options of a subscription. */
export interface SubscribeOptions {
  /** Load-sharing group: each message goes to exactly one member. [a-z0-9-]. Default: none. */
  group?: string;
  /**
   * Durable name: messages published while the subscriber is away are kept for it.
   * MQTT: needs a stable clientId (the persistent session holds them). NATS: a JetStream durable consumer.
   */
  durable?: string;
  /** Where a new durable subscription starts: "new" (default) or "all" kept messages. */
  deliverFrom?: "new" | "all";
}

/** Options of a publish. */
export interface PublishOptions {
  /** De-duplication id (the event id); NATS JetStream drops a repeat within its window. */
  msgId?: string;
  /** Keep as the subject's current state (MQTT retained message; NATS KV entry). Default false. */
  retain?: boolean;
}

/** What a transport can do; the contract suite tests each capability where it exists. */
export interface Capabilities {
  /** Load-sharing groups. */
  groups: boolean;
  /** Durable subscriptions that outlive the subscriber. */
  durable: boolean;
  /** Messages kept across a broker restart. */
  survivesBrokerRestart: boolean;
  /** Retained state per subject. */
  state: boolean;
  /** Request/reply. */
  requestReply: boolean;
}

/** A live subscription. */
export interface Subscription {
  /** Stops delivery. A durable subscription keeps its place on the broker. */
  unsubscribe(): Promise<void>;
}

/** A connection to one broker. */
export interface Bus {
  readonly transport: "mqtt" | "nats" | "embedded";
  readonly capabilities: Capabilities;
  /**
   * Publishes and resolves when the broker has it (QoS 1 PUBACK, JetStream PubAck); a core NATS publish
   * (no stream) resolves once queued, and leaves with the others of the same event-loop turn (nats.ts).
   */
  publish(subject: string, payload: Uint8Array, options?: PublishOptions): Promise<void>;
  /** Subscribes `handler` to a subject filter. Messages of one subscription are handled one at a time, in order. */
  subscribe(filter: string, handler: RawHandler, options?: SubscribeOptions): Promise<Subscription>;
  /** Sends a request and waits for one reply. */
  request(subject: string, payload: Uint8Array, options?: { timeoutMs?: number }): Promise<Uint8Array>;
  /** Reads the retained state of a subject, or undefined when there is none. */
  readState(subject: string, options?: { timeoutMs?: number }): Promise<Uint8Array | undefined>;
  /** Drains in-flight handlers and closes the connection. */
  close(): Promise<void>;
}

/** Runs async tasks one after another (per-subscription ordering). */
export class SerialQueue {
  private tail: Promise<void> = Promise.resolve();
  /** Queues `task`; resolves when it has run. */
  push(task: () => Promise<void> | void): Promise<void> {
    const next = this.tail.then(task, task);
    this.tail = next.catch(() => undefined);
    return next;
  }
  /** Resolves when every queued task has run. */
  idle(): Promise<void> {
    return this.tail;
  }
}
