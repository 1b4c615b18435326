/** Error codes of the recorder service. A retired code is never reused. */
import { SteadfastError } from "../kit/errors.js";

/** Registry of the recorder's error codes. */
export const RECORDER_ERROR_CODES = {
  RECORDER_CYCLE_UNKNOWN: "the store holds no event of the cycle",
  RECORDER_NO_PROPOSAL: "the cycle has no recorded proposal to recompute",
  RECORDER_RECOMPUTE_FAILED: "the injected optimizer gave no proposal for the recorded inputs",
  RECORDER_CONFIG_INVALID: "the recorder's options are inconsistent",
} as const;

/** A code of RECORDER_ERROR_CODES. */
export type RecorderErrorCode = keyof typeof RECORDER_ERROR_CODES;

/** An error raised by the recorder. */
export class RecorderError extends SteadfastError {
  override readonly name = "RecorderError";
  constructor(
    readonly code: RecorderErrorCode,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}
