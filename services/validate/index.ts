/**
 * The validate service, wiring only: proposals in, checks (checks.ts), modes and approvals
 * (modes.ts), ramped signed dispatch (dispatch.ts), and a watch on the control side's answer.
 *
 * Streams read: proposal, snapshot and model (what the checks need of the cycle), readback
 * (setpoints in force, last accepted seq, answers to commands), operator.mode, operator.approval.
 * Streams written: validation (every verdict), cycle (aborted / stage-done / alarm with reasons),
 * command (signed setpoints; only this service may publish there), state.mode (retained).
 * The kit runtime's heartbeat on heartbeat.validate is what the control gateway's watchdog follows.
 *
 * On any failure validate holds the last good setpoints: it sends nothing and says why. After a
 * refused or unanswered command it keeps holding until an operator sends a mode event.
 */
import { existsSync, readFileSync, renameSync, writeFileSync } from "node:fs";
import { type SigningKey, signCommand } from "../kit/command-signing.js";
import type { Event } from "../kit/envelope.js";
import type { CycleStatus, OperatorMode, Readback, ValidationResult } from "../kit/generated/messages.js";
import { type Deps, type Service, startRuntime } from "../kit/service.js";
import { subject } from "../kit/subjects.js";
import { loadSiteModelFile, type SiteModel, type ValidationPolicy } from "../model/index.js";
import {
  type CheckOptions,
  type ModelGateInput,
  type MoveRecord,
  runChecks,
  type SetpointOverride,
} from "./checks.js";
import type { ValidateConfig } from "./config.js";
import { buildCommand, createReadbackWatch, inForceFromReadback, nextSeq, planDispatch } from "./dispatch.js";
import { ValidateError, type ValidateReasonCode } from "./errors.js";
import { createModeKeeper, type ModeState } from "./modes.js";

/** What validate may be given besides the kit's dependencies. */
export interface ValidateDeps extends Deps {
  /** An already loaded site model; default: loaded from `validate.siteModelFile`. */
  model?: SiteModel;
  /** The command-signing key (main.ts reads it from STEADFAST_COMMAND_KEY or a key file). Required. */
  signingKey: SigningKey;
}

/** The running validate service, with read-outs for tests and the console. */
export interface ValidateService extends Service {
  mode(): ModeState;
  /** Why dispatch is held, when it is. */
  holding(): string | undefined;
  /** Last command sequence number sent. */
  lastSeq(): number;
}

type Reason = { code: ValidateReasonCode | string; message: string };

class BoundedMap<V> extends Map<string, V> {
  constructor(private readonly cap: number) {
    super();
  }
  override set(k: string, v: V): this {
    super.delete(k);
    super.set(k, v);
    while (this.size > this.cap) {
      const first = this.keys().next().value;
      if (first === undefined) break;
      super.delete(first);
    }
    return this;
  }
}

function readSeqFile(path: string | undefined): number {
  if (!path || !existsSync(path)) return 0;
  try {
    const v = JSON.parse(readFileSync(path, "utf8")) as { lastSeq?: unknown };
    return Number.isSafeInteger(v.lastSeq) && (v.lastSeq as number) >= 0 ? (v.lastSeq as number) : 0;
  } catch (err) {
    throw new ValidateError("VALIDATE_STATE_FILE", `cannot read ${path}: ${(err as Error).message}`, {
      cause: err,
    });
  }
}

function writeSeqFile(path: string | undefined, lastSeq: number): void {
  if (!path) return;
  // Write-then-rename: a crash mid-write never leaves a truncated file that would reset numbering.
  writeFileSync(`${path}.tmp`, JSON.stringify({ lastSeq }));
  renameSync(`${path}.tmp`, path);
}

/**
 * The setpoints in force at `nowMs` by tag: each readback setpoint's `current` moved toward its
 * `target` at its ramp rate for the time since the readback. The answer to a command is sent when
 * the ramp starts, and status readbacks may be far apart; without the projection the next cycle's
 * move would be measured from where the last ramp began, and a proposal one move limit beyond the
 * new target would read as two.
 */
export function inForceAt(rb: Readback | undefined, nowMs: number): Map<string, number> {
  if (!rb) return new Map();
  const elapsedS = Math.max(0, (nowMs - rb.time) / 1000);
  const projected: Readback = {
    ...rb,
    setpoints: rb.setpoints.map((s) => {
      if (s.rampPerS === undefined || s.current === s.target) return s;
      const reach = s.rampPerS * elapsedS;
      const current =
        s.target > s.current ? Math.min(s.target, s.current + reach) : Math.max(s.target, s.current - reach);
      return { ...s, current };
    }),
  };
  return inForceFromReadback(projected);
}

/** Starts validate. Throws on a bad site model, an override naming an unknown tag, or no broker. */
export async function start(config: Readonly<ValidateConfig>, deps: ValidateDeps): Promise<ValidateService> {
  const o = config.validate;
  if (!deps.signingKey)
    throw new ValidateError("VALIDATE_KEY_MISSING", "validate needs a command-signing key");
  if (!deps.model && !o.siteModelFile) {
    throw new ValidateError(
      "VALIDATE_CONFIG_INVALID",
      "validate.siteModelFile is required when no model is injected",
    );
  }
  const model = deps.model ?? (await loadSiteModelFile(o.siteModelFile as string));
  const policy: ValidationPolicy = { ...model.validation, ...o.policy };
  const tags = new Set(model.decisions.map((d) => d.setpointTag));
  const overrides = new Map<string, SetpointOverride>();
  const setOverrides = (list: readonly SetpointOverride[]) => {
    for (const ov of list) {
      if (!tags.has(ov.tag.replace(/\.SP$/, ""))) {
        throw new ValidateError(
          "VALIDATE_CONFIG_INVALID",
          `override names tag ${ov.tag}, which is no decision's setpoint tag`,
        );
      }
    }
    overrides.clear();
    for (const ov of list) overrides.set(ov.tag.replace(/\.SP$/, ""), { ...ov });
  };
  setOverrides(o.overrides);

  const checkOptions: CheckOptions = {
    policy,
    cyclePeriodS: o.cyclePeriodS,
    kkt: o.kkt,
    allowSoftViolated: o.allowSoftViolated,
    acceptedSolverStatuses: o.acceptedSolverStatuses,
    requireModelAccepted: o.requireModelAccepted,
    consistency: o.consistency,
    tolerance: o.tolerance,
  };

  const rt = await startRuntime("validate", config, deps);
  const { events, clock, log } = rt;

  const snapshots = new BoundedMap<number>(o.rememberCycles);
  const models = new BoundedMap<ModelGateInput>(o.rememberCycles);
  const history: MoveRecord[] = [];
  // The last readback that listed setpoints; the setpoints in force are projected from it along
  // each ramp to the time of a check (see inForceAt).
  let heldBack: Readback | undefined;
  let lastReadBackSeq: number | undefined;
  let lastSent = readSeqFile(o.dispatch.stateFile);
  let hold: string | undefined;
  const timers = new Set<NodeJS.Timeout>();
  const watch = createReadbackWatch();

  // Mode at start: the retained state when there is one (validate's own last word), else the config.
  let initial: ModeState = {
    mode: o.initialMode,
    user: "validate",
    reason: "initial mode from configuration",
    sinceMs: clock.now(),
  };
  try {
    const raw = await rt.bus.readState(subject(config.site, "state.mode"), { timeoutMs: 500 });
    if (raw) {
      const e = JSON.parse(Buffer.from(raw).toString("utf8")) as { type?: string; data?: OperatorMode };
      if (
        e.type === "rto.operator-mode.v1" &&
        e.data &&
        ["off", "advisory", "closed-loop"].includes(e.data.mode)
      ) {
        initial = {
          mode: e.data.mode,
          user: e.data.user,
          reason: `restored: ${e.data.reason}`.slice(0, 500),
          sinceMs: clock.now(),
        };
        if (e.data.overrides) setOverrides(e.data.overrides);
      }
    }
  } catch (err) {
    log.warn({ err }, "could not read retained mode state; using the configured mode");
  }
  const keeper = createModeKeeper<Event<"rto.proposal.v1">>({
    initial,
    approvalTimeoutS: o.approvalTimeoutS,
    allowClosedLoop: !policy.requireApproval,
  });

  const cycle = async (data: CycleStatus, cycleid: string, causedBy?: { id: string; cycleid?: string }) => {
    const d: CycleStatus = { ...data };
    if (d.reasons)
      d.reasons = d.reasons.slice(0, 50).map((r) => ({ code: r.code, message: r.message.slice(0, 1000) }));
    await events.publish("cycle", "rto.cycle.v1", d, causedBy ? { cycleid, causedBy } : { cycleid });
  };

  const publishMode = async (accepted: boolean, note?: string) => {
    const s = keeper.state();
    const data: OperatorMode = {
      mode: s.mode,
      user: s.user,
      reason: (note ?? s.reason).slice(0, 500) || "mode in force",
      at: Math.round(s.sinceMs),
      accepted,
      overrides: [...overrides.values()].slice(0, 200),
    };
    await events.publish("state.mode", "rto.operator-mode.v1", data, { retain: true });
  };

  const cancelPlanned = () => {
    for (const t of timers) clearTimeout(t);
    timers.clear();
  };

  const raiseAlarm = async (
    cycleId: string,
    reasons: Reason[],
    causedBy?: { id: string; cycleid?: string },
  ) => {
    cancelPlanned();
    watch.clear();
    hold = `holding the last good setpoints after a readback alarm (${reasons[0]?.code ?? "?"}); an operator mode event re-arms dispatch`;
    log.error({ cycleId, reasons }, "readback alarm: dispatch held");
    await cycle({ status: "alarm", stage: "readback", outcome: "held", reasons }, cycleId, causedBy);
  };

  const evaluate = (proposal: Event<"rto.proposal.v1">) => {
    const cycleId = proposal.cycleid ?? proposal.id;
    return runChecks(
      {
        proposal: proposal.data,
        nowMs: clock.now(),
        snapshotEndMs: snapshots.get(cycleId),
        model: models.get(cycleId),
        inForce: inForceAt(heldBack, clock.now()),
        history,
        overrides,
        ...(hold !== undefined ? { dispatchHold: hold } : {}),
      },
      model.decisions,
      checkOptions,
    );
  };

  const publishValidation = async (
    proposal: Event<"rto.proposal.v1">,
    result: ReturnType<typeof runChecks>,
    next: ValidationResult["next"],
    approvalExpiresAt?: number,
  ) => {
    const data: ValidationResult = {
      proposalId: proposal.id,
      verdict: result.verdict,
      mode: keeper.state().mode,
      next,
      checks: result.checks as ValidationResult["checks"],
      setpoints: result.setpoints,
    };
    if (approvalExpiresAt !== undefined) data.approvalExpiresAt = Math.round(approvalExpiresAt);
    return events.publish("validation", "rto.validation.v1", data, { causedBy: proposal });
  };

  const sendCommand = async (
    proposal: Event<"rto.proposal.v1">,
    setpoints: ReturnType<typeof planDispatch>[number]["setpoints"],
    approvedBy: { user: string; at: number; reason?: string } | undefined,
  ) => {
    const cycleId = proposal.cycleid ?? proposal.id;
    const seq = nextSeq(lastSent, lastReadBackSeq);
    // The number is spent before the command leaves: a crash after publishing never reuses it.
    lastSent = seq;
    writeSeqFile(o.dispatch.stateFile, seq);
    const now = clock.now();
    const unsigned = buildCommand({
      site: config.site,
      unit: o.unit,
      seq,
      nowMs: now,
      expiryS: policy.commandExpiryS,
      keyId: deps.signingKey.id,
      proposalId: proposal.id.slice(0, 64),
      cycleId: cycleId.slice(0, 64),
      setpoints,
      ...(approvedBy ? { approvedBy } : {}),
    });
    const signed = signCommand(unsigned, deps.signingKey);
    const ev = await events.publish("command", "rto.command.v1", signed, { causedBy: proposal });
    watch.expect({
      seq,
      proposalId: proposal.id,
      cycleId,
      eventId: ev.id,
      deadlineMs: now + o.dispatch.readbackTimeoutS * 1000,
    });
    log.info({ seq, cycleId, setpoints: setpoints.length }, "command sent");
    return ev;
  };

  const dispatch = async (
    proposal: Event<"rto.proposal.v1">,
    result: ReturnType<typeof runChecks>,
    approvedBy?: { user: string; at: number; reason?: string },
  ) => {
    const cycleId = proposal.cycleid ?? proposal.id;
    const steps = planDispatch(result.setpoints, o.dispatch);
    if (steps.length === 0) return;
    cancelPlanned();
    const moves: Record<string, number> = {};
    for (const s of result.setpoints) if (s.action === "move") moves[s.decision] = s.target - s.from;
    const record: MoveRecord = { cycleId, moves };
    const mm = proposal.data.mismatch;
    if (mm.modifiers) record.modifierIteration = mm.modifiers.iteration;
    if (mm.method === "modifier" && mm.excitation?.step !== undefined) record.excitation = true;
    history.push(record);
    while (history.length > o.historyCycles) history.shift();
    const [first, ...later] = steps;
    if (!first) return;
    const ev = await sendCommand(proposal, first.setpoints, approvedBy);
    await cycle(
      {
        status: "stage-done",
        stage: "dispatch",
        outcome: later.length ? `step 1/${steps.length}` : "sent",
        eventIds: [ev.id],
      },
      cycleId,
      proposal,
    );
    later.forEach((step, i) => {
      const t = setTimeout(() => {
        timers.delete(t);
        if (hold !== undefined) return;
        sendCommand(proposal, step.setpoints, approvedBy).catch((err: Error) =>
          log.error({ err }, "stepped command failed"),
        );
        if (i === later.length - 1) log.info({ cycleId, steps: steps.length }, "stepped dispatch complete");
      }, step.atS * 1000);
      timers.add(t);
    });
  };

  rt.track(
    await events.on(events.subject("snapshot"), ["rto.snapshot.v1"], (e) => {
      if (e.cycleid) snapshots.set(e.cycleid, e.data.endMs);
    }),
  );
  rt.track(
    await events.on(events.subject("model"), ["rto.model.v1"], (e) => {
      if (e.cycleid) {
        models.set(e.cycleid, {
          status: e.data.status,
          accepted: e.data.accepted,
          fit: e.data.fit ? { weightedRss: e.data.fit.weightedRss, dof: e.data.fit.dof } : null,
        });
      }
    }),
  );
  rt.track(
    await events.on(events.subject("readback"), ["rto.readback.v1"], async (e) => {
      const rb = e.data;
      if (rb.target.site !== config.site) return;
      lastReadBackSeq = Math.max(lastReadBackSeq ?? 0, rb.lastSeq);
      if (rb.setpoints.length > 0) heldBack = rb;
      const verdict = watch.onReadback(rb);
      if (!verdict) return;
      if (verdict.kind === "refused") {
        await raiseAlarm(
          verdict.command.cycleId,
          [
            {
              code: "VALIDATE_READBACK_REFUSED",
              message: `command seq ${verdict.command.seq} refused: ${verdict.code}: ${verdict.reason}`,
            },
          ],
          e,
        );
      } else {
        await cycle(
          { status: "stage-done", stage: "readback", outcome: "accepted" },
          verdict.command.cycleId,
          e,
        );
      }
    }),
  );

  rt.track(
    await events.on(events.subject("operator.mode"), ["rto.operator-mode.v1"], async (e) => {
      const change = keeper.request(e.data, clock.now());
      if (change.accepted) {
        if (e.data.overrides) {
          try {
            setOverrides(e.data.overrides);
          } catch (err) {
            log.warn({ err }, "mode event's overrides refused; previous overrides kept");
          }
        }
        if (hold !== undefined) log.info({ user: e.data.user }, "dispatch re-armed by operator");
        hold = undefined;
      }
      for (const p of change.dropped) {
        await cycle(
          {
            status: "aborted",
            stage: "validate",
            outcome: "dropped",
            reasons: [
              {
                code: "VALIDATE_SUPERSEDED",
                message: `mode changed to ${change.state.mode} by ${e.data.user} while waiting for approval`,
              },
            ],
          },
          p.cycleId,
          e,
        );
      }
      if (!change.accepted) log.warn({ reason: change.reason }, "mode change refused");
      await publishMode(change.accepted, change.accepted ? undefined : change.reason);
    }),
  );

  rt.track(
    await events.on(events.subject("operator.approval"), ["rto.operator-approval.v1"], async (e) => {
      const outcome = keeper.answer(e.data, clock.now());
      if (outcome.kind === "ignored") {
        log.warn({ proposalId: e.data.proposalId, code: outcome.code }, outcome.reason);
        return;
      }
      const proposal = outcome.pending.item;
      const cycleId = outcome.pending.cycleId;
      if (outcome.kind === "rejected") {
        await cycle(
          {
            status: "aborted",
            stage: "validate",
            outcome: "rejected",
            reasons: [
              {
                code: "VALIDATE_APPROVAL_REJECTED",
                message: `${e.data.user}: ${e.data.reason ?? "rejected"}`,
              },
            ],
          },
          cycleId,
          e,
        );
        return;
      }
      // Judged again at approval time: data age, setpoints in force and holds may have changed while it waited.
      const again = evaluate(proposal);
      await publishValidation(proposal, again, again.verdict === "pass" ? "dispatch" : "none");
      if (again.verdict !== "pass") {
        await cycle(
          {
            status: again.verdict === "fail" ? "aborted" : "stage-done",
            stage: "validate",
            outcome: again.verdict === "fail" ? "failed-at-approval" : "skipped",
            reasons: again.reasons,
          },
          cycleId,
          e,
        );
        return;
      }
      const approvedBy: { user: string; at: number; reason?: string } = { user: e.data.user, at: e.data.at };
      if (e.data.reason) approvedBy.reason = e.data.reason;
      await dispatch(proposal, again, approvedBy);
    }),
  );

  rt.track(
    await events.on(events.subject("proposal"), ["rto.proposal.v1"], async (e) => {
      const cycleId = e.cycleid ?? e.id;
      const result = evaluate(e);
      if (result.verdict === "fail") {
        await publishValidation(e, result, "none");
        await cycle(
          { status: "aborted", stage: "validate", outcome: "failed", reasons: result.reasons },
          cycleId,
          e,
        );
        return;
      }
      if (result.verdict === "skip") {
        await publishValidation(e, result, "none");
        await cycle(
          { status: "stage-done", stage: "validate", outcome: "skipped", reasons: result.reasons },
          cycleId,
          e,
        );
        return;
      }
      const after = keeper.afterValidation(e.id, cycleId, e, clock.now());
      if (after.next === "await-approval") {
        for (const p of after.superseded) {
          await cycle(
            {
              status: "aborted",
              stage: "validate",
              outcome: "superseded",
              reasons: [
                { code: "VALIDATE_SUPERSEDED", message: `proposal ${p.proposalId} superseded by ${e.id}` },
              ],
            },
            p.cycleId,
            e,
          );
        }
        await publishValidation(e, result, "await-approval", after.expiresAtMs);
        await cycle({ status: "stage-done", stage: "validate", outcome: "awaiting-approval" }, cycleId, e);
      } else if (after.next === "observe") {
        await publishValidation(e, result, "observe");
        await cycle(
          {
            status: "stage-done",
            stage: "validate",
            outcome: "observed",
            reasons: [{ code: "VALIDATE_MODE_OFF", message: "mode off: validated, nothing sent" }],
          },
          cycleId,
          e,
        );
      } else {
        await publishValidation(e, result, "dispatch");
        await dispatch(e, result);
      }
    }),
  );

  let sweeping = false;
  const sweep = async () => {
    if (sweeping) return;
    sweeping = true;
    try {
      const now = clock.now();
      for (const p of keeper.expire(now)) {
        await cycle(
          {
            status: "aborted",
            stage: "validate",
            outcome: "expired",
            reasons: [
              {
                code: "VALIDATE_APPROVAL_EXPIRED",
                message: `no approval of proposal ${p.proposalId} before ${new Date(p.expiresAtMs).toISOString()}`,
              },
            ],
          },
          p.cycleId,
        );
      }
      for (const c of watch.due(now)) {
        await raiseAlarm(c.cycleId, [
          {
            code: "VALIDATE_READBACK_TIMEOUT",
            message: `no readback for command seq ${c.seq} within ${o.dispatch.readbackTimeoutS} s`,
          },
        ]);
      }
    } finally {
      sweeping = false;
    }
  };
  const ticker = setInterval(() => {
    sweep().catch((err: Error) => log.error({ err }, "sweep failed"));
  }, o.tickMs);
  ticker.unref();
  rt.onStop(() => {
    clearInterval(ticker);
    cancelPlanned();
  });

  await publishMode(true);
  const handle = rt.ready();
  return { ...handle, mode: () => keeper.state(), holding: () => hold, lastSeq: () => lastSent };
}
