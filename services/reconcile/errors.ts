/**
 * Typed errors for data reconciliation. Callers branch on `code`, never on message text.
 * `RECONCILE_ERROR_CODES` is the registry; a retired code is never reused.
 */
import { SteadfastError } from "../kit/errors.js";

/** Registry of the reconciliation error codes, with the one-line meaning shown in the docs. */
export const RECONCILE_ERROR_CODES = {
  RECONCILE_INPUT_INVALID:
    "the problem is malformed: sizes disagree, a sigma is not positive, a value is not finite, a guess is missing",
  RECONCILE_RANK_DEFICIENT:
    "the balance set is rank deficient (some balances are combinations of others): remove the dependent ones",
  RECONCILE_NOT_CONVERGED: "successive linearization of bilinear balances did not converge",
} as const;

/** A stable code from {@link RECONCILE_ERROR_CODES}. */
export type ReconcileErrorCode = keyof typeof RECONCILE_ERROR_CODES;

/** What the error is about, for callers that show it beside the site model. */
export interface ReconcileErrorDetails {
  /** Balances involved (names, or "balance <i>" when unnamed). */
  readonly balances?: readonly string[];
  /** Variables involved (names, or "x<j>" when unnamed). */
  readonly variables?: readonly string[];
}

/** An error raised by the reconciliation numerics (services/reconcile). */
export class ReconcileError extends SteadfastError {
  override readonly name = "ReconcileError";
  constructor(
    readonly code: ReconcileErrorCode,
    message: string,
    readonly details: ReconcileErrorDetails = {},
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}
