/**
 * Re-runs a recorded cycle's optimization offline and compares it with what was proposed then.
 *
 * The recorder may not import the optimizer (services import kit and model only), so the caller
 * injects it (`deps.optimize`): the CLI and tests wire services/optimize's optimizeOffline in. The
 * inputs come from the record, not from the proposal: parameters in force from the cycle's model
 * event, prices in force at the proposal, and the measured operating point from the snapshot
 * (model-unit means by model symbol). What the record lacks falls back to what the proposal itself
 * reports (its parameters, prices and current decisions), and the fallback is named.
 *
 * A proposal made with modifier adaptation or a bias update depends on past cycles; an offline
 * re-run without that history agrees only up to the correction (the result says which method).
 */
import type { Proposal } from "../kit/generated/messages.js";
import { RecorderError } from "./errors.js";
import type { EventStore, RecordedEvent } from "./store.js";

/** What the injected optimizer is given: the recorded inputs of one cycle, by symbol, model units. */
export interface RecomputeInputs {
  cycleid: string;
  /** Parameters in force (model event's inForce, else the proposal's). */
  parameters: Record<string, number>;
  /** Prices in force (the prices event, else the proposal's). */
  prices: Record<string, number>;
  /** Snapshot means in model units by model symbol (decisions, disturbances, outputs measured). */
  measured: Record<string, number>;
  /** Current decisions: the proposal's (the setpoints in force it was centred on), else the snapshot's mean. */
  current: Record<string, number>;
  /** The recorded proposal (for its decisions, formulation and mismatch method). */
  recorded: Proposal;
  /** Where each input came from. */
  sources: {
    parameters: "model" | "proposal";
    prices: "prices" | "proposal";
    current: "snapshot" | "proposal" | "mixed";
  };
  /** Remarks on how the inputs were chosen (e.g. which price set, when two came close together). */
  notes: string[];
  /** The recorded events used. */
  events: {
    snapshot?: RecordedEvent;
    model?: RecordedEvent;
    prices?: RecordedEvent;
    proposal: RecordedEvent;
  };
}

/** The optimizer, injected: returns a proposal for the inputs, or throws / returns undefined when it cannot. */
export type OptimizeFn = (inputs: RecomputeInputs) => Promise<Proposal | undefined> | Proposal | undefined;

/** The comparison of recorded and recomputed proposals. */
export interface RecomputeResult {
  cycleid: string;
  recorded: Proposal;
  recomputed: Proposal;
  setpoints: Array<{ decision: string; unit: string; recorded: number; recomputed: number; diff: number }>;
  /** Largest |recomputed − recorded| over the decisions, each in its unit. */
  maxAbsDiff: number;
  objective: { recorded: number; recomputed: number; diff: number };
  /** Every setpoint within tolerance·max(1, |recorded|). */
  agrees: boolean;
  tolerance: number;
  sources: RecomputeInputs["sources"];
  /** Caveats (e.g. a mismatch correction that depends on past cycles). */
  notes: string[];
}

type Obj = Record<string, unknown>;
const obj = (x: unknown): Obj => (x && typeof x === "object" ? (x as Obj) : {});

function symbolMap(list: unknown, valueKey: string): Record<string, number> {
  const out: Record<string, number> = {};
  if (!Array.isArray(list)) return out;
  for (const item of list.map(obj)) {
    const v = item[valueKey];
    if (typeof item.symbol === "string" && typeof v === "number" && Number.isFinite(v)) out[item.symbol] = v;
  }
  return out;
}

/** Gathers the recorded inputs of a cycle. Throws RECORDER_CYCLE_UNKNOWN or RECORDER_NO_PROPOSAL. */
export function recordedInputs(store: EventStore, cycleid: string): RecomputeInputs {
  store.flush();
  const events = store.byCycle(cycleid);
  if (events.length === 0)
    throw new RecorderError("RECORDER_CYCLE_UNKNOWN", `no recorded event of cycle ${cycleid}`);
  const proposalEv = events.filter((e) => e.type === "rto.proposal.v1").at(-1);
  if (!proposalEv)
    throw new RecorderError("RECORDER_NO_PROPOSAL", `cycle ${cycleid} has no recorded proposal`);
  const recorded = proposalEv.data as Proposal;
  const snapshot = events.filter((e) => e.type === "rto.snapshot.v1").at(-1);
  const model = events.filter((e) => e.type === "rto.model.v1").at(-1);
  const notes: string[] = [];
  let prices = events.find((e) => e.type === "rto.prices.v1");
  if (!prices) {
    const inForce = pricesInForce(store, proposalEv);
    prices = inForce.event;
    if (inForce.note) notes.push(inForce.note);
  }
  const fromModel = model ? symbolMap(obj(model.data).parameters, "inForce") : {};
  const parameters = Object.keys(fromModel).length ? fromModel : symbolMap(recorded.parameters, "value");
  const fromPrices = prices ? symbolMap(obj(prices.data).prices, "value") : {};
  const priceMap = Object.keys(fromPrices).length ? fromPrices : symbolMap(recorded.prices, "value");

  const measured: Record<string, number> = {};
  for (const t of (Array.isArray(obj(snapshot?.data).tags)
    ? (obj(snapshot?.data).tags as unknown[])
    : []
  ).map(obj)) {
    if (typeof t.variable === "string" && typeof t.modelMean === "number") measured[t.variable] = t.modelMean;
  }
  // The optimizer centres its move box on the setpoints the control side held (the readbacks), and
  // reports them as each setpoint's `current`; the snapshot's PV mean is only the fallback.
  const current: Record<string, number> = {};
  let fromSnapshot = 0;
  for (const sp of recorded.setpoints) {
    const m = measured[sp.decision];
    if (Number.isFinite(sp.current)) current[sp.decision] = sp.current;
    else if (m !== undefined) {
      current[sp.decision] = m;
      fromSnapshot++;
    }
  }
  const currentSource =
    fromSnapshot === recorded.setpoints.length ? "snapshot" : fromSnapshot === 0 ? "proposal" : "mixed";
  const used: RecomputeInputs["events"] = { proposal: proposalEv };
  if (snapshot) used.snapshot = snapshot;
  if (model) used.model = model;
  if (prices) used.prices = prices;
  return {
    cycleid,
    parameters,
    prices: priceMap,
    measured,
    current,
    recorded,
    sources: {
      parameters: Object.keys(fromModel).length ? "model" : "proposal",
      prices: Object.keys(fromPrices).length ? "prices" : "proposal",
      current: currentSource,
    },
    events: used,
    notes,
  };
}

/**
 * The price set in force at a recorded proposal: the latest recorded at or before it, unless a newer
 * set reached the recorder before the proposal while the optimizer still solved with the set before
 * (two services, two deliveries, a few milliseconds apart). Then it is the latest of the last few sets
 * whose values are the ones the proposal reports using, and the note says so.
 */
export function pricesInForce(
  store: EventStore,
  proposal: RecordedEvent,
): { event?: RecordedEvent; note?: string } {
  const recent = store.recent("rto.prices.v1", proposal.timeMs, RECENT_PRICE_SETS);
  const reported = symbolMap((proposal.data as Partial<Proposal>).prices, "value");
  const used = recent.find((e) => samePrices(symbolMap(obj(e.data).prices, "value"), reported)) ?? recent[0];
  const latest = recent[0];
  if (!used || !latest || used === latest) return used ? { event: used } : {};
  return {
    event: used,
    note: `prices changed at ${latest.time} (event ${latest.id}), just before the proposal; it used the set of event ${used.id} (${used.time})`,
  };
}

/** Price sets looked back over for the one a proposal used. */
const RECENT_PRICE_SETS = 5;

/** Every price the proposal reports has the same value (to 1e-12 relative) in `set`. */
function samePrices(set: Record<string, number>, reported: Record<string, number>): boolean {
  const symbols = Object.keys(reported);
  return (
    symbols.length > 0 &&
    symbols.every((s) => {
      const v = set[s];
      return v !== undefined && Math.abs(v - reported[s]!) <= 1e-12 * Math.max(1, Math.abs(v));
    })
  );
}

/**
 * Re-runs the optimization of a recorded cycle with the injected optimizer and compares each
 * setpoint. `tolerance` is relative to max(1, |recorded|). Default 1e-6.
 */
export async function recompute(
  store: EventStore,
  cycleid: string,
  deps: { optimize: OptimizeFn },
  options: { tolerance?: number } = {},
): Promise<RecomputeResult> {
  const tolerance = options.tolerance ?? 1e-6;
  const inputs = recordedInputs(store, cycleid);
  let out: Proposal | undefined;
  try {
    out = await deps.optimize(inputs);
  } catch (err) {
    throw new RecorderError(
      "RECORDER_RECOMPUTE_FAILED",
      `recompute of cycle ${cycleid} failed: ${(err as Error).message}`,
      { cause: err },
    );
  }
  if (!out)
    throw new RecorderError(
      "RECORDER_RECOMPUTE_FAILED",
      `the optimizer gave no proposal for cycle ${cycleid}`,
    );
  const recomputed = out;
  const rec = inputs.recorded;
  const setpoints = rec.setpoints.map((sp) => {
    const again = recomputed.setpoints.find((s) => s.decision === sp.decision);
    const value = again?.proposed ?? Number.NaN;
    return {
      decision: sp.decision,
      unit: sp.unit,
      recorded: sp.proposed,
      recomputed: value,
      diff: value - sp.proposed,
    };
  });
  const maxAbsDiff = Math.max(
    0,
    ...setpoints.map((s) => (Number.isFinite(s.diff) ? Math.abs(s.diff) : Number.POSITIVE_INFINITY)),
  );
  const agrees = setpoints.every((s) => Math.abs(s.diff) <= tolerance * Math.max(1, Math.abs(s.recorded)));
  const notes: string[] = [...inputs.notes];
  if (rec.mismatch.method !== "none") {
    notes.push(
      `the recorded proposal used ${rec.mismatch.method} correction, which depends on past cycles; an offline re-run agrees only up to it`,
    );
  }
  if (inputs.sources.parameters === "proposal")
    notes.push("no model event recorded for the cycle: parameters taken from the proposal");
  if (inputs.sources.prices === "proposal")
    notes.push("no prices event recorded: prices taken from the proposal");
  if (inputs.sources.current !== "proposal")
    notes.push(
      `current decisions from the ${inputs.sources.current === "mixed" ? "proposal where it reports them, else the snapshot" : "snapshot"}`,
    );
  return {
    cycleid,
    recorded: rec,
    recomputed,
    setpoints,
    maxAbsDiff,
    objective: {
      recorded: rec.objective.proposed,
      recomputed: recomputed.objective.proposed,
      diff: recomputed.objective.proposed - rec.objective.proposed,
    },
    agrees,
    tolerance,
    sources: inputs.sources,
    notes,
  };
}
