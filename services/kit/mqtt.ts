/**
 * MQTT adapter (mqtt.js 5). MQTT 5 against a full broker (Mosquitto): QoS 1, persistent session,
 * shared subscriptions for groups, request/reply through response-topic properties. MQTT 3.1.1
 * against the embedded broker (aedes speaks nothing newer): persistent session, no groups, no
 * request/reply — and a clear error instead of silently losing messages when one is asked for.
 */
import { randomBytes } from "node:crypto";
import mqtt, { type IClientOptions, type IPublishPacket, type MqttClient } from "mqtt";
import type {
  Bus,
  Capabilities,
  PublishOptions,
  RawHandler,
  RawMessage,
  SubscribeOptions,
  Subscription,
} from "./bus.js";
import { SerialQueue } from "./bus.js";
import { KitError } from "./errors.js";
import { assertSubject, fromMqtt, matches, toMqtt } from "./subjects.js";

/** Options of the MQTT adapter. */
export interface MqttBusOptions {
  /** Broker URL, e.g. mqtt://127.0.0.1:1883. */
  url: string;
  /** Client id; stable across restarts for a durable (persistent) session. Default: random. */
  clientId?: string;
  /** 5 for Mosquitto (default), 4 (MQTT 3.1.1) for the embedded broker. */
  protocolVersion?: 4 | 5;
  /** Seconds the broker keeps the session (and queued QoS 1 messages) after a disconnect. Default 3600. */
  sessionExpiryS?: number;
  /** Last Will: published by the broker if this client vanishes. */
  will?: { subject: string; payload: Uint8Array; retain?: boolean };
  /** Reconnect backoff: first delay, ms. Default 250. */
  reconnectMinMs?: number;
  /** Reconnect backoff: longest delay, ms. Default 10000. */
  reconnectMaxMs?: number;
  /** Give up the first connect after this long, ms. Default 10000. */
  connectTimeoutMs?: number;
  /** How long a message that matches no handler yet is parked before it is dropped, ms. Default 5000. */
  unmatchedHoldMs?: number;
  /** Username and password, when the broker asks for them. */
  username?: string;
  password?: string;
  /** Called with errors the adapter cannot return to a caller (handler crash, connection trouble). */
  onError?: (err: Error) => void;
  /** Label for `transport`: "embedded" when talking to the in-process broker. Default "mqtt". */
  transportLabel?: "mqtt" | "embedded";
}

interface Entry {
  /** MQTT 5 subscription identifier: routes a message to the subscription(s) it was delivered for. */
  id: number;
  filter: string;
  durable: boolean;
  handler: RawHandler;
  queue: SerialQueue;
  mqttFilter: string;
}

const INBOX = "steadfast-inbox";

/** Connects to an MQTT broker and returns a Bus. */
export async function connectMqtt(options: MqttBusOptions): Promise<Bus> {
  const bus = new MqttBus(options);
  await bus.connect();
  return bus;
}

class MqttBus implements Bus {
  readonly transport: "mqtt" | "embedded";
  readonly capabilities: Capabilities;
  /** Receives: persistent session, handlers acknowledged one message at a time. */
  private client!: MqttClient;
  /**
   * Publishes. A second connection, because mqtt.js reads incoming packets strictly in order: a
   * handler that awaited the PUBACK of its own publish on the receiving connection would wait for
   * a packet queued behind the message it is handling.
   */
  private pub!: MqttClient;
  private readonly entries = new Set<Entry>();
  private readonly pending = new Map<string, (payload: Uint8Array) => void>();
  private readonly clientId: string;
  private readonly v5: boolean;
  private closing = false;
  private firstConnect = true;
  private nextId = 1;
  private attempt = 0;
  private readonly reconnectTimers = new Map<MqttClient, NodeJS.Timeout>();
  private inflight = 0;
  private drained: (() => void) | undefined;
  private parked: RawMessage[] = [];
  private parkTimer: NodeJS.Timeout | undefined;

  constructor(private readonly o: MqttBusOptions) {
    this.v5 = (o.protocolVersion ?? 5) === 5;
    this.transport = o.transportLabel ?? "mqtt";
    this.clientId = o.clientId ?? `sf-${randomBytes(6).toString("hex")}`;
    this.capabilities = {
      groups: this.v5,
      durable: true,
      survivesBrokerRestart: this.transport === "mqtt",
      state: true,
      requestReply: this.v5,
    };
  }

  async connect(): Promise<void> {
    const opts: IClientOptions = {
      clientId: this.clientId,
      protocolVersion: this.v5 ? 5 : 4,
      // Only a client with a stable id can resume its session; a random id gets a clean one.
      clean: this.o.clientId === undefined,
      // Our own backoff with jitter replaces mqtt.js's fixed reconnect period.
      reconnectPeriod: 0,
      connectTimeout: this.o.connectTimeoutMs ?? 10_000,
      keepalive: 30,
      resubscribe: false,
    };
    if (this.v5 && !opts.clean) opts.properties = { sessionExpiryInterval: this.o.sessionExpiryS ?? 3600 };
    if (this.o.username) opts.username = this.o.username;
    if (this.o.password) opts.password = this.o.password;
    if (this.o.will) {
      opts.will = {
        topic: toMqtt(this.o.will.subject),
        payload: Buffer.from(this.o.will.payload),
        qos: 1,
        retain: this.o.will.retain ?? false,
      };
    }
    const client = mqtt.connect(this.o.url, opts);
    this.client = client;
    // PUBACK goes out only when this callback runs: after the handlers finished (mqtt.js calls
    // handleMessage one message at a time and acknowledges when it calls back).
    client.handleMessage = (packet, callback) => {
      this.dispatch(packet).then(
        () => callback(),
        (err: Error) => {
          this.o.onError?.(err);
          callback();
        },
      );
    };
    const pubOpts: IClientOptions = { ...opts, clientId: `${this.clientId}-pub`, clean: true };
    delete pubOpts.will;
    delete pubOpts.properties;
    this.pub = mqtt.connect(this.o.url, pubOpts);
    for (const c of [client, this.pub]) {
      c.on("error", (err) => this.o.onError?.(err));
      c.on("close", () => this.scheduleReconnect(c));
      c.on("connect", () => {
        this.attempt = 0;
      });
    }
    // mqtt.js only resubscribes by itself with its fixed reconnect period; with our backoff we
    // renew the subscriptions when the broker has lost the session (restart without a store).
    client.on("connect", (ack) => {
      if (!ack.sessionPresent && !this.firstConnect) this.resubscribe();
    });
    await Promise.all([client, this.pub].map((c) => this.awaitConnect(c, opts.connectTimeout ?? 10_000)));
    this.firstConnect = false;
    if (this.v5) {
      await this.client.subscribeAsync(`${INBOX}/${this.clientId}/#`, { qos: 0 });
    }
  }

  private resubscribe(): void {
    const subs = [...this.entries].map((e) => this.subscribePacket(e));
    if (this.v5)
      subs.push(this.client.subscribeAsync(`${INBOX}/${this.clientId}/#`, { qos: 0 }).then(() => undefined));
    Promise.all(subs).catch((err: Error) => this.o.onError?.(err));
  }

  private async subscribePacket(entry: Entry): Promise<void> {
    await this.client.subscribeAsync(
      entry.mqttFilter,
      this.v5 ? { qos: 1, properties: { subscriptionIdentifier: entry.id } } : { qos: 1 },
    );
  }

  private awaitConnect(client: MqttClient, timeoutMs: number): Promise<void> {
    return new Promise<void>((resolve, reject) => {
      const done = (err?: Error) => {
        clearTimeout(timer);
        client.removeListener("connect", onConnect);
        client.removeListener("error", onError);
        if (!err) return resolve();
        client.end(true);
        reject(err);
      };
      const onConnect = () => done();
      const onError = (err: Error) =>
        done(
          new KitError("KIT_BUS_CONNECT", `MQTT connect to ${this.o.url} failed: ${err.message}`, {
            cause: err,
          }),
        );
      const timer = setTimeout(
        () =>
          done(new KitError("KIT_BUS_CONNECT", `no MQTT connection to ${this.o.url} within ${timeoutMs} ms`)),
        timeoutMs,
      );
      client.on("connect", onConnect);
      client.on("error", onError);
    });
  }

  private scheduleReconnect(client: MqttClient): void {
    if (this.closing || this.reconnectTimers.has(client)) return;
    const min = this.o.reconnectMinMs ?? 250;
    const max = this.o.reconnectMaxMs ?? 10_000;
    // Exponential backoff with "equal jitter", so that a fleet of services does not reconnect in lockstep.
    const base = Math.min(max, min * 2 ** this.attempt);
    const delay = base / 2 + Math.random() * (base / 2);
    this.attempt++;
    this.reconnectTimers.set(
      client,
      setTimeout(() => {
        this.reconnectTimers.delete(client);
        if (!this.closing) client.reconnect();
      }, delay),
    );
  }

  private async dispatch(packet: IPublishPacket): Promise<void> {
    const topic = packet.topic;
    if (topic.startsWith(`${INBOX}/`)) {
      const corr = packet.properties?.correlationData?.toString("hex");
      const resolve = corr ? this.pending.get(corr) : undefined;
      if (resolve) resolve(packet.payload as Buffer);
      return;
    }
    const subject = fromMqtt(topic);
    const responseTopic = packet.properties?.responseTopic;
    const correlationData = packet.properties?.correlationData;
    const msg: RawMessage = { subject, payload: packet.payload as Buffer, redelivered: packet.dup };
    if (responseTopic) {
      msg.respond = async (payload) => {
        await this.pub.publishAsync(responseTopic, Buffer.from(payload), {
          qos: 0,
          properties: correlationData ? { correlationData } : {},
        });
      };
    }
    const targets = this.targets(subject, packet.properties?.subscriptionIdentifier);
    if (targets.length === 0 && packet.qos > 0) {
      this.park(msg);
      return;
    }
    this.inflight++;
    try {
      const runs = targets.map((e) => e.queue.push(() => e.handler(msg)));
      // QoS 0 (replies, best-effort streams) must not block the client's message stream.
      if (packet.qos > 0) await Promise.all(runs);
      else for (const r of runs) r.catch((err: Error) => this.o.onError?.(err));
    } finally {
      this.inflight--;
      if (this.inflight === 0) this.drained?.();
    }
  }

  private targets(subject: string, ids?: number | number[]): Entry[] {
    const out: Entry[] = [];
    if (ids !== undefined) {
      // The broker sends one copy per matching subscription (a shared and a plain one overlap);
      // the identifiers say which subscription each copy is for.
      const wanted = Array.isArray(ids) ? ids : [ids];
      for (const e of this.entries) if (wanted.includes(e.id)) out.push(e);
      if (out.length > 0) return out;
    }
    for (const e of this.entries) if (matches(e.filter, subject)) out.push(e);
    return out;
  }

  /**
   * A resumed persistent session delivers its queued messages right after CONNACK, before the
   * service has re-registered its handlers. Blocking here would also block the SUBACK behind them
   * (mqtt.js reads packets in order), so the message is parked — acknowledged, kept in memory, and
   * handed over in order when a matching handler registers. Parked messages are the one case where
   * the PUBACK precedes the handler; a crash within the hold time would lose them.
   */
  private park(msg: RawMessage): void {
    if (this.parked.length >= 10_000) {
      this.o.onError?.(
        new Error(`MQTT: more than 10000 messages without a handler; dropping '${msg.subject}'`),
      );
      return;
    }
    this.parked.push(msg);
    this.parkTimer ??= setTimeout(() => {
      this.parkTimer = undefined;
      for (const m of this.parked.splice(0)) {
        this.o.onError?.(
          new Error(`MQTT message on '${m.subject}' matched no handler within the hold time; dropped`),
        );
      }
    }, this.o.unmatchedHoldMs ?? 5000);
  }

  private unpark(entry: Entry): void {
    const keep: RawMessage[] = [];
    for (const m of this.parked) {
      if (matches(entry.filter, m.subject)) {
        entry.queue.push(() => entry.handler(m)).catch((err: Error) => this.o.onError?.(err));
      } else keep.push(m);
    }
    this.parked = keep;
  }

  async publish(subject: string, payload: Uint8Array, options: PublishOptions = {}): Promise<void> {
    if (this.closing) throw new KitError("KIT_BUS_CLOSED", "publish after close()");
    assertSubject(subject);
    await this.pub.publishAsync(
      toMqtt(subject),
      Buffer.from(payload.buffer, payload.byteOffset, payload.byteLength),
      {
        qos: 1,
        retain: options.retain ?? false,
      },
    );
  }

  async subscribe(
    filter: string,
    handler: RawHandler,
    options: SubscribeOptions = {},
  ): Promise<Subscription> {
    if (this.closing) throw new KitError("KIT_BUS_CLOSED", "subscribe after close()");
    assertSubject(filter, true);
    if (options.durable && this.o.clientId === undefined) {
      throw new KitError(
        "KIT_BUS_CAPABILITY",
        `durable subscription '${options.durable}' needs a stable MQTT clientId`,
      );
    }
    let mqttFilter = toMqtt(filter);
    if (options.group) {
      if (!this.capabilities.groups) {
        throw new KitError(
          "KIT_BUS_CAPABILITY",
          `load-sharing group '${options.group}' asked for on ${this.transport} (MQTT 3.1.1, no shared subscriptions): ` +
            "run one instance per service here, or use Mosquitto or NATS for replicas",
        );
      }
      assertSubject(options.group);
      mqttFilter = `$share/${options.group}/${mqttFilter}`;
    }
    const entry: Entry = {
      id: this.nextId++,
      filter,
      durable: !!options.durable,
      handler,
      queue: new SerialQueue(),
      mqttFilter,
    };
    this.entries.add(entry);
    this.unpark(entry);
    await this.subscribePacket(entry);
    return {
      unsubscribe: async () => {
        this.entries.delete(entry);
        const stillUsed = [...this.entries].some((e) => e.mqttFilter === mqttFilter);
        if (!stillUsed && !this.closing && !options.durable) await this.client.unsubscribeAsync(mqttFilter);
        await entry.queue.idle();
      },
    };
  }

  async request(
    subject: string,
    payload: Uint8Array,
    options: { timeoutMs?: number } = {},
  ): Promise<Uint8Array> {
    if (!this.capabilities.requestReply) {
      throw new KitError(
        "KIT_BUS_CAPABILITY",
        `request/reply needs MQTT 5; ${this.transport} speaks MQTT 3.1.1`,
      );
    }
    assertSubject(subject);
    const corr = randomBytes(8);
    const key = corr.toString("hex");
    const timeoutMs = options.timeoutMs ?? 5000;
    return new Promise<Uint8Array>((resolve, reject) => {
      const timer = setTimeout(() => {
        this.pending.delete(key);
        reject(new KitError("KIT_REQUEST_TIMEOUT", `no reply on '${subject}' within ${timeoutMs} ms`));
      }, timeoutMs);
      this.pending.set(key, (reply) => {
        clearTimeout(timer);
        this.pending.delete(key);
        resolve(reply);
      });
      this.pub
        .publishAsync(toMqtt(subject), Buffer.from(payload), {
          qos: 1,
          properties: { responseTopic: `${INBOX}/${this.clientId}/r`, correlationData: corr },
        })
        .catch((err: Error) => {
          clearTimeout(timer);
          this.pending.delete(key);
          reject(err);
        });
    });
  }

  async readState(subject: string, options: { timeoutMs?: number } = {}): Promise<Uint8Array | undefined> {
    assertSubject(subject);
    // A second short-lived client: a retained message arrives right after SUBSCRIBE, and keeping it
    // apart avoids mixing it into this client's ordered message stream.
    const probe = await mqtt.connectAsync(this.o.url, {
      protocolVersion: this.v5 ? 5 : 4,
      clean: true,
      reconnectPeriod: 0,
      ...(this.o.username ? { username: this.o.username } : {}),
      ...(this.o.password ? { password: this.o.password } : {}),
    });
    try {
      return await new Promise<Uint8Array | undefined>((resolve, reject) => {
        const timer = setTimeout(() => resolve(undefined), options.timeoutMs ?? 500);
        probe.on("message", (_t, payload, packet) => {
          if (packet.retain) {
            clearTimeout(timer);
            resolve(payload.length > 0 ? payload : undefined);
          }
        });
        probe.subscribeAsync(toMqtt(subject), { qos: 1 }).catch(reject);
      });
    } finally {
      await probe.endAsync();
    }
  }

  async close(): Promise<void> {
    if (this.closing) return;
    this.closing = true;
    for (const t of this.reconnectTimers.values()) clearTimeout(t);
    if (this.parkTimer) clearTimeout(this.parkTimer);
    if (this.inflight > 0) await new Promise<void>((r) => (this.drained = r));
    // The session outlives us only for durable subscriptions; drop the others so the broker does
    // not queue messages for nobody.
    const transient = [...this.entries].filter((e) => !e.durable).map((e) => e.mqttFilter);
    if (transient.length > 0 && this.client.connected) {
      await this.client.unsubscribeAsync(transient).catch(() => undefined);
    }
    await Promise.all([this.client.endAsync(), this.pub.endAsync()]);
  }
}
