/**
 * A bounded in-memory history of parameter estimates, for trends (the console's fouling plot) and
 * questions such as "what was UA in force last Tuesday". Pure: times are passed in. The durable record
 * is the recorder's; this keeps the last `capacity` estimates of one running service.
 */
import type { ModelUpdate } from "../kit/generated/messages.js";

/** One parameter in one estimate. */
export interface ParameterPoint {
  /** Sample time the estimate describes (end of its data window), epoch ms. */
  readonly timeMs: number;
  /** The model event's id and its cycle. */
  readonly eventId: string;
  readonly cycleid: string | undefined;
  readonly status: ModelUpdate["status"];
  readonly symbol: string;
  readonly unit: string;
  /** Fitted value, or null when not fitted (failed fit, parameter held). */
  readonly value: number | null;
  readonly sd: number | null;
  readonly ciLower: number | null;
  readonly ciUpper: number | null;
  /** The value in force after this estimate. */
  readonly inForce: number;
  readonly accepted: boolean;
}

/** Filters of {@link ParameterHistory.query}. */
export interface HistoryQuery {
  /** Only points at or after this time, epoch ms. Default: no limit. */
  readonly sinceMs?: number;
  /** Only points at or before this time, epoch ms. Default: no limit. */
  readonly untilMs?: number;
  /** Only accepted estimates. Default false. */
  readonly acceptedOnly?: boolean;
  /** At most this many, the most recent ones. Default: all. */
  readonly limit?: number;
}

interface Entry {
  readonly timeMs: number;
  readonly points: readonly ParameterPoint[];
}

/** A ring of the last `capacity` estimates, queried per parameter in time order. */
export class ParameterHistory {
  private readonly entries: Entry[] = [];

  /** @param capacity Estimates kept; the oldest is dropped first. Default 1000. */
  constructor(readonly capacity = 1000) {
    if (!(Number.isInteger(capacity) && capacity > 0))
      throw new RangeError(`capacity must be a positive integer (got ${capacity})`);
  }

  /** Number of estimates held. */
  get size(): number {
    return this.entries.length;
  }

  /** Adds one estimate; `timeMs` defaults to the end of its data window. Keeps time order. */
  record(event: { id: string; cycleid?: string | undefined; data: ModelUpdate }, timeMs?: number): void {
    const t = timeMs ?? event.data.window.endMs ?? 0;
    const points = event.data.parameters.map((p) => ({
      timeMs: t,
      eventId: event.id,
      cycleid: event.cycleid,
      status: event.data.status,
      symbol: p.symbol,
      unit: p.unit,
      value: p.value,
      sd: p.sd,
      ciLower: p.ciLower,
      ciUpper: p.ciUpper,
      inForce: p.inForce,
      accepted: p.accepted,
    }));
    // Estimates normally arrive in time order; a late one (replay, redelivery) is inserted in place.
    let i = this.entries.length;
    while (i > 0 && (this.entries[i - 1] as Entry).timeMs > t) i--;
    this.entries.splice(i, 0, { timeMs: t, points });
    if (this.entries.length > this.capacity) this.entries.splice(0, this.entries.length - this.capacity);
  }

  /** The points of parameter `symbol`, oldest first. */
  query(symbol: string, q: HistoryQuery = {}): ParameterPoint[] {
    const out: ParameterPoint[] = [];
    for (const e of this.entries) {
      if (q.sinceMs !== undefined && e.timeMs < q.sinceMs) continue;
      if (q.untilMs !== undefined && e.timeMs > q.untilMs) continue;
      const p = e.points.find((x) => x.symbol === symbol);
      if (!p || (q.acceptedOnly && !p.accepted)) continue;
      out.push(p);
    }
    return q.limit !== undefined && out.length > q.limit ? out.slice(out.length - q.limit) : out;
  }

  /** Symbols seen in the history. */
  symbols(): string[] {
    const s = new Set<string>();
    for (const e of this.entries) for (const p of e.points) s.add(p.symbol);
    return [...s];
  }
}
