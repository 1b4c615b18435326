/**
 * Typed errors for steady-state detection. Callers branch on `code`, never on message text.
 * A retired code is never reused; `STEADY_ERROR_CODES` is the registry, and DEVELOPERS.md lists it.
 */
import { SteadfastError } from "../kit/errors.js";

/** Registry of the steady-state detector's error codes, with the one-line meaning shown in the docs. */
export const STEADY_ERROR_CODES = {
  STEADY_OPTIONS_INVALID: "a detector option is out of its range; the message names the option and the range",
  STEADY_TAGS_INVALID: "the tag list is empty, has no key tag, or repeats a tag id",
} as const;

export type SteadyErrorCode = keyof typeof STEADY_ERROR_CODES;

/** An error raised by the steady-state detector (services/steady). */
export class SteadyError extends SteadfastError {
  override readonly name = "SteadyError";
  constructor(
    readonly code: SteadyErrorCode,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}
