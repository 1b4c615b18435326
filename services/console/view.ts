/**
 * The console's picture of one site, built from the events it receives: pure and bounded (every
 * list has a cap, every trend a fixed number of points). `apply(event, nowMs)` folds one event in
 * and says which sections changed; `state(nowMs)` returns the whole picture for the page and the
 * API. Times of trends, parameters and profit are sample (plant) times; the rest are the events' own.
 */
import type { AnyEvent, Event } from "../kit/envelope.js";
import type {
  CycleStatus,
  ModelUpdate,
  OperatorMode,
  Prices,
  Proposal,
  Readback,
  SetpointCommand,
  SteadyVerdict,
  TagHealth,
  ValidationResult,
} from "../kit/generated/messages.js";

/** Bounds of the view. */
export interface ViewOptions {
  /** Trend resolution, ms of sample time (one mean per step). Default 5000. */
  trendStepMs?: number;
  /** Points per trend. Default 720. */
  trendPoints?: number;
  /** Tags to trend; empty: key tags first, then others. Default []. */
  trendTags?: readonly string[];
  /** Most tags trended. Default 24. */
  maxTrendTags?: number;
  /** Cycles on the timeline. Default 30. */
  cycles?: number;
  /** Accepted estimates kept per parameter. Default 200. */
  parameterPoints?: number;
  /** Profit points kept. Default 1000. */
  profitPoints?: number;
  /** Approvals and mode requests kept. Default 50. */
  decisions?: number;
  /** Commands and readbacks kept. Default 20 each. */
  commands?: number;
  /** A service is shown as silent after this many heartbeat intervals without one. Default 3. */
  silentAfterIntervals?: number;
}

/** The parts of the page; `apply` says which of them an event changed. */
export type Section =
  | "overview"
  | "services"
  | "cycles"
  | "pending"
  | "decisions"
  | "control"
  | "parameters"
  | "tagHealth"
  | "prices"
  | "constraints"
  | "profit"
  | "reconciliation"
  | "trends";

/** All sections, in page order. */
export const SECTIONS: readonly Section[] = [
  "overview",
  "services",
  "cycles",
  "pending",
  "decisions",
  "control",
  "parameters",
  "tagHealth",
  "prices",
  "constraints",
  "profit",
  "reconciliation",
  "trends",
];

/** One stage's word on a cycle. */
export interface StageEntry {
  status: CycleStatus["status"];
  stage: string | null;
  outcome: string | null;
  reasons: Array<{ code: string; message: string }>;
  atMs: number;
}

/** One RTO cycle on the timeline. */
export interface CycleView {
  cycleId: string;
  firstAtMs: number;
  lastAtMs: number;
  /** open, closed, aborted or alarm: the last word that ends or flags a cycle. */
  state: "open" | "closed" | "aborted" | "alarm";
  /** The latest stage's outcome, e.g. "awaiting-approval". */
  outcome: string | null;
  stages: StageEntry[];
}

/** A proposal waiting for an operator. */
export interface PendingProposal {
  proposalId: string;
  cycleId: string | null;
  validatedAtMs: number;
  expiresAtMs: number | null;
  objective: Proposal["objective"] | null;
  setpoints: Array<{
    decision: string;
    tag: string;
    unit: string;
    from: number;
    target: number;
    action: "move" | "skip";
    lower: number | null;
    upper: number | null;
  }>;
  checks: { passed: number; skipped: number; failed: number };
}

/** An operator's approval or rejection, or a mode request, as seen on the bus. */
export interface DecisionView {
  kind: "approval" | "mode";
  user: string;
  /** approve / reject, or the mode asked for. */
  decision: string;
  reason: string | null;
  proposalId: string | null;
  atMs: number;
}

/** One accepted estimate of a parameter. */
export interface ParameterPoint {
  tMs: number;
  value: number;
  ciLower: number | null;
  ciUpper: number | null;
}

/** A parameter's history. */
export interface ParameterView {
  symbol: string;
  unit: string;
  inForce: number;
  lastStatus: ModelUpdate["status"];
  lastReasons: string[];
  points: ParameterPoint[];
}

/** One trended tag: [sample time ms, mean value] pairs, plus the setpoint read back, when known. */
export interface TrendView {
  tag: string;
  unit: string | null;
  key: boolean;
  points: Array<[number, number]>;
  setpoint: Array<[number, number]>;
}

/** A change of trends since the last `takeTrendPatch()`: points from `fromMs` on replace the client's. */
export interface TrendPatch {
  tag: string;
  unit: string | null;
  key: boolean;
  fromMs: number;
  points: Array<[number, number]>;
  setpointFromMs: number | null;
  setpoint: Array<[number, number]>;
}

/** One point of the profit curve. */
export interface ProfitPoint {
  tMs: number;
  /** Objective at the current operation (measured where the optimizer reports it), objective unit. */
  now: number;
  /** Cumulative gain over the baseline, objective unit × the unit's time. */
  earned: number;
}

/** The whole picture. */
export interface ConsoleState {
  site: string;
  atMs: number;
  overview: {
    mode: (OperatorMode & { receivedAtMs: number }) | null;
    lastCycle: CycleView | null;
    steady:
      | (Pick<SteadyVerdict, "state" | "steady" | "timeMs" | "steadySinceMs" | "notSteady" | "blockedBy"> & {
          receivedAtMs: number;
        })
      | null;
    profit: {
      unit: string;
      sense: "max" | "min";
      now: number;
      baseline: number;
      baselineAtMs: number;
      change: number;
      earned: number;
      earnedUnit: string | null;
      proposedChange: number;
    } | null;
  };
  services: Array<{
    service: string;
    instance: string;
    status: string;
    lastSeenMs: number;
    intervalS: number;
    silent: boolean;
    uptimeS: number | null;
  }>;
  cycles: CycleView[];
  pending: PendingProposal[];
  decisions: DecisionView[];
  control: {
    commands: Array<
      Pick<
        SetpointCommand,
        "seq" | "mode" | "proposalId" | "cycleId" | "issuedAt" | "expiresAt" | "setpoints"
      > & {
        approvedBy: SetpointCommand["approvedBy"] | null;
      }
    >;
    readbacks: Array<
      Pick<Readback, "trigger" | "shed" | "mode" | "setpoints" | "time" | "lastSeq"> & {
        commandSeq: number | null;
        accepted: boolean | null;
        code: string | null;
        reason: string | null;
      }
    >;
    lastValidation:
      | (Pick<ValidationResult, "proposalId" | "verdict" | "mode" | "next"> & {
          atMs: number;
          failed: Array<{ name: string; reason: string }>;
        })
      | null;
  };
  parameters: ParameterView[];
  tagHealth: {
    timeMs: number;
    tags: Array<{
      tag: string;
      unit: string | null;
      status: string;
      lastTimeMs: number | null;
      lastGoodTimeMs: number | null;
      good: number;
      rejected: number;
      detail: string | null;
    }>;
    unknown: number;
  } | null;
  prices: (Prices & { receivedAtMs: number }) | null;
  constraints: {
    cycleId: string | null;
    objectiveUnit: string;
    active: Proposal["active"];
    constraints: Array<{
      name: string;
      kind: string;
      value: number;
      unit: string | null;
      active: boolean;
      shadowPrice: number;
      shadowPriceUnit: string;
    }>;
  } | null;
  profit: ProfitPoint[];
  reconciliation: {
    cycleId: string | null;
    method: string;
    globalPassed: boolean | null;
    statistic: number | null;
    critical: number | null;
    grossErrors: Array<{ tag: string; unit: string; estimatedSize: number }>;
    adjustments: Array<{
      tag: string;
      unit: string;
      measured: number | null;
      value: number | null;
      status: string;
    }>;
  } | null;
  trends: TrendView[];
}

/** A site's view. */
export interface ConsoleView {
  /**
   * Folds one event in; returns the sections it changed (empty when it changed nothing). `stream`
   * is the stream it came on (e.g. "state.mode"); it tells validate's mode state from a request.
   */
  apply(event: AnyEvent, nowMs: number, stream?: string): Set<Section>;
  /** The whole picture at `nowMs` (silence and approval expiry are judged against it). */
  state(nowMs: number): ConsoleState;
  /** One section of the picture (for live updates). */
  section(name: Section, nowMs: number): unknown;
  /** Trend points changed since the last call, per tag; clears the record. */
  takeTrendPatch(): TrendPatch[];
  /** The proposal is waiting for approval at `nowMs`. */
  isPending(proposalId: string, nowMs: number): boolean;
}

class Bounded<V> extends Map<string, V> {
  constructor(private readonly cap: number) {
    super();
  }
  override set(k: string, v: V): this {
    if (!super.has(k)) {
      super.set(k, v);
      while (this.size > this.cap) {
        const first = this.keys().next().value;
        if (first === undefined) break;
        super.delete(first);
      }
    } else super.set(k, v);
    return this;
  }
}

interface Series {
  tag: string;
  unit: string | null;
  key: boolean;
  points: Array<[number, number]>;
  lastCount: number;
  setpoint: Array<[number, number]>;
  dirtyFromMs: number | undefined;
  setpointDirtyFromMs: number | undefined;
}

const eventMs = (e: { time: string }): number => {
  const t = Date.parse(e.time);
  return Number.isFinite(t) ? t : 0;
};

/** Seconds in the time unit after the last '/' of an objective's unit (USD/s → 1, USD/h → 3600), or null. */
export function rateUnitSeconds(unit: string): { seconds: number; perUnit: string } | null {
  const m = /^(.*)\/\s*(s|min|h|d)$/.exec(unit.trim());
  if (!m?.[1] || !m[2]) return null;
  const seconds = { s: 1, min: 60, h: 3600, d: 86400 }[m[2] as "s" | "min" | "h" | "d"];
  return { seconds, perUnit: m[1].trim() };
}

function pushBounded<T>(list: T[], item: T, cap: number): void {
  list.push(item);
  if (list.length > cap) list.splice(0, list.length - cap);
}

/** Creates the view of site `site`. */
export function createView(site: string, options: ViewOptions = {}): ConsoleView {
  const o = {
    trendStepMs: options.trendStepMs ?? 5000,
    trendPoints: options.trendPoints ?? 720,
    trendTags: options.trendTags ?? [],
    maxTrendTags: options.maxTrendTags ?? 24,
    cycles: options.cycles ?? 30,
    parameterPoints: options.parameterPoints ?? 200,
    profitPoints: options.profitPoints ?? 1000,
    decisions: options.decisions ?? 50,
    commands: options.commands ?? 20,
    silentAfterIntervals: options.silentAfterIntervals ?? 3,
  };
  const services = new Bounded<ConsoleState["services"][number]>(200);
  const cycles = new Bounded<CycleView>(o.cycles);
  const proposals = new Bounded<{ event: Event<"rto.proposal.v1">; atMs: number }>(20);
  const pending = new Bounded<PendingProposal>(20);
  const answered = new Bounded<true>(200);
  const snapshotEndMs = new Bounded<number>(200);
  const decisions: DecisionView[] = [];
  const commands: ConsoleState["control"]["commands"] = [];
  const readbacks: ConsoleState["control"]["readbacks"] = [];
  let lastValidation: ConsoleState["control"]["lastValidation"] = null;
  const parameters = new Bounded<ParameterView>(200);
  const profit: ProfitPoint[] = [];
  let baseline: { value: number; atMs: number } | null = null;
  let lastProposal: Event<"rto.proposal.v1"> | null = null;
  let mode: ConsoleState["overview"]["mode"] = null;
  let steady: ConsoleState["overview"]["steady"] = null;
  let tagHealth: ConsoleState["tagHealth"] = null;
  let prices: ConsoleState["prices"] = null;
  let reconciliation: ConsoleState["reconciliation"] = null;
  const series = new Map<string, Series>();
  const keyTags = new Set<string>();
  const wanted = new Set(o.trendTags);

  const seriesFor = (tag: string, unit: string | null): Series | undefined => {
    let s = series.get(tag);
    if (s) {
      if (unit && !s.unit) s.unit = unit;
      return s;
    }
    if (wanted.size > 0 && !wanted.has(tag)) return undefined;
    if (series.size >= o.maxTrendTags) {
      // A key tag may take the place of a non-key tag that was trended only because it came first.
      if (!keyTags.has(tag)) return undefined;
      const victim = [...series.values()].find((x) => !x.key && !wanted.has(x.tag));
      if (!victim) return undefined;
      series.delete(victim.tag);
    }
    s = {
      tag,
      unit,
      key: keyTags.has(tag),
      points: [],
      lastCount: 0,
      setpoint: [],
      dirtyFromMs: undefined,
      setpointDirtyFromMs: undefined,
    };
    series.set(tag, s);
    return s;
  };

  const addPoint = (s: Series, timeMs: number, value: number): void => {
    const bucket = Math.floor(timeMs / o.trendStepMs) * o.trendStepMs;
    const last = s.points.at(-1);
    if (last && last[0] === bucket) {
      s.lastCount++;
      last[1] += (value - last[1]) / s.lastCount;
    } else if (!last || bucket > last[0]) {
      s.points.push([bucket, value]);
      s.lastCount = 1;
      if (s.points.length > o.trendPoints) s.points.splice(0, s.points.length - o.trendPoints);
    } else {
      return; // older than the trend's end: late data is not redrawn
    }
    s.dirtyFromMs = Math.min(s.dirtyFromMs ?? bucket, bucket);
  };

  const addSetpoint = (s: Series, timeMs: number, value: number): void => {
    const last = s.setpoint.at(-1);
    if (last && timeMs < last[0]) return;
    if (last && last[0] === timeMs) last[1] = value;
    else pushBounded(s.setpoint, [timeMs, value], o.trendPoints);
    s.setpointDirtyFromMs = Math.min(s.setpointDirtyFromMs ?? timeMs, timeMs);
  };

  const cycleOf = (id: string, atMs: number): CycleView => {
    let c = cycles.get(id);
    if (!c) {
      c = { cycleId: id, firstAtMs: atMs, lastAtMs: atMs, state: "open", outcome: null, stages: [] };
      cycles.set(id, c);
    }
    return c;
  };

  const onCycle = (e: Event<"rto.cycle.v1">): void => {
    const id = e.cycleid ?? e.causationid ?? e.id;
    const at = eventMs(e);
    const c = cycleOf(id, at);
    c.lastAtMs = Math.max(c.lastAtMs, at);
    pushBounded(
      c.stages,
      {
        status: e.data.status,
        stage: e.data.stage ?? null,
        outcome: e.data.outcome ?? null,
        reasons: (e.data.reasons ?? []).slice(0, 10),
        atMs: at,
      },
      40,
    );
    c.outcome = e.data.outcome ?? e.data.status;
    if (e.data.status === "closed") c.state = "closed";
    else if (e.data.status === "aborted") c.state = "aborted";
    else if (e.data.status === "alarm") c.state = "alarm";
    // A cycle that ended drops its proposal from the approval list.
    if (e.data.status === "aborted" || e.data.status === "closed") {
      for (const [pid, p] of pending) if (p.cycleId === id) pending.delete(pid);
    }
  };

  const onValidation = (e: Event<"rto.validation.v1">): void => {
    const d = e.data;
    const at = eventMs(e);
    lastValidation = {
      proposalId: d.proposalId,
      verdict: d.verdict,
      mode: d.mode,
      next: d.next,
      atMs: at,
      failed: d.checks
        .filter((c) => c.outcome === "fail")
        .slice(0, 20)
        .map((c) => ({ name: c.name, reason: c.reason })),
    };
    if (d.next !== "await-approval" || answered.has(d.proposalId)) {
      pending.delete(d.proposalId);
      return;
    }
    const proposal = proposals.get(d.proposalId)?.event;
    const bounds = new Map(proposal?.data.setpoints.map((s) => [s.tag, s]) ?? []);
    // validate keeps one proposal waiting at a time: a newer one supersedes the rest.
    pending.clear();
    pending.set(d.proposalId, {
      proposalId: d.proposalId,
      cycleId: e.cycleid ?? proposal?.cycleid ?? null,
      validatedAtMs: at,
      expiresAtMs: d.approvalExpiresAt ?? null,
      objective: proposal?.data.objective ?? null,
      setpoints: d.setpoints.map((s) => ({
        decision: s.decision,
        tag: s.tag,
        unit: s.unit,
        from: s.from,
        target: s.target,
        action: s.action,
        lower: bounds.get(s.tag)?.lower ?? null,
        upper: bounds.get(s.tag)?.upper ?? null,
      })),
      checks: {
        passed: d.checks.filter((c) => c.outcome === "pass").length,
        skipped: d.checks.filter((c) => c.outcome === "skip").length,
        failed: d.checks.filter((c) => c.outcome === "fail").length,
      },
    });
  };

  const onProposal = (e: Event<"rto.proposal.v1">): void => {
    const at = eventMs(e);
    proposals.set(e.id, { event: e, atMs: at });
    lastProposal = e;
    const p = pending.get(e.id);
    if (p && !p.objective) {
      p.objective = e.data.objective;
      const bounds = new Map(e.data.setpoints.map((s) => [s.tag, s]));
      for (const s of p.setpoints) {
        s.lower = bounds.get(s.tag)?.lower ?? null;
        s.upper = bounds.get(s.tag)?.upper ?? null;
      }
    }
    // Profit at the current operation: the plant's measured objective where the optimizer gives it.
    const now = e.data.mismatch.plantObjective ?? e.data.objective.current;
    const t = (e.cycleid ? snapshotEndMs.get(e.cycleid) : undefined) ?? at;
    const last = profit.at(-1);
    if (last && t <= last.tMs) return;
    baseline ??= { value: now, atMs: t };
    const sign = e.data.objective.sense === "max" ? 1 : -1;
    const rate = rateUnitSeconds(e.data.objective.unit);
    let earned = last?.earned ?? 0;
    if (last && rate) {
      // Trapezoid of the gain over the baseline between two cycles, in the rate's own time unit.
      const dt = (t - last.tMs) / 1000 / rate.seconds;
      earned += (sign * (last.now - baseline.value + (now - baseline.value)) * dt) / 2;
    }
    pushBounded(profit, { tMs: t, now, earned }, o.profitPoints);
  };

  const onModel = (e: Event<"rto.model.v1">): void => {
    const d = e.data;
    const t = d.window.endMs ?? eventMs(e);
    for (const p of d.parameters) {
      let v = parameters.get(p.symbol);
      if (!v) {
        v = {
          symbol: p.symbol,
          unit: p.unit,
          inForce: p.inForce,
          lastStatus: d.status,
          lastReasons: [],
          points: [],
        };
        parameters.set(p.symbol, v);
      }
      v.inForce = p.inForce;
      v.unit = p.unit;
      v.lastStatus = d.status;
      v.lastReasons = [...p.reasons, ...d.reasons].slice(0, 5).map((r) => `${r.code}: ${r.message}`);
      if (p.accepted && p.value !== null) {
        const last = v.points.at(-1);
        if (last && t <= last.tMs) continue;
        pushBounded(
          v.points,
          { tMs: t, value: p.value, ciLower: p.ciLower, ciUpper: p.ciUpper },
          o.parameterPoints,
        );
      }
    }
  };

  const onTagHealth = (d: TagHealth): void => {
    tagHealth = {
      timeMs: d.timeMs,
      unknown: d.unknown.length + (d.unknownDropped ?? 0),
      tags: d.tags.slice(0, 500).map((t) => {
        const good = t.window.good ?? 0;
        const all = Object.values(t.window).reduce((a, b) => a + (b ?? 0), 0);
        return {
          tag: t.tag,
          unit: t.unit ?? null,
          status: t.status,
          lastTimeMs: t.lastTimeMs,
          lastGoodTimeMs: t.lastGoodTimeMs,
          good,
          rejected: all - good,
          detail: t.lastRejection ? t.lastRejection.detail : null,
        };
      }),
    };
  };

  const apply = (event: AnyEvent, nowMs: number, stream?: string): Set<Section> => {
    const changed = new Set<Section>();
    switch (event.type) {
      case "rto.heartbeat.v1": {
        const d = event.data;
        services.set(`${d.service}/${d.instance}`, {
          service: d.service,
          instance: d.instance,
          status: d.status,
          lastSeenMs: nowMs,
          intervalS: d.intervalS,
          silent: false,
          uptimeS: d.uptimeS ?? null,
        });
        changed.add("services");
        break;
      }
      case "rto.cycle.v1":
        onCycle(event);
        changed.add("cycles").add("overview").add("pending");
        break;
      case "rto.steady.v1": {
        const d = event.data;
        steady = {
          state: d.state,
          steady: d.steady,
          timeMs: d.timeMs,
          steadySinceMs: d.steadySinceMs,
          notSteady: d.notSteady.slice(0, 20),
          blockedBy: d.blockedBy.slice(0, 20),
          receivedAtMs: nowMs,
        };
        changed.add("overview");
        break;
      }
      case "rto.snapshot.v1": {
        if (event.cycleid) snapshotEndMs.set(event.cycleid, event.data.endMs);
        for (const t of event.data.tags) {
          if (!t.key || keyTags.has(t.tag)) continue;
          keyTags.add(t.tag);
          const s = series.get(t.tag) ?? seriesFor(t.tag, t.unit);
          if (s) s.key = true;
          changed.add("trends");
        }
        break;
      }
      case "rto.measurements.v1":
        for (const v of event.data.values) {
          if (v.value === null || !Number.isFinite(v.value)) continue;
          if (v.status !== undefined && v.status !== "good") continue;
          const s = seriesFor(v.tag, v.unit ?? null);
          if (!s) continue;
          addPoint(s, v.time, v.value);
          changed.add("trends");
        }
        break;
      case "rto.tag-health.v1":
        onTagHealth(event.data);
        changed.add("tagHealth");
        break;
      case "rto.prices.v1":
        prices = { ...event.data, receivedAtMs: nowMs };
        changed.add("prices");
        break;
      case "rto.reconciled.v1": {
        const d = event.data;
        reconciliation = {
          cycleId: event.cycleid ?? null,
          method: d.method,
          globalPassed: d.globalTest?.passed ?? null,
          statistic: d.globalTest?.statistic ?? null,
          critical: d.globalTest?.critical ?? null,
          grossErrors: d.grossErrors
            .slice(0, 20)
            .map((g) => ({ tag: g.tag, unit: g.unit, estimatedSize: g.estimatedSize })),
          adjustments: d.tags.slice(0, 100).map((t) => ({
            tag: t.tag,
            unit: t.unit,
            measured: t.measured,
            value: t.value,
            status: t.status,
          })),
        };
        changed.add("reconciliation");
        break;
      }
      case "rto.model.v1":
        onModel(event);
        changed.add("parameters");
        break;
      case "rto.proposal.v1":
        onProposal(event);
        changed.add("pending").add("constraints").add("profit").add("overview");
        break;
      case "rto.validation.v1":
        onValidation(event);
        changed.add("pending").add("control");
        break;
      case "rto.command.v1": {
        const d = event.data;
        pushBounded(
          commands,
          {
            seq: d.seq,
            mode: d.mode,
            proposalId: d.proposalId,
            cycleId: d.cycleId,
            issuedAt: d.issuedAt,
            expiresAt: d.expiresAt,
            setpoints: d.setpoints,
            approvedBy: d.approvedBy ?? null,
          },
          o.commands,
        );
        pending.delete(d.proposalId);
        changed.add("control").add("pending");
        break;
      }
      case "rto.readback.v1": {
        const d = event.data;
        pushBounded(
          readbacks,
          {
            trigger: d.trigger,
            shed: d.shed,
            mode: d.mode,
            setpoints: d.setpoints,
            time: d.time,
            lastSeq: d.lastSeq,
            commandSeq: d.commandSeq ?? null,
            accepted: d.accepted ?? null,
            code: d.code ?? null,
            reason: d.reason ?? null,
          },
          o.commands,
        );
        for (const sp of d.setpoints) {
          // A setpoint tag "FI-102.SP" belongs on the trend of its measured tag "FI-102".
          const tag = sp.tag.split(".")[0] ?? sp.tag;
          const s = series.get(tag) ?? seriesFor(tag, sp.unit);
          if (s) {
            addSetpoint(s, d.time, sp.current);
            changed.add("trends");
          }
        }
        changed.add("control");
        break;
      }
      case "rto.operator-mode.v1": {
        // validate's state comes on state.mode; without the stream, its 'accepted' or source tells.
        const isState =
          stream !== undefined
            ? stream === "state.mode"
            : event.data.accepted !== undefined || event.source.includes("/validate/");
        if (isState) {
          mode = { ...event.data, receivedAtMs: nowMs };
          changed.add("overview");
        } else {
          pushBounded(
            decisions,
            {
              kind: "mode",
              user: event.data.user,
              decision: event.data.mode,
              reason: event.data.reason,
              proposalId: null,
              atMs: event.data.at ?? eventMs(event),
            },
            o.decisions,
          );
          changed.add("decisions");
        }
        break;
      }
      case "rto.operator-approval.v1": {
        const d = event.data;
        pushBounded(
          decisions,
          {
            kind: "approval",
            user: d.user,
            decision: d.decision,
            reason: d.reason ?? null,
            proposalId: d.proposalId,
            atMs: d.at,
          },
          o.decisions,
        );
        answered.set(d.proposalId, true);
        pending.delete(d.proposalId);
        changed.add("decisions").add("pending");
        break;
      }
      case "rto.plant-control.v1":
      case "rto.deadletter.v1":
        break;
      default: {
        const _exhaustive: never = event;
        return _exhaustive;
      }
    }
    return changed;
  };

  const overview = (nowMs: number): ConsoleState["overview"] => {
    const lastCycle = [...cycles.values()].at(-1) ?? null;
    let profitView: ConsoleState["overview"]["profit"] = null;
    const last = profit.at(-1);
    if (last && baseline && lastProposal) {
      const obj = lastProposal.data.objective;
      const rate = rateUnitSeconds(obj.unit);
      profitView = {
        unit: obj.unit,
        sense: obj.sense,
        now: last.now,
        baseline: baseline.value,
        baselineAtMs: baseline.atMs,
        change: last.now - baseline.value,
        earned: last.earned,
        earnedUnit: rate ? rate.perUnit : null,
        proposedChange: obj.change,
      };
    }
    void nowMs;
    return { mode, lastCycle, steady, profit: profitView };
  };

  const pendingAt = (nowMs: number): PendingProposal[] =>
    [...pending.values()].filter((p) => p.expiresAtMs === null || p.expiresAtMs > nowMs);

  const section = (name: Section, nowMs: number): unknown => {
    switch (name) {
      case "overview":
        return overview(nowMs);
      case "services":
        return [...services.values()]
          .map((s) => ({
            ...s,
            silent:
              s.status !== "stopping" && nowMs - s.lastSeenMs > o.silentAfterIntervals * s.intervalS * 1000,
          }))
          .sort((a, b) => a.service.localeCompare(b.service) || a.instance.localeCompare(b.instance));
      case "cycles":
        return [...cycles.values()].reverse();
      case "pending":
        return pendingAt(nowMs);
      case "decisions":
        return [...decisions].reverse();
      case "control":
        return { commands: [...commands].reverse(), readbacks: [...readbacks].reverse(), lastValidation };
      case "parameters":
        return [...parameters.values()];
      case "tagHealth":
        return tagHealth;
      case "prices":
        return prices;
      case "constraints": {
        if (!lastProposal) return null;
        const d: Proposal = lastProposal.data;
        return {
          cycleId: lastProposal.cycleid ?? null,
          objectiveUnit: d.objective.unit,
          active: d.active,
          constraints: d.constraints.map((c) => ({
            name: c.name,
            kind: c.kind,
            value: c.value,
            unit: c.unit ?? null,
            active: c.active,
            shadowPrice: c.shadowPrice,
            shadowPriceUnit: c.shadowPriceUnit,
          })),
        };
      }
      case "profit":
        return profit;
      case "reconciliation":
        return reconciliation;
      case "trends":
        return [...series.values()]
          .sort((a, b) => Number(b.key) - Number(a.key) || a.tag.localeCompare(b.tag))
          .map((s) => ({ tag: s.tag, unit: s.unit, key: s.key, points: s.points, setpoint: s.setpoint }));
    }
  };

  return {
    apply,
    section,
    state(nowMs) {
      return {
        site,
        atMs: nowMs,
        overview: overview(nowMs),
        services: section("services", nowMs) as ConsoleState["services"],
        cycles: section("cycles", nowMs) as CycleView[],
        pending: pendingAt(nowMs),
        decisions: section("decisions", nowMs) as DecisionView[],
        control: section("control", nowMs) as ConsoleState["control"],
        parameters: section("parameters", nowMs) as ParameterView[],
        tagHealth,
        prices,
        constraints: section("constraints", nowMs) as ConsoleState["constraints"],
        profit,
        reconciliation,
        trends: section("trends", nowMs) as TrendView[],
      };
    },
    takeTrendPatch() {
      const out: TrendPatch[] = [];
      for (const s of series.values()) {
        if (s.dirtyFromMs === undefined && s.setpointDirtyFromMs === undefined) continue;
        const from = s.dirtyFromMs ?? Number.POSITIVE_INFINITY;
        const spFrom = s.setpointDirtyFromMs;
        out.push({
          tag: s.tag,
          unit: s.unit,
          key: s.key,
          fromMs: Number.isFinite(from) ? from : (s.points.at(-1)?.[0] ?? 0) + 1,
          points: s.points.filter((p) => p[0] >= from).map((p) => [p[0], p[1]] as [number, number]),
          setpointFromMs: spFrom ?? null,
          setpoint: spFrom === undefined ? [] : s.setpoint.filter((p) => p[0] >= spFrom),
        });
        s.dirtyFromMs = undefined;
        s.setpointDirtyFromMs = undefined;
      }
      return out;
    },
    isPending(proposalId, nowMs) {
      return pendingAt(nowMs).some((p) => p.proposalId === proposalId);
    },
  };
}
