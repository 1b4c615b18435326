/**
 * The market service (the demo price feed): wiring only. It reads a daily price schedule, runs it
 * in simulated time (`timeScale` simulated seconds per wall second from `startAt`), and publishes
 * rto.prices.v1 on rto.<site>.prices, retained as the site's current prices, at start-up and at
 * every change of the schedule. `effectiveFrom` and `nextChangeAt` are simulated epoch ms.
 */
import { readFileSync } from "node:fs";
import { parse as parseYaml } from "yaml";
import { ScaledClock, systemClock } from "../kit/clock.js";
import type { Prices } from "../kit/generated/messages.js";
import { type Deps, type Service, startRuntime } from "../kit/service.js";
import type { MarketConfig } from "./config.js";
import { MarketError, type PriceSchedule, parsePriceSchedule, pricesAt, wallDelayUntil } from "./schedule.js";

/**
 * What the market service may be given besides the kit's dependencies. Its `clock` is the wall clock
 * (default the system's); the service derives its simulated clock from it.
 */
export interface MarketDeps extends Deps {
  /** An already parsed schedule (tests, the demo); default: read from `market.scheduleFile`. */
  schedule?: PriceSchedule;
}

/** The running market service. */
export interface MarketService extends Service {
  /** Simulated time now, epoch ms. */
  simulatedNow(): number;
  /** The prices last published, or undefined before the first. */
  current(): Prices | undefined;
}

/** Reads and checks a schedule YAML file. Throws MarketError MARKET_SCHEDULE_INVALID naming the file and field. */
export function readPriceSchedule(path: string): PriceSchedule {
  let doc: unknown;
  try {
    doc = parseYaml(readFileSync(path, "utf8"));
  } catch (err) {
    throw new MarketError("MARKET_SCHEDULE_INVALID", `${path}: ${(err as Error).message}`, { cause: err });
  }
  return parsePriceSchedule(doc, path);
}

/** Starts the market service. */
export async function start(config: Readonly<MarketConfig>, deps: MarketDeps = {}): Promise<MarketService> {
  // Read the schedule before connecting, so a bad file stops start-up without touching the broker.
  const schedule = deps.schedule ?? readPriceSchedule(config.market.scheduleFile);
  const { timeScale, source } = config.market;
  // `deps.clock` is the wall clock (the timer sleeps in wall time). The events carry simulated time,
  // the time of the prices they announce, as every service of an accelerated loop stamps its events:
  // a recorder that looks up "the prices in force at this proposal" compares like with like. (Stamped
  // in wall time, a price set published after a proposal looked older than it to the recorder.)
  const wall = deps.clock ?? systemClock;
  const simStartMs = config.market.startAt ? Date.parse(config.market.startAt) : wall.now();
  const clock =
    timeScale === 1 && config.market.startAt === undefined
      ? wall
      : new ScaledClock(timeScale, simStartMs, wall);
  const rt = await startRuntime("market", config, { ...deps, clock });
  const simNow = () => rt.clock.now();

  let last: Prices | undefined;
  let timer: NodeJS.Timeout | undefined;
  let stopping = false;

  const publishCurrent = async (): Promise<number | undefined> => {
    const inForce = pricesAt(schedule, simNow());
    const data: Prices = { effectiveFrom: inForce.effectiveFromMs, prices: inForce.prices, source };
    if (inForce.nextChangeMs !== undefined) data.nextChangeAt = inForce.nextChangeMs;
    if (last?.effectiveFrom !== data.effectiveFrom) {
      await rt.events.publish("prices", "rto.prices.v1", data, { retain: true });
      last = data;
      rt.log.info({ effectiveFrom: new Date(data.effectiveFrom).toISOString() }, "prices published");
    }
    return inForce.nextChangeMs;
  };

  // Publishes what is in force and sleeps until the next change. A timer may fire a little early:
  // the step then finds the same prices, publishes nothing, and sleeps again.
  const step = async (): Promise<void> => {
    if (stopping) return;
    let delayMs: number;
    try {
      const nextChangeMs = await publishCurrent();
      if (nextChangeMs === undefined) return;
      delayMs = wallDelayUntil(nextChangeMs, simNow(), timeScale) + 1;
    } catch (err) {
      rt.log.warn({ err }, "publishing prices failed; retrying in 1 s");
      delayMs = 1000;
    }
    if (!stopping) timer = setTimeout(() => void step(), Math.min(delayMs, 2 ** 31 - 1));
  };

  rt.onStop(() => {
    stopping = true;
    if (timer) clearTimeout(timer);
  });
  // The first publish must succeed: a feed that cannot publish should not claim to be up.
  let firstChange: number | undefined;
  try {
    firstChange = await publishCurrent();
  } catch (err) {
    await rt.ready().stop();
    throw err;
  }
  if (firstChange !== undefined) {
    const delayMs = wallDelayUntil(firstChange, simNow(), timeScale) + 1;
    timer = setTimeout(() => void step(), Math.min(delayMs, 2 ** 31 - 1));
  }
  const handle = rt.ready();
  return { ...handle, simulatedNow: simNow, current: () => last };
}
