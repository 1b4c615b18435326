/**
 * The lifecycle every service shares: connect, heartbeat (with an MQTT Last Will that says "lost"),
 * health endpoints, metrics, and a stop() that drains handlers before it closes the connection.
 */
import type { Bus, Subscription } from "./bus.js";
import { type Clock, ScaledClock, systemClock } from "./clock.js";
import type { BaseConfig } from "./config.js";
import { connectBus } from "./connect.js";
import { createEvent, type Emitter, encodeEvent } from "./envelope.js";
import { Events } from "./events.js";
import { type HealthServer, startHealthServer } from "./http.js";
import { createLogger, type Logger } from "./log.js";
import { createMetrics, type KitMetrics } from "./metrics.js";
import { type SchemaRegistry, schemaRegistry } from "./schemas.js";
import { subject } from "./subjects.js";

/** What `start(config, deps)` may be given instead of building it itself (tests, the demo). */
export interface Deps {
  clock?: Clock;
  bus?: Bus;
  log?: Logger;
  registry?: SchemaRegistry;
}

/** A started service's handle. */
export interface Service {
  readonly name: string;
  /** Port of /healthz, /readyz and /metrics, when served. */
  readonly httpPort: number | undefined;
  /** Drains handlers, says goodbye on the heartbeat stream, closes. Safe to call twice. */
  stop(): Promise<void>;
  /** Resolves when the service has stopped. */
  readonly stopped: Promise<void>;
}

/** The shared runtime a service's wiring uses. */
export interface Runtime {
  name: string;
  config: Readonly<BaseConfig>;
  bus: Bus;
  events: Events;
  emitter: Emitter;
  log: Logger;
  metrics: KitMetrics;
  clock: Clock;
  /** Keeps a subscription so stop() can drain it. */
  track(sub: Subscription): Subscription;
  /** Registers work to do at stop (timers, stores), run before the bus closes. */
  onStop(fn: () => Promise<void> | void): void;
  /** Finishes start-up: marks ready and returns the handle. */
  ready(): Service;
}

/** Connects and starts the common parts of service `name`. */
export async function startRuntime(
  name: string,
  config: Readonly<BaseConfig>,
  deps: Deps = {},
): Promise<Runtime> {
  const clock = deps.clock ?? systemClock;
  const log = deps.log ?? createLogger(name, { level: config.logLevel });
  const registry = deps.registry ?? schemaRegistry();
  const metrics = createMetrics(name, { processMetrics: true });
  const emitter: Emitter = { site: config.site, service: name, instance: config.instance, clock, registry };
  const heartbeatSubject = subject(config.site, `heartbeat.${name}`);
  // The timer runs on the wall clock, the envelope's time on the service clock: on an accelerated
  // clock the next heartbeat is due `scale` times later in event time, and readers judge staleness
  // in event time.
  const intervalS = config.heartbeatS * (clock instanceof ScaledClock ? clock.scale : 1);
  const startedAt = clock.now();
  let seq = 0;
  const heartbeat = (status: "starting" | "running" | "stopping" | "lost") =>
    createEvent(emitter, "rto.heartbeat.v1", {
      service: name,
      instance: config.instance,
      status,
      intervalS: Math.min(3600, intervalS),
      uptimeS: Math.max(0, (clock.now() - startedAt) / 1000),
      seq: seq++,
      counts: { ...events.counts },
    });
  const will = createEvent(emitter, "rto.heartbeat.v1", {
    service: name,
    instance: config.instance,
    status: "lost",
    intervalS: Math.min(3600, intervalS),
  });
  const ownsBus = !deps.bus;
  const bus =
    deps.bus ??
    (await connectBus(config, {
      name: `${config.site}-${name}-${config.instance}`,
      will: { subject: heartbeatSubject, payload: encodeEvent(will) },
      onError: (err) => log.warn({ err }, "bus error"),
    }));
  const events = new Events({ bus, emitter, log, metrics }, { maxBytes: config.maxMessageBytes });
  const subs = new Set<Subscription>();
  const stopHooks: Array<() => Promise<void> | void> = [];
  let isReady = false;
  let health: HealthServer | undefined;
  if (config.http.enabled) {
    health = await startHealthServer({
      host: config.http.host,
      port: config.http.port,
      registry: metrics.registry,
      ready: () => isReady,
    });
    log.info({ port: health.port }, "health and metrics endpoint up");
  }
  await events.publishEvent(heartbeatSubject, heartbeat("starting"));
  const timer = setInterval(() => {
    events
      .publishEvent(heartbeatSubject, heartbeat("running"))
      .catch((err: Error) => log.warn({ err }, "heartbeat failed"));
  }, config.heartbeatS * 1000);
  timer.unref();

  let resolveStopped!: () => void;
  const stopped = new Promise<void>((r) => (resolveStopped = r));
  let stopping: Promise<void> | undefined;
  const stop = () => {
    stopping ??= (async () => {
      isReady = false;
      clearInterval(timer);
      await Promise.all(
        [...subs].map((s) => s.unsubscribe().catch((err: Error) => log.warn({ err }, "unsubscribe"))),
      );
      for (const fn of stopHooks) await fn();
      await events.publishEvent(heartbeatSubject, heartbeat("stopping")).catch(() => undefined);
      if (ownsBus) await bus.close();
      await health?.close();
      log.info("stopped");
      resolveStopped();
    })();
    return stopping;
  };

  return {
    name,
    config,
    bus,
    events,
    emitter,
    log,
    metrics,
    clock,
    track(sub) {
      subs.add(sub);
      return sub;
    },
    onStop(fn) {
      stopHooks.push(fn);
    },
    ready() {
      isReady = true;
      log.info({ site: config.site, transport: bus.transport }, "started");
      return { name, httpPort: health?.port, stop, stopped };
    },
  };
}

/**
 * Process entry helper for main.ts: starts the service, stops it on SIGTERM/SIGINT, and exits
 * non-zero with the reason when start-up fails (bad config, no broker).
 */
export async function runMain(start: () => Promise<Service>): Promise<void> {
  let service: Service;
  try {
    service = await start();
  } catch (err) {
    const e = err as { code?: string; message?: string };
    process.stderr.write(`start-up failed${e.code ? ` [${e.code}]` : ""}: ${e.message ?? String(err)}\n`);
    process.exit(1);
  }
  const shutdown = () => {
    service.stop().then(
      () => process.exit(0),
      () => process.exit(1),
    );
  };
  process.once("SIGTERM", shutdown);
  process.once("SIGINT", shutdown);
}
