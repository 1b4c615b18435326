/**
 * Codes of the validate service. Two registries: VALIDATE_ERROR_CODES for errors it throws (bad
 * configuration, a missing key), and VALIDATE_REASON_CODES for the reasons it publishes on the
 * validation and cycle streams (a failed check, an expired approval, a refused readback).
 * A retired code is never reused.
 */
import { SteadfastError } from "../kit/errors.js";

/** Registry of validate's error codes. */
export const VALIDATE_ERROR_CODES = {
  VALIDATE_CONFIG_INVALID:
    "validate's options disagree with the site model (e.g. an override names an unknown tag)",
  VALIDATE_KEY_MISSING: "no command-signing key was given (STEADFAST_COMMAND_KEY or a key file)",
  VALIDATE_COMMAND_EMPTY: "a command was built with no setpoint (a bug in the caller)",
  VALIDATE_STATE_FILE: "the sequence state file could not be read or written",
} as const;

/** A code of VALIDATE_ERROR_CODES. */
export type ValidateErrorCode = keyof typeof VALIDATE_ERROR_CODES;

/** An error thrown by the validate service. */
export class ValidateError extends SteadfastError {
  override readonly name = "ValidateError";
  constructor(
    readonly code: ValidateErrorCode,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}

/** Registry of the reasons validate publishes (check failures, skips, approvals, readbacks). */
export const VALIDATE_REASON_CODES = {
  VALIDATE_SOLVER_STATUS: "the solver did not report an accepted status",
  VALIDATE_SOFT_VIOLATED: "the proposal violates a soft constraint and soft violations are not allowed",
  VALIDATE_KKT_RESIDUAL: "a KKT residual (stationarity, complementarity, feasibility) exceeds its limit",
  VALIDATE_DECISION_UNKNOWN: "the proposal names a decision or tag the site model does not have",
  VALIDATE_BOUNDS: "a proposed setpoint lies outside the decision's absolute bounds",
  VALIDATE_MOVE_LIMIT: "a move exceeds the decision's maximum move per cycle",
  VALIDATE_RAMP_TOO_SLOW: "at the decision's ramp rate the move would not finish within the cycle period",
  VALIDATE_DEADBAND: "the move is within the deadband and is skipped (not a failure)",
  VALIDATE_IMPROVEMENT_SMALL: "the predicted improvement is below the site's minimum",
  VALIDATE_DATA_UNKNOWN: "the snapshot behind the proposal was not seen, so its age is unknown",
  VALIDATE_DATA_STALE: "the snapshot behind the proposal is older than the site's maximum data age",
  VALIDATE_MODEL_UNKNOWN: "no model update of this cycle was seen",
  VALIDATE_MODEL_REJECTED: "the cycle's model update was not accepted",
  VALIDATE_MODEL_FIT_POOR: "the fit's weighted residual per degree of freedom exceeds the site's limit",
  VALIDATE_FLIP_FLOP: "the move reverses a recent move of the same decision beyond the threshold",
  VALIDATE_OVERRIDE_HOLD: "an engineer holds this setpoint and the proposal moves it",
  VALIDATE_OVERRIDE_BOUNDS: "the proposal lies outside the engineer's tighter bounds",
  VALIDATE_DISPATCH_HOLD: "dispatch is held after a readback alarm until an operator re-arms it",
  VALIDATE_READBACK_UNKNOWN:
    "no read-back of the setpoints in force was seen; the proposal's current value was used",
  VALIDATE_APPROVAL_EXPIRED: "no operator answered before the approval expiry",
  VALIDATE_APPROVAL_REJECTED: "an operator rejected the proposal",
  VALIDATE_APPROVAL_IGNORED: "an approval named a proposal that is unknown, superseded or expired",
  VALIDATE_SUPERSEDED: "a newer proposal replaced one still waiting for approval",
  VALIDATE_MODE_OFF: "the loop is off: the proposal was validated but nothing is sent",
  VALIDATE_MODE_REFUSED: "a mode change was refused (closed loop while the site policy requires approval)",
  VALIDATE_READBACK_REFUSED: "the control side refused the command",
  VALIDATE_READBACK_TIMEOUT: "the control side did not answer the command in time",
  VALIDATE_SIGNING_FAILED: "the command could not be signed",
} as const;

/** A code of VALIDATE_REASON_CODES. */
export type ValidateReasonCode = keyof typeof VALIDATE_REASON_CODES;
