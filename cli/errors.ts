/**
 * Typed errors of the command-line tool. Callers branch on `code`, never on message text.
 * A retired code is never reused; `CLI_ERROR_CODES` is the registry.
 */
import { SteadfastError } from "../services/kit/errors.js";

/** Registry of the CLI's error codes, with the one-line meaning shown in the docs. */
export const CLI_ERROR_CODES = {
  CLI_USAGE: "a subcommand was given an unknown flag, a missing argument or a malformed value",
  CLI_SERVICE_UNKNOWN: "`start` was asked for a service the suite does not have",
  CLI_SERVICE_UNAVAILABLE: "a service's code is not installed in this tree (e.g. the console)",
  CLI_CONFIG_INVALID: "the demo or suite configuration file is missing or malformed",
  CLI_KEY_MISSING: "validate was started without a command-signing key",
  CLI_DB_MISSING: "the audit database file given to `explain` does not exist",
} as const;

/** One of the CLI's stable error codes. */
export type CliErrorCode = keyof typeof CLI_ERROR_CODES;

/** An error raised by the CLI itself (not by a service it runs). */
export class CliError extends SteadfastError {
  override readonly name = "CliError";
  constructor(
    readonly code: CliErrorCode,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}
