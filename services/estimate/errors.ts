/**
 * Typed errors of the estimation numerics. Callers branch on `code`, never on message text.
 * `ESTIMATE_ERROR_CODES` is the registry; a retired code is never reused.
 */
import { SteadfastError } from "../kit/errors.js";

/** Registry of the estimation package's error codes, with the one-line meaning shown in the docs. */
export const ESTIMATE_ERROR_CODES = {
  ESTIMATE_DIMENSION_MISMATCH:
    "an array's length does not match the problem's n (parameters) or m (residuals)",
  ESTIMATE_INVALID_OPTION: "an option is out of its documented range (the message names the option)",
  ESTIMATE_INVALID_WEIGHT:
    "a weight is negative or not finite (weights are 1/sigma², sigma in the residual's unit)",
  ESTIMATE_NO_DEGREES_OF_FREEDOM: "m ≤ n: the residual variance, and so the covariance, is undefined",
  ESTIMATE_NON_FINITE:
    "the residuals or the Jacobian are not finite at the point where statistics were asked",
  ESTIMATE_PROBABILITY_RANGE: "a quantile was asked for a probability outside (0, 1) or a non-positive dof",
} as const;

export type EstimateErrorCode = keyof typeof ESTIMATE_ERROR_CODES;

/** An error raised by the estimation numerics (services/estimate). */
export class EstimateError extends SteadfastError {
  override readonly name = "EstimateError";
  constructor(
    readonly code: EstimateErrorCode,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}
