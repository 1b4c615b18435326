/**
 * Typed errors and outcome codes of the optimizer. The numerical solvers never throw on a bad problem:
 * they return a status with one of these codes and a message; `OptimizeError` is for callers that
 * prefer an exception (see `assertSolved`) and for misuse that no status can describe.
 * A retired code is never reused.
 */
import { SteadfastError } from "../kit/errors.js";

/** Registry of the optimizer's codes, with the one-line meaning shown in the docs. */
export const OPTIMIZE_ERROR_CODES = {
  OPTIMIZE_INVALID_PROBLEM:
    "the problem is malformed (dimension mismatch, lb > ub, duplicate names); the message says where",
  OPTIMIZE_INFEASIBLE:
    "no point satisfies the constraints; the result names the conflicting constraints and bounds",
  OPTIMIZE_UNBOUNDED: "the objective improves without limit on the feasible set",
  OPTIMIZE_ITERATION_LIMIT: "the solver stopped at its iteration limit before the optimality test passed",
  OPTIMIZE_LINE_SEARCH_FAILED: "the merit function could not be decreased along the search direction",
  OPTIMIZE_NAN: "the objective, a constraint or a derivative returned NaN or ±Infinity",
  OPTIMIZE_EVALUATION_FAILED: "a function supplied by the caller threw; the cause is attached",
  OPTIMIZE_QP_FAILED: "the quadratic sub-problem solver failed (not convex, or a numerical breakdown)",
  OPTIMIZE_SOLVER_FAILED: "the LP/MILP solver reported an error or an unclassified status",
  OPTIMIZE_GRADIENT_ILL_CONDITIONED:
    "past operating points are too close to collinear to estimate a plant gradient",
  OPTIMIZE_GRADIENT_TOO_FEW_POINTS: "fewer than n+1 distinct steady-state operating points are available",
  OPTIMIZE_INPUT_MISSING:
    "an input the cycle needs is missing: a decision's setpoint tag or a disturbance without default is not in the snapshot",
} as const;

/** A code from {@link OPTIMIZE_ERROR_CODES}. */
export type OptimizeErrorCode = keyof typeof OPTIMIZE_ERROR_CODES;

/** An error raised by the optimizer (services/optimize). */
export class OptimizeError extends SteadfastError {
  override readonly name = "OptimizeError";
  constructor(
    readonly code: OptimizeErrorCode,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}

/**
 * Throws an {@link OptimizeError} carrying the result's code unless the result is a success.
 * For callers that want an exception rather than a status.
 */
export function assertSolved<R extends { status: string; code?: OptimizeErrorCode; message: string }>(
  result: R,
): R {
  if (result.status !== "optimal") {
    throw new OptimizeError(result.code ?? "OPTIMIZE_SOLVER_FAILED", result.message);
  }
  return result;
}
