/**
 * Why did a setpoint move (or not)? explain(cycleid) lays out the chain of one RTO cycle from the
 * audit store: snapshot → reconciled → model → prices in force → proposal → validation checks →
 * command → readback, with the cycle's status events and every reason given on the way, as data and
 * as readable text. The prices carry no cycle id: those in force are the latest published at or
 * before the proposal (or the set the proposal reports using, when a newer one came just before it:
 * see `pricesInForce`).
 */
import { pricesInForce } from "./recompute.js";
import type { EventStore, RecordedEvent } from "./store.js";

/** The stages of the chain, in order. */
export const CHAIN = [
  "snapshot",
  "reconciled",
  "model",
  "prices",
  "proposal",
  "validation",
  "command",
  "readback",
] as const;

/** A stage of the chain. */
export type ChainStage = (typeof CHAIN)[number];

const TYPE_OF: Record<ChainStage, string> = {
  snapshot: "rto.snapshot.v1",
  reconciled: "rto.reconciled.v1",
  model: "rto.model.v1",
  prices: "rto.prices.v1",
  proposal: "rto.proposal.v1",
  validation: "rto.validation.v1",
  command: "rto.command.v1",
  readback: "rto.readback.v1",
};

/** One link of the chain. */
export interface ExplainStep {
  stage: ChainStage | "cycle";
  eventId: string;
  type: string;
  time: string;
  /** One line of what the event says. */
  summary: string;
  /** The event's data. */
  data: unknown;
}

/** A reason given on the way (a failed check, an abort, a refusal). */
export interface ExplainReason {
  stage: string;
  code: string;
  message: string;
}

/** The explanation of one cycle. */
export interface Explanation {
  cycleid: string;
  /** False when the store holds no event of the cycle. */
  found: boolean;
  steps: ExplainStep[];
  /** Stages of the chain with no event (e.g. no command: the cycle stopped before dispatch). */
  missing: ChainStage[];
  /** How the cycle ended, in a few words. */
  outcome: string;
  reasons: ExplainReason[];
  /** The explanation as readable text. */
  text: string;
}

type Obj = Record<string, unknown>;
const obj = (x: unknown): Obj => (x && typeof x === "object" ? (x as Obj) : {});
const arr = (x: unknown): unknown[] => (Array.isArray(x) ? x : []);
const num = (x: unknown): string => {
  if (typeof x !== "number" || !Number.isFinite(x)) return "?";
  const a = Math.abs(x);
  // Six significant digits; very large or small magnitudes (rate constants, residuals) in exponent form.
  if (a !== 0 && (a >= 1e6 || a < 1e-4)) return x.toExponential(5).replace(/\.?0+e/, "e");
  return String(Number(x.toPrecision(6)));
};
const str = (x: unknown): string =>
  typeof x === "string" ? x : x === undefined || x === null ? "" : String(x);
const iso = (ms: unknown): string =>
  typeof ms === "number" && Number.isFinite(ms) ? new Date(ms).toISOString() : "?";

/** One line of what an event of a chain stage says. */
export function summarize(stage: ExplainStep["stage"], data: unknown): string {
  const d = obj(data);
  switch (stage) {
    case "snapshot":
      return `steady window ${iso(d.startMs)} … ${iso(d.endMs)} (${num(d.spanS)} s), ${arr(d.tags).length} tags, ${arr(d.excluded).length} excluded`;
    case "reconciled": {
      const g = obj(d.globalTest);
      const test = Object.keys(g).length
        ? `, global test ${g.passed === false || g.pass === false ? "failed" : "passed"}`
        : "";
      return `${str(d.method) || "reconciled"}${test}, ${arr(d.grossErrors).length} gross errors, ${arr(d.eliminated).length} eliminated`;
    }
    case "model": {
      const params = arr(d.parameters)
        .map(obj)
        .filter((p) => p.fitted)
        .map((p) => `${str(p.symbol)} = ${num(p.inForce)} ${str(p.unit)} (was ${num(p.previous)})`);
      return `estimate ${str(d.status)}${params.length ? `: ${params.join(", ")}` : ""}`;
    }
    case "prices":
      return `prices from ${iso(d.effectiveFrom)} (${str(d.source)}): ${arr(d.prices)
        .map(obj)
        .map((p) => `${str(p.symbol)} ${num(p.value)} ${str(p.unit)}`)
        .join(", ")}`;
    case "proposal": {
      const o = obj(d.objective);
      const sps = arr(d.setpoints)
        .map(obj)
        .map((s) => `${str(s.decision)} ${num(s.current)} → ${num(s.proposed)} ${str(s.unit)}`);
      const active = arr(d.active)
        .map(obj)
        .map((a) => str(a.name));
      const k = obj(d.kkt);
      const solver = obj(d.solver);
      return `${str(d.status)} (${str(solver.name)} ${str(solver.status)}): ${sps.join(", ")}; objective ${num(o.current)} → ${num(o.proposed)} ${str(o.unit)} (${str(o.sense)}, change ${num(o.change)}); active: ${active.join(", ") || "none"}; KKT ${num(k.stationarity)}/${num(k.complementarity)}/${num(k.feasibility)}; mismatch ${str(obj(d.mismatch).method)}`;
    }
    case "validation": {
      const checks = arr(d.checks).map(obj);
      const failed = checks
        .filter((c) => c.outcome === "fail")
        .map((c) => `${str(c.name)}: ${str(c.reason)}`);
      const skipped = checks.filter((c) => c.outcome === "skip").length;
      return `verdict ${str(d.verdict)} in ${str(d.mode)} mode, next ${str(d.next)}; ${checks.length} checks, ${failed.length} failed, ${skipped} skipped${failed.length ? ` — ${failed.join("; ")}` : ""}`;
    }
    case "command": {
      const by = obj(d.approvedBy);
      return `seq ${num(d.seq)} ${str(d.mode)}${by.user ? ` (approved by ${str(by.user)})` : ""}: ${arr(
        d.setpoints,
      )
        .map(obj)
        .map(
          (s) =>
            `${str(s.tag)} → ${num(s.value)} ${str(s.unit)}${s.rampPerS !== undefined ? ` at ${num(s.rampPerS)}/s` : ""}`,
        )
        .join(", ")}; expires ${iso(d.expiresAt)}`;
    }
    case "readback":
      return d.trigger === "command"
        ? `command seq ${num(d.commandSeq)} ${d.accepted ? "accepted" : `refused: ${str(d.code)} ${str(d.reason)}`}`
        : `${str(d.trigger)}${d.reason ? `: ${str(d.reason)}` : ""}`;
    case "cycle":
      return `${str(d.stage) || "cycle"} ${str(d.status)}${d.outcome ? ` (${str(d.outcome)})` : ""}${
        arr(d.reasons).length
          ? `: ${arr(d.reasons)
              .map((r) => `${str(obj(r).code)} ${str(obj(r).message)}`)
              .join("; ")}`
          : ""
      }`;
  }
}

/**
 * Explains a cycle from its recorded events and the prices in force (pure: the caller reads the
 * store). Events of several deliveries of the same stage are all listed, in time order.
 */
export function explainCycle(
  cycleid: string,
  events: readonly RecordedEvent[],
  pricesInForce?: RecordedEvent,
): Explanation {
  const stageOf = new Map(Object.entries(TYPE_OF).map(([s, t]) => [t, s as ChainStage]));
  const steps: ExplainStep[] = [];
  const reasons: ExplainReason[] = [];
  const all =
    pricesInForce && !events.some((e) => e.id === pricesInForce.id)
      ? [...events, pricesInForce]
      : [...events];
  const rank = (s: ExplainStep["stage"]) => (s === "cycle" ? CHAIN.length : CHAIN.indexOf(s));
  for (const e of all) {
    const stage = e.type === "rto.cycle.v1" ? "cycle" : stageOf.get(e.type);
    if (!stage) continue;
    steps.push({
      stage,
      eventId: e.id,
      type: e.type,
      time: e.time,
      summary: summarize(stage, e.data),
      data: e.data,
    });
    const d = obj(e.data);
    if (stage === "cycle" || stage === "model") {
      for (const r of arr(d.reasons).map(obj)) {
        reasons.push({
          stage: stage === "cycle" ? str(d.stage) || "cycle" : "model",
          code: str(r.code),
          message: str(r.message),
        });
      }
    } else if (stage === "validation") {
      for (const c of arr(d.checks).map(obj)) {
        if (c.outcome !== "pass")
          reasons.push({
            stage: "validation",
            code: str(c.code) || str(c.name),
            message: `${str(c.name)} ${str(c.outcome)}: ${str(c.reason)}`,
          });
      }
    } else if (stage === "readback" && d.accepted === false) {
      reasons.push({ stage: "readback", code: str(d.code), message: str(d.reason) });
    }
  }
  // Chain order, time within a stage; the cycle's status events follow in time order.
  const byTime = (a: ExplainStep, b: ExplainStep) => (a.time < b.time ? -1 : a.time > b.time ? 1 : 0);
  const chain = steps
    .filter((s) => s.stage !== "cycle")
    .sort((a, b) => rank(a.stage) - rank(b.stage) || byTime(a, b));
  const cycleSteps = steps.filter((s) => s.stage === "cycle").sort(byTime);
  const ordered = [...chain, ...cycleSteps];
  const missing = CHAIN.filter((s) => !chain.some((c) => c.stage === s));
  const last = cycleSteps.at(-1);
  const lastData = obj(last?.data);
  const readback = chain.filter((s) => s.stage === "readback" && obj(s.data).trigger === "command").at(-1);
  const outcome = readback
    ? obj(readback.data).accepted
      ? "setpoints applied by the control side"
      : `command refused by the control side (${str(obj(readback.data).code)})`
    : last
      ? `${str(lastData.stage) || "cycle"} ${str(lastData.status)}${lastData.outcome ? ` (${str(lastData.outcome)})` : ""}`
      : chain.length
        ? `reached ${chain.at(-1)?.stage}`
        : "no events recorded";
  const lines = [`Cycle ${cycleid}: ${outcome}`];
  for (const [i, s] of ordered.entries()) lines.push(`${i + 1}. ${s.stage} @ ${s.time}: ${s.summary}`);
  if (missing.length) lines.push(`Not reached / not recorded: ${missing.join(", ")}`);
  if (reasons.length) {
    lines.push("Reasons:");
    for (const r of reasons) lines.push(`  - [${r.stage}] ${r.code}: ${r.message}`);
  }
  return {
    cycleid,
    found: events.length > 0,
    steps: ordered,
    missing,
    outcome,
    reasons,
    text: lines.join("\n"),
  };
}

/** Explains a cycle from the store: its events, and the prices in force at its proposal (or its last event). */
export function explain(store: EventStore, cycleid: string): Explanation {
  store.flush();
  const events = store.byCycle(cycleid);
  const proposal = events.find((e) => e.type === "rto.proposal.v1");
  const last = events.at(-1);
  const prices = events.some((e) => e.type === "rto.prices.v1")
    ? undefined
    : proposal
      ? pricesInForce(store, proposal).event
      : last && store.latest("rto.prices.v1", last.timeMs);
  return explainCycle(cycleid, events, prices);
}
