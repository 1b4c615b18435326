/**
 * Operator modes and approvals. Pure: requests and time in, decisions out.
 *
 * off: proposals are validated and recorded, nothing is sent. advisory (the default): a validated
 * proposal waits for an operator's approval until it expires; only the latest proposal can be
 * approved (an older one is superseded: its setpoints rest on older data). closed-loop: a validated
 * proposal is dispatched at once. Any mode change drops the proposals waiting for approval, so an
 * approval given under one mode is never carried out under another.
 */
import type { OperatorApproval, OperatorMode } from "../kit/generated/messages.js";
import type { ValidateReasonCode } from "./errors.js";

/** The loop's operating mode. */
export type Mode = OperatorMode["mode"];

/** The mode in force and who set it. */
export interface ModeState {
  mode: Mode;
  user: string;
  reason: string;
  /** When it took effect, epoch ms. */
  sinceMs: number;
}

/** A validated proposal waiting for approval. */
export interface Pending<T> {
  proposalId: string;
  cycleId: string;
  /** The approval must arrive before this instant, epoch ms. */
  expiresAtMs: number;
  item: T;
}

/** Options of the mode keeper. */
export interface ModeOptions {
  /** Mode at start when no retained state says otherwise. Default advisory. */
  initial?: ModeState;
  /** How long a proposal waits for approval, s. */
  approvalTimeoutS: number;
  /** Closed loop allowed (false when the site policy requires approval). */
  allowClosedLoop: boolean;
}

/** What to do with a validated proposal. */
export type AfterValidation<T> =
  | { next: "dispatch" }
  | { next: "observe" }
  | { next: "await-approval"; expiresAtMs: number; superseded: Pending<T>[] };

/** What an approval leads to. */
export type ApprovalOutcome<T> =
  | { kind: "dispatch"; pending: Pending<T>; approval: OperatorApproval }
  | { kind: "rejected"; pending: Pending<T>; approval: OperatorApproval }
  | { kind: "ignored"; code: ValidateReasonCode; reason: string };

/** The answer to a mode request. */
export interface ModeChange<T> {
  accepted: boolean;
  state: ModeState;
  reason: string;
  /** Proposals that were waiting and are dropped by the change. */
  dropped: Pending<T>[];
}

/** A mode keeper created by createModeKeeper. */
export interface ModeKeeper<T> {
  state(): ModeState;
  /** Handles a mode request (from rto.<site>.operator.mode, or the retained state at start). */
  request(req: OperatorMode, nowMs: number): ModeChange<T>;
  /** Decides what happens to a proposal that passed validation. */
  afterValidation(proposalId: string, cycleId: string, item: T, nowMs: number): AfterValidation<T>;
  /** Handles an operator's answer. */
  answer(approval: OperatorApproval, nowMs: number): ApprovalOutcome<T>;
  /** Removes and returns the proposals whose approval time ran out by `nowMs`. */
  expire(nowMs: number): Pending<T>[];
  /** Proposals waiting for approval. */
  pending(): Pending<T>[];
}

/** Creates a mode keeper. */
export function createModeKeeper<T>(options: ModeOptions): ModeKeeper<T> {
  let state: ModeState = options.initial ?? {
    mode: "advisory",
    user: "validate",
    reason: "default mode at start",
    sinceMs: 0,
  };
  if (state.mode === "closed-loop" && !options.allowClosedLoop) {
    state = {
      ...state,
      mode: "advisory",
      reason: "closed loop not allowed: the site policy requires approval",
    };
  }
  const waiting = new Map<string, Pending<T>>();
  const timeoutMs = options.approvalTimeoutS * 1000;

  const dropAll = (): Pending<T>[] => {
    const out = [...waiting.values()];
    waiting.clear();
    return out;
  };

  return {
    state: () => ({ ...state }),
    request(req, nowMs) {
      if (req.mode === "closed-loop" && !options.allowClosedLoop) {
        return {
          accepted: false,
          state: { ...state },
          reason: `closed loop asked by ${req.user} refused: the site's validation policy requires approval`,
          dropped: [],
        };
      }
      const dropped = req.mode === state.mode ? [] : dropAll();
      state = { mode: req.mode, user: req.user, reason: req.reason, sinceMs: nowMs };
      return { accepted: true, state: { ...state }, reason: req.reason, dropped };
    },
    afterValidation(proposalId, cycleId, item, nowMs) {
      if (state.mode === "off") return { next: "observe" };
      if (state.mode === "closed-loop") return { next: "dispatch" };
      const superseded = dropAll();
      const expiresAtMs = nowMs + timeoutMs;
      waiting.set(proposalId, { proposalId, cycleId, expiresAtMs, item });
      return { next: "await-approval", expiresAtMs, superseded };
    },
    answer(approval, nowMs) {
      const p = waiting.get(approval.proposalId);
      if (!p) {
        return {
          kind: "ignored",
          code: "VALIDATE_APPROVAL_IGNORED",
          reason: `proposal ${approval.proposalId} is not waiting for approval (unknown, superseded, expired or already answered)`,
        };
      }
      waiting.delete(approval.proposalId);
      // Checked against validate's clock, not the approval's `at`: a late message must not slip through.
      if (nowMs >= p.expiresAtMs) {
        return {
          kind: "ignored",
          code: "VALIDATE_APPROVAL_EXPIRED",
          reason: `approval by ${approval.user} came ${nowMs - p.expiresAtMs} ms after proposal ${p.proposalId} expired`,
        };
      }
      if (state.mode !== "advisory") {
        return {
          kind: "ignored",
          code: "VALIDATE_APPROVAL_IGNORED",
          reason: `mode is ${state.mode}, approvals are not taken`,
        };
      }
      return approval.decision === "approve"
        ? { kind: "dispatch", pending: p, approval }
        : { kind: "rejected", pending: p, approval };
    },
    expire(nowMs) {
      const out: Pending<T>[] = [];
      for (const [id, p] of waiting) {
        if (nowMs >= p.expiresAtMs) {
          waiting.delete(id);
          out.push(p);
        }
      }
      return out;
    },
    pending: () => [...waiting.values()],
  };
}
