/**
 * The recorder, wiring only: every event of the site (rto.<site>.>) into the SQLite audit store
 * (store.ts), written in batches, pruned by retention; explain() and recompute() read it back.
 *
 * Delivery and durability: an event is acknowledged once it is queued, and the queue is written
 * within flushMs (or when a batch fills). A crash can lose at most that window from SQLite; on NATS
 * the JetStream stream is the durable store, and a durable subscription (recorder.durable) replays
 * what SQLite missed (inserts are idempotent by event id). On MQTT use a stable clientId.
 */
import type { EventType } from "../kit/generated/messages.js";
import { type Deps, type Service, startRuntime } from "../kit/service.js";
import type { RecorderConfig } from "./config.js";
import { type Explanation, explain } from "./explain.js";
import { type OptimizeFn, type RecomputeResult, recompute } from "./recompute.js";
import { EventStore } from "./store.js";

/** The running recorder, with its read side. */
export interface RecorderService extends Service {
  readonly store: EventStore;
  /** The chain of one cycle, as data and text. */
  explain(cycleid: string): Explanation;
  /** Re-runs a recorded cycle's optimization with the injected optimizer. */
  recompute(
    cycleid: string,
    optimize: OptimizeFn,
    options?: { tolerance?: number },
  ): Promise<RecomputeResult>;
}

/** Starts the recorder. Throws when the database cannot be opened or the broker cannot be reached. */
export async function start(config: Readonly<RecorderConfig>, deps: Deps = {}): Promise<RecorderService> {
  const o = config.recorder;
  const store = new EventStore({
    path: o.dbFile,
    batchSize: o.batchSize,
    retentionDays: o.retentionDays,
    maxRows: o.maxRows,
  });
  let rt: Awaited<ReturnType<typeof startRuntime>>;
  try {
    rt = await startRuntime("recorder", config, deps);
  } catch (err) {
    store.close();
    throw err;
  }
  const { events, log, clock } = rt;
  const types = rt.emitter.registry.types() as EventType[];
  let timer: NodeJS.Timeout | undefined;
  const flush = () => {
    try {
      store.flush();
    } catch (err) {
      log.error({ err }, "audit store write failed");
    }
  };
  rt.track(
    await events.on(
      `rto.${config.site}.>`,
      types,
      (event, ctx) => {
        if (store.add(event, ctx.subject) === 0 && store.pending() > 0 && !timer) {
          timer = setTimeout(() => {
            timer = undefined;
            flush();
          }, o.flushMs);
        }
      },
      o.durable ? { durable: o.durable, deliverFrom: o.deliverFrom } : {},
    ),
  );
  const prune = () => {
    try {
      const r = store.prune(clock.now());
      if (r.byAge || r.byCount) log.info(r, "audit store pruned");
    } catch (err) {
      log.error({ err }, "audit store prune failed");
    }
  };
  prune();
  const pruner = setInterval(prune, o.pruneEveryS * 1000);
  pruner.unref();
  rt.onStop(() => {
    clearInterval(pruner);
    if (timer) clearTimeout(timer);
    store.close();
  });
  const handle = rt.ready();
  return {
    ...handle,
    store,
    explain: (cycleid) => explain(store, cycleid),
    recompute: (cycleid, optimize, options) => recompute(store, cycleid, { optimize }, options),
  };
}
