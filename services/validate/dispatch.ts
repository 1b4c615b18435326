/**
 * Dispatch planning: which commands to send, when, with which sequence numbers, and whether the
 * control side took them. Pure: time is passed in; signing is the kit's (command-signing.ts).
 *
 * Moves start from the setpoints the control side reads back (bumpless: a setpoint that differs from
 * what the optimizer assumed is ramped from where it really is, never stepped). Two styles:
 * "gateway": one command with each target and its ramp rate; the gateway ramps (and clips the rate to
 * its own limit). "stepped": validate sends intermediate setpoints every stepS seconds, each at most
 * rampPerS·stepS further than the last, for a control side that only takes plain setpoints.
 */
import type { UnsignedCommand } from "../kit/command-signing.js";
import type { CommandSetpoint, Readback, ValidatedSetpoint } from "../kit/generated/messages.js";
import { ValidateError } from "./errors.js";

/** One command of a dispatch plan. */
export interface PlannedStep {
  /** Offset from the start of the dispatch, s. */
  atS: number;
  setpoints: CommandSetpoint[];
}

/** Options of a dispatch plan. */
export interface PlanOptions {
  /** "gateway" (default): one command, the gateway ramps. "stepped": intermediate setpoints. */
  style: "gateway" | "stepped";
  /** Period of the intermediate setpoints, s (stepped only). */
  stepS: number;
  /** Most commands one dispatch may take (stepped only); the step period grows to fit. */
  maxSteps: number;
}

/**
 * Intermediate values of one ramp from `from` to `target` at `rampPerS`, every `stepS` seconds
 * (the last one is the target itself). A missing or non-positive rate is a single step.
 */
export function rampValues(
  from: number,
  target: number,
  rampPerS: number | undefined,
  stepS: number,
): Array<{ atS: number; value: number }> {
  const delta = target - from;
  if (rampPerS === undefined || !(rampPerS > 0) || delta === 0) return [{ atS: 0, value: target }];
  const per = rampPerS * stepS;
  const n = Math.max(1, Math.ceil(Math.abs(delta) / per - 1e-12));
  const out: Array<{ atS: number; value: number }> = [];
  for (let i = 1; i <= n; i++) {
    const value = i === n ? target : from + Math.sign(delta) * per * i;
    out.push({ atS: (i - 1) * stepS, value });
  }
  return out;
}

/** Plans the commands that carry the moving setpoints of a validated proposal (skipped ones stay out). */
export function planDispatch(
  setpoints: readonly ValidatedSetpoint[],
  options: Readonly<PlanOptions>,
): PlannedStep[] {
  const moving = setpoints.filter((s) => s.action === "move");
  if (moving.length === 0) return [];
  if (options.style === "gateway") {
    return [
      {
        atS: 0,
        setpoints: moving.map((s) => {
          const c: CommandSetpoint = { tag: s.tag, value: s.target, unit: s.unit };
          if (s.rampPerS !== undefined) c.rampPerS = s.rampPerS;
          return c;
        }),
      },
    ];
  }
  // Longest ramp decides the step count; the period widens so no dispatch exceeds maxSteps commands.
  const longestS = Math.max(
    0,
    ...moving.map((s) => (s.rampPerS ? Math.abs(s.target - s.from) / s.rampPerS : 0)),
  );
  const stepS = Math.max(options.stepS, longestS / Math.max(1, options.maxSteps));
  const ramps = moving.map((s) => ({ s, values: rampValues(s.from, s.target, s.rampPerS, stepS) }));
  const count = Math.max(...ramps.map((r) => r.values.length));
  const steps: PlannedStep[] = [];
  for (let i = 0; i < count; i++) {
    steps.push({
      atS: i * stepS,
      setpoints: ramps.map(({ s, values }) => ({
        tag: s.tag,
        unit: s.unit,
        value: (values[Math.min(i, values.length - 1)] as { value: number }).value,
      })),
    });
  }
  return steps;
}

/**
 * The next command sequence number: one above the highest of what this sender used and what the
 * control side last read back, so numbering resumes after a restart of either side.
 */
export function nextSeq(lastSent: number, lastReadBack: number | undefined): number {
  return Math.max(lastSent, lastReadBack ?? 0) + 1;
}

/** What a command is built from. */
export interface CommandInput {
  site: string;
  unit: string;
  seq: number;
  nowMs: number;
  /** Validity of the command, s (the site's commandExpiryS). */
  expiryS: number;
  keyId: string;
  proposalId: string;
  cycleId: string;
  setpoints: CommandSetpoint[];
  /** Present for a command approved in advisory mode. */
  approvedBy?: { user: string; at: number; reason?: string };
}

/** Builds the unsigned command (sign it with signCommand). Throws VALIDATE_COMMAND_EMPTY for no setpoints. */
export function buildCommand(c: CommandInput): UnsignedCommand {
  const [first, ...rest] = c.setpoints;
  if (!first)
    throw new ValidateError(
      "VALIDATE_COMMAND_EMPTY",
      `command seq ${c.seq} for ${c.proposalId} has no setpoint`,
    );
  const out: UnsignedCommand = {
    target: { site: c.site, unit: c.unit },
    seq: c.seq,
    issuedAt: Math.round(c.nowMs),
    expiresAt: Math.round(c.nowMs + c.expiryS * 1000),
    keyId: c.keyId,
    mode: c.approvedBy ? "advisory-approved" : "closed-loop",
    proposalId: c.proposalId,
    cycleId: c.cycleId,
    setpoints: [first, ...rest],
  };
  if (c.approvedBy) out.approvedBy = c.approvedBy;
  return out;
}

/** A command whose readback is awaited. */
export interface AwaitedCommand {
  seq: number;
  proposalId: string;
  cycleId: string;
  /** Id of the command event (for causation). */
  eventId: string;
  deadlineMs: number;
}

/** The control side's answer to an awaited command. */
export type ReadbackVerdict =
  | { kind: "accepted"; command: AwaitedCommand }
  | { kind: "refused"; command: AwaitedCommand; code: string; reason: string };

/** Tracks sent commands until the control side answers or the timeout passes. */
export interface ReadbackWatch {
  expect(cmd: AwaitedCommand): void;
  /** Matches a readback to an awaited command (trigger "command", same seq). */
  onReadback(rb: Readback): ReadbackVerdict | undefined;
  /** Removes and returns the commands unanswered by `nowMs`. */
  due(nowMs: number): AwaitedCommand[];
  /** Forgets every awaited command (e.g. when dispatch is cancelled). */
  clear(): void;
  size(): number;
}

/** Creates a readback watch. */
export function createReadbackWatch(): ReadbackWatch {
  const awaited = new Map<number, AwaitedCommand>();
  return {
    expect(cmd) {
      awaited.set(cmd.seq, cmd);
    },
    onReadback(rb) {
      if (rb.trigger !== "command" || rb.commandSeq === undefined) return undefined;
      const cmd = awaited.get(rb.commandSeq);
      if (!cmd) return undefined;
      awaited.delete(rb.commandSeq);
      if (rb.accepted) return { kind: "accepted", command: cmd };
      return {
        kind: "refused",
        command: cmd,
        code: rb.code ?? "UNKNOWN",
        reason: rb.reason ?? "refused without a reason",
      };
    },
    due(nowMs) {
      const out: AwaitedCommand[] = [];
      for (const [seq, c] of awaited) {
        if (nowMs >= c.deadlineMs) {
          awaited.delete(seq);
          out.push(c);
        }
      }
      return out;
    },
    clear: () => awaited.clear(),
    size: () => awaited.size,
  };
}

/** Setpoints in force per tag from a readback (`current`: part way along a ramp). */
export function inForceFromReadback(rb: Readback): Map<string, number> {
  const out = new Map<string, number>();
  for (const s of rb.setpoints) {
    out.set(s.tag, s.current);
    out.set(s.tag.replace(/\.SP$/, ""), s.current);
  }
  return out;
}
