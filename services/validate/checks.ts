/**
 * The checks a proposal must pass before any setpoint goes to the control side. Pure: data and
 * time in, a named check list out; no bus, no clock of its own.
 *
 * Each check appears in the result by name, per decision where it is about one, with pass, fail
 * or skip and a reason. A deadband is a skip, not a failure: a move too small to be worth making is
 * left out; when every move is skipped the verdict is "skip" and nothing is sent. Any failure makes
 * the verdict "fail": the caller sends nothing and the last good setpoints hold.
 */
import type { Proposal, ValidatedSetpoint, ValidationCheck } from "../kit/generated/messages.js";
import type { SiteDecision, ValidationPolicy } from "../model/index.js";
import type { ValidateReasonCode } from "./errors.js";

/** The decision limits checks need (a SiteDecision of the site model fits). */
export type DecisionLimits = Pick<
  SiteDecision,
  "symbol" | "unit" | "setpointTag" | "min" | "max" | "maxMovePerCycle" | "rampPerS" | "deadband"
>;

/** An engineer-set override of one setpoint tag. */
export interface SetpointOverride {
  tag: string;
  /** True: the setpoint must not move. */
  hold?: boolean;
  /** Tighter lower bound, the decision's unit. */
  min?: number;
  /** Tighter upper bound, the decision's unit. */
  max?: number;
  note?: string;
}

/** Options of the checks beyond the site model's validation policy. */
export interface CheckOptions {
  /** The site model's validation policy (minImprovement, maxDataAgeS, maxFitChiSquareRatio are used). */
  policy: Pick<ValidationPolicy, "minImprovement" | "maxDataAgeS" | "maxFitChiSquareRatio">;
  /** RTO cycle period, s: a ramp must reach its target within it. */
  cyclePeriodS: number;
  /** Largest accepted KKT residuals, in the proposal's units (objective unit per decision unit, objective unit, constraint unit). */
  kkt: { maxStationarity: number; maxComplementarity: number; maxFeasibility: number };
  /** Accept a proposal whose status is soft-violated. */
  allowSoftViolated: boolean;
  /**
   * Solver statuses (rto.proposal.v1 solver.status, compared case-insensitively) that are accepted;
   * empty accepts any status the optimizer chose to publish.
   */
  acceptedSolverStatuses: readonly string[];
  /** Require the cycle's model update to be accepted (status accepted or no-parameters). */
  requireModelAccepted: boolean;
  /** Flip-flop guard: cycles looked back and the smallest move, as a fraction of (max − min), that counts. */
  consistency: { windowCycles: number; minReversalFraction: number };
  /** Relative tolerance on bounds, move and override limits (of max(1, |limit|)): absorbs round-off. */
  tolerance: number;
}

/** A past dispatched move: per decision symbol, target − from. */
export interface MoveRecord {
  cycleId: string;
  moves: Readonly<Record<string, number>>;
  /** Modifier updates behind the proposal that made the move (rto.proposal.v1 mismatch.modifiers.iteration), if any. */
  modifierIteration?: number;
  /** True when the move was an excitation step of modifier adaptation (a probe meant to be taken back). */
  excitation?: boolean;
}

/** The cycle's model update as far as the model-fit gate needs it. */
export interface ModelGateInput {
  status: "accepted" | "rejected" | "failed" | "no-parameters";
  accepted: boolean;
  fit: { weightedRss: number; dof: number } | null;
}

/** Everything one validation looks at. */
export interface CheckInput {
  proposal: Proposal;
  /** Now, epoch ms. */
  nowMs: number;
  /** End of the snapshot window the proposal rests on (rto.snapshot.v1 endMs), epoch ms; undefined when not seen. */
  snapshotEndMs: number | undefined;
  /** The cycle's model update; undefined when not seen. */
  model: ModelGateInput | undefined;
  /** Setpoints in force per tag, read back from the control side; a tag missing here falls back to the proposal's current. */
  inForce: ReadonlyMap<string, number>;
  /** Dispatched moves of past cycles, oldest first. */
  history: readonly MoveRecord[];
  /** Engineer overrides by setpoint tag. */
  overrides: ReadonlyMap<string, SetpointOverride>;
  /** Present while dispatch is held after a readback alarm: why. */
  dispatchHold?: string;
}

/** The result of the checks. */
export interface CheckResult {
  verdict: "pass" | "skip" | "fail";
  checks: ValidationCheck[];
  setpoints: ValidatedSetpoint[];
  /** The failures (or, for a skip, the skips) as cycle reasons. */
  reasons: Array<{ code: ValidateReasonCode; message: string }>;
}

type Name = ValidationCheck["name"];

const fmt = (x: number): string => (Number.isInteger(x) ? String(x) : x.toPrecision(6).replace(/\.?0+$/, ""));

function within(value: number, limit: number, tol: number, side: "le" | "ge"): boolean {
  const slack = tol * Math.max(1, Math.abs(limit));
  return side === "le" ? value <= limit + slack : value >= limit - slack;
}

/**
 * Runs every check on one proposal. `decisions` are the site model's decisions; a proposal setpoint
 * whose decision or tag the model lacks fails the bounds check.
 */
export function runChecks(
  input: CheckInput,
  decisions: readonly DecisionLimits[],
  options: Readonly<CheckOptions>,
): CheckResult {
  const checks: ValidationCheck[] = [];
  const setpoints: ValidatedSetpoint[] = [];
  const add = (
    name: Name,
    outcome: ValidationCheck["outcome"],
    reason: string,
    extra: Partial<Omit<ValidationCheck, "name" | "outcome" | "reason">> & { code?: ValidateReasonCode } = {},
  ) => {
    const c: ValidationCheck = { name, outcome, reason: reason.slice(0, 1000) };
    if (extra.code !== undefined) c.code = extra.code;
    if (extra.decision !== undefined) c.decision = extra.decision;
    if (extra.value !== undefined && Number.isFinite(extra.value)) c.value = extra.value;
    if (extra.limit !== undefined && Number.isFinite(extra.limit)) c.limit = extra.limit;
    if (extra.unit !== undefined) c.unit = extra.unit;
    checks.push(c);
  };
  const p = input.proposal;
  const tol = options.tolerance;

  // Solver status: the optimizer publishes only solved proposals, but it names how it solved.
  const solverStatus = p.solver.status;
  const statusOk =
    options.acceptedSolverStatuses.length === 0 ||
    options.acceptedSolverStatuses.some((s) => s.toLowerCase() === solverStatus.toLowerCase());
  if (!statusOk) {
    add(
      "solver-status",
      "fail",
      `${p.solver.name} ended with status '${solverStatus}' (${p.solver.message})`,
      {
        code: "VALIDATE_SOLVER_STATUS",
      },
    );
  } else if (p.status === "soft-violated" && !options.allowSoftViolated) {
    const soft = p.constraints.filter((c) => (c.violation ?? 0) > 0).map((c) => c.name);
    add("solver-status", "fail", `soft constraints violated: ${soft.join(", ") || "(unnamed)"}`, {
      code: "VALIDATE_SOFT_VIOLATED",
    });
  } else {
    add("solver-status", "pass", `${p.solver.name}: ${p.status}, status '${solverStatus}'`);
  }

  // KKT residual: a proposal that is not a first-order point is not an optimum, whatever the solver said.
  const k = p.kkt;
  const kktParts: Array<[string, number, number]> = [
    ["stationarity", k.stationarity, options.kkt.maxStationarity],
    ["complementarity", k.complementarity, options.kkt.maxComplementarity],
    ["feasibility", k.feasibility, options.kkt.maxFeasibility],
  ];
  const badKkt = kktParts.filter(([, v, lim]) => !(v <= lim));
  if (badKkt.length > 0) {
    const [name, v, lim] = badKkt[0] as [string, number, number];
    add("kkt-residual", "fail", badKkt.map(([n, val, l]) => `${n} ${fmt(val)} > ${fmt(l)}`).join("; "), {
      code: "VALIDATE_KKT_RESIDUAL",
      value: v,
      limit: lim,
      unit: name === "feasibility" ? "constraint unit" : p.objective.unit,
    });
  } else {
    add("kkt-residual", "pass", kktParts.map(([n, v, l]) => `${n} ${fmt(v)} ≤ ${fmt(l)}`).join("; "));
  }

  // Minimum predicted improvement, in the objective's own sense. A move modifier adaptation makes for
  // the plant gradient it will give is exempt: its worth is the information, and refusing it stalls
  // modifier adaptation as plain two-step. It is exempt from this check only.
  const gain = p.objective.sense === "max" ? p.objective.change : -p.objective.change;
  const minGain = options.policy.minImprovement;
  const probe = p.mismatch.method === "modifier" ? p.mismatch.excitation : undefined;
  if (probe) {
    add(
      "min-improvement",
      "pass",
      `${probe.step !== undefined ? "excitation step" : "probing move"} of modifier adaptation, exempt from the minimum ${fmt(minGain)} ${p.objective.unit}: predicted change ${fmt(gain)} ${p.objective.unit}; ${probe.reason}`,
      { value: gain, limit: minGain, unit: p.objective.unit },
    );
  } else if (!(gain >= minGain)) {
    add(
      "min-improvement",
      "fail",
      `predicted improvement ${fmt(gain)} ${p.objective.unit} is below the minimum ${fmt(minGain)}`,
      { code: "VALIDATE_IMPROVEMENT_SMALL", value: gain, limit: minGain, unit: p.objective.unit },
    );
  } else {
    add(
      "min-improvement",
      "pass",
      `predicted improvement ${fmt(gain)} ${p.objective.unit} ≥ ${fmt(minGain)}`,
      {
        value: gain,
        limit: minGain,
        unit: p.objective.unit,
      },
    );
  }

  // Age of the data behind the proposal: the snapshot's last sample against now.
  const maxAgeS = options.policy.maxDataAgeS;
  if (input.snapshotEndMs === undefined) {
    add("data-age", "fail", "the snapshot of this cycle was not seen: its age is unknown", {
      code: "VALIDATE_DATA_UNKNOWN",
      limit: maxAgeS,
      unit: "s",
    });
  } else {
    const ageS = (input.nowMs - input.snapshotEndMs) / 1000;
    if (!(ageS <= maxAgeS)) {
      add("data-age", "fail", `the snapshot is ${fmt(ageS)} s old; the limit is ${fmt(maxAgeS)} s`, {
        code: "VALIDATE_DATA_STALE",
        value: ageS,
        limit: maxAgeS,
        unit: "s",
      });
    } else {
      add("data-age", "pass", `the snapshot is ${fmt(ageS)} s old (limit ${fmt(maxAgeS)} s)`, {
        value: ageS,
        limit: maxAgeS,
        unit: "s",
      });
    }
  }

  // Model-fit gate.
  const m = input.model;
  if (!options.requireModelAccepted) {
    add("model-fit", "pass", "model gate off by configuration");
  } else if (m === undefined) {
    add("model-fit", "fail", "no model update of this cycle was seen", { code: "VALIDATE_MODEL_UNKNOWN" });
  } else if (m.status === "no-parameters") {
    add("model-fit", "pass", "the site declares no parameters to fit");
  } else if (!m.accepted || m.status !== "accepted") {
    add("model-fit", "fail", `the cycle's model update was ${m.status}`, { code: "VALIDATE_MODEL_REJECTED" });
  } else if (
    m.fit &&
    m.fit.dof > 0 &&
    !(m.fit.weightedRss / m.fit.dof <= options.policy.maxFitChiSquareRatio)
  ) {
    const ratio = m.fit.weightedRss / m.fit.dof;
    add(
      "model-fit",
      "fail",
      `weighted RSS per degree of freedom ${fmt(ratio)} exceeds ${fmt(options.policy.maxFitChiSquareRatio)}`,
      {
        code: "VALIDATE_MODEL_FIT_POOR",
        value: ratio,
        limit: options.policy.maxFitChiSquareRatio,
        unit: "1",
      },
    );
  } else {
    const ratio = m.fit && m.fit.dof > 0 ? m.fit.weightedRss / m.fit.dof : undefined;
    add(
      "model-fit",
      "pass",
      ratio === undefined
        ? "model update accepted"
        : `model update accepted, weighted RSS per dof ${fmt(ratio)}`,
      ratio === undefined ? {} : { value: ratio, limit: options.policy.maxFitChiSquareRatio, unit: "1" },
    );
  }

  if (input.dispatchHold !== undefined) {
    add("dispatch-hold", "fail", input.dispatchHold, { code: "VALIDATE_DISPATCH_HOLD" });
  }

  // Per-decision checks.
  const bySymbol = new Map(decisions.map((d) => [d.symbol, d]));
  const recent = input.history.slice(-Math.max(0, options.consistency.windowCycles));
  const readbackMissing: string[] = [];
  for (const sp of p.setpoints) {
    const d = bySymbol.get(sp.decision);
    if (!d || d.setpointTag !== sp.tag.replace(/\.SP$/, "")) {
      add("bounds", "fail", `decision ${sp.decision} (tag ${sp.tag}) is not a decision of the site model`, {
        code: "VALIDATE_DECISION_UNKNOWN",
        decision: sp.decision,
      });
      continue;
    }
    const u = d.unit;
    const known = input.inForce.get(d.setpointTag) ?? input.inForce.get(`${d.setpointTag}.SP`);
    if (known === undefined) readbackMissing.push(d.symbol);
    const from = known ?? sp.current;
    const target = sp.proposed;
    const move = target - from;
    const size = Math.abs(move);
    const inDeadband = size < d.deadband;
    const base = { decision: d.symbol, unit: u };

    if (!Number.isFinite(target) || !within(target, d.min, tol, "ge") || !within(target, d.max, tol, "le")) {
      add(
        "bounds",
        "fail",
        `${d.symbol} = ${fmt(target)} ${u} lies outside [${fmt(d.min)}, ${fmt(d.max)}] ${u}`,
        {
          ...base,
          code: "VALIDATE_BOUNDS",
          value: target,
          limit: target < d.min ? d.min : d.max,
        },
      );
    } else {
      add("bounds", "pass", `${d.symbol} = ${fmt(target)} ${u} within [${fmt(d.min)}, ${fmt(d.max)}]`, {
        ...base,
        value: target,
      });
    }

    if (d.maxMovePerCycle !== undefined && !within(size, d.maxMovePerCycle, tol, "le")) {
      add(
        "move-limit",
        "fail",
        `${d.symbol} moves ${fmt(size)} ${u}; at most ${fmt(d.maxMovePerCycle)} ${u} per cycle`,
        {
          ...base,
          code: "VALIDATE_MOVE_LIMIT",
          value: size,
          limit: d.maxMovePerCycle,
        },
      );
    } else {
      add(
        "move-limit",
        "pass",
        d.maxMovePerCycle === undefined
          ? `${d.symbol}: no move limit`
          : `${d.symbol} moves ${fmt(size)} ${u} ≤ ${fmt(d.maxMovePerCycle)}`,
        d.maxMovePerCycle === undefined ? base : { ...base, value: size, limit: d.maxMovePerCycle },
      );
    }

    if (d.rampPerS !== undefined && d.rampPerS > 0) {
      const reachS = size / d.rampPerS;
      if (!(reachS <= options.cyclePeriodS)) {
        add(
          "ramp-rate",
          "fail",
          `${d.symbol} needs ${fmt(reachS)} s at ${fmt(d.rampPerS)} ${u}/s; the cycle period is ${fmt(options.cyclePeriodS)} s`,
          { ...base, code: "VALIDATE_RAMP_TOO_SLOW", value: reachS, limit: options.cyclePeriodS, unit: "s" },
        );
      } else {
        add("ramp-rate", "pass", `${d.symbol} reaches its target in ${fmt(reachS)} s`, {
          ...base,
          value: reachS,
          limit: options.cyclePeriodS,
          unit: "s",
        });
      }
    } else {
      add("ramp-rate", "pass", `${d.symbol}: no ramp limit (a step)`, base);
    }

    if (inDeadband) {
      add(
        "deadband",
        "skip",
        `${d.symbol} moves ${fmt(size)} ${u}, within the deadband ${fmt(d.deadband)} ${u}: left as is`,
        {
          ...base,
          code: "VALIDATE_DEADBAND",
          value: size,
          limit: d.deadband,
        },
      );
    } else {
      add("deadband", "pass", `${d.symbol} moves ${fmt(size)} ${u} ≥ deadband ${fmt(d.deadband)}`, {
        ...base,
        value: size,
        limit: d.deadband,
      });
    }

    // Flip-flop: a reversal of a recent dispatched move, both beyond the threshold. Not a flip-flop
    // under modifier adaptation when the modifiers were updated from new plant-gradient information
    // since that move (the reversal answers what the plant said), or when that move was an
    // excitation step (a probe is meant to be taken back).
    const threshold = options.consistency.minReversalFraction * (d.max - d.min);
    const iteration = p.mismatch.modifiers?.iteration;
    const reversal = inDeadband
      ? undefined
      : recent.find((r) => {
          const prev = r.moves[d.symbol];
          const learned =
            iteration !== undefined && r.modifierIteration !== undefined && iteration > r.modifierIteration;
          return (
            prev !== undefined &&
            Math.abs(prev) >= threshold &&
            size >= threshold &&
            Math.sign(prev) === -Math.sign(move) &&
            !learned &&
            r.excitation !== true
          );
        });
    if (reversal) {
      add(
        "consistency",
        "fail",
        `${d.symbol} would move ${fmt(move)} ${u}, reversing ${fmt(reversal.moves[d.symbol] ?? 0)} ${u} of cycle ${reversal.cycleId} (within ${options.consistency.windowCycles} cycles, threshold ${fmt(threshold)} ${u})`,
        { ...base, code: "VALIDATE_FLIP_FLOP", value: move, limit: threshold },
      );
    } else {
      add(
        "consistency",
        "pass",
        `${d.symbol}: no reversal within ${options.consistency.windowCycles} cycles`,
        base,
      );
    }

    const o = input.overrides.get(d.setpointTag);
    if (o?.hold && !inDeadband) {
      add(
        "override",
        "fail",
        `${d.symbol} is held by an engineer${o.note ? ` (${o.note})` : ""}; the proposal moves it ${fmt(move)} ${u}`,
        {
          ...base,
          code: "VALIDATE_OVERRIDE_HOLD",
          value: move,
        },
      );
    } else if (
      o &&
      ((o.min !== undefined && !within(target, o.min, tol, "ge")) ||
        (o.max !== undefined && !within(target, o.max, tol, "le")))
    ) {
      add(
        "override",
        "fail",
        `${d.symbol} = ${fmt(target)} ${u} lies outside the engineer's bounds [${o.min ?? "−∞"}, ${o.max ?? "+∞"}]${o.note ? ` (${o.note})` : ""}`,
        {
          ...base,
          code: "VALIDATE_OVERRIDE_BOUNDS",
          value: target,
          limit: o.min !== undefined && target < o.min ? o.min : (o.max ?? o.min ?? 0),
        },
      );
    } else if (o) {
      add("override", "pass", `${d.symbol} respects the engineer's override`, base);
    }

    const out: ValidatedSetpoint = {
      decision: d.symbol,
      tag: sp.tag,
      unit: u,
      from,
      target,
      action: inDeadband ? "skip" : "move",
    };
    if (d.rampPerS !== undefined && d.rampPerS > 0) out.rampPerS = d.rampPerS;
    setpoints.push(out);
  }
  if (readbackMissing.length > 0) {
    add(
      "readback-known",
      "pass",
      `no read-back yet for ${readbackMissing.join(", ")}: moves measured from the proposal's current values`,
      {
        code: "VALIDATE_READBACK_UNKNOWN",
      },
    );
  }

  const failed = checks.filter((c) => c.outcome === "fail");
  const reasons = (failed.length > 0 ? failed : checks.filter((c) => c.outcome === "skip")).map((c) => ({
    code: (c.code ?? "VALIDATE_SOLVER_STATUS") as ValidateReasonCode,
    message: `${c.name}: ${c.reason}`.slice(0, 1000),
  }));
  const anyMove = setpoints.some((s) => s.action === "move");
  const verdict: CheckResult["verdict"] = failed.length > 0 ? "fail" : anyMove ? "pass" : "skip";
  return { verdict, checks, setpoints, reasons };
}
