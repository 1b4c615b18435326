/**
 * Codes of the console service. CONSOLE_ERROR_CODES names what it throws (bad config, a bad users
 * file); CONSOLE_HTTP_CODES names the refusals its HTTP API answers with (in the JSON body's `code`).
 * A retired code is never reused.
 */
import { SteadfastError } from "../kit/errors.js";

/** Registry of the console's error codes. */
export const CONSOLE_ERROR_CODES = {
  CONSOLE_USERS_INVALID:
    "the users file is unreadable or a user entry breaks its rules (the message names it)",
  CONSOLE_HASH_INVALID:
    "a stored password hash is not in the scrypt$N$r$p$salt$hash form or has unsafe parameters",
  CONSOLE_ASSET_MISSING: "a file the page needs (public/ or uPlot's dist) could not be read at start-up",
} as const;

/** A code of CONSOLE_ERROR_CODES. */
export type ConsoleErrorCode = keyof typeof CONSOLE_ERROR_CODES;

/** An error thrown by the console service. */
export class ConsoleError extends SteadfastError {
  override readonly name = "ConsoleError";
  constructor(
    readonly code: ConsoleErrorCode,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}

/** Registry of the refusals the HTTP API answers with, each with its status. */
export const CONSOLE_HTTP_CODES = {
  CONSOLE_BAD_REQUEST: "400: the body is not JSON of the expected shape; the message names the field",
  CONSOLE_UNSUPPORTED_MEDIA: "415: a POST body must be application/json",
  CONSOLE_TOO_LARGE: "413: the body exceeds the console's limit",
  CONSOLE_LOGIN_FAILED: "401: unknown user or wrong password (deliberately not told apart)",
  CONSOLE_LOGIN_REQUIRED: "401: the action needs a logged-in session",
  CONSOLE_LOGIN_THROTTLED: "429: too many failed logins for this user; wait and try again",
  CONSOLE_CSRF: "403: the x-csrf-token header is missing or does not match the session",
  CONSOLE_ORIGIN: "403: the request came from another origin",
  CONSOLE_FORBIDDEN: "403: the user's role may not do this (operator approves, engineer changes mode)",
  CONSOLE_NOT_PENDING:
    "409: the proposal is not waiting for approval (unknown, answered, superseded or expired)",
  CONSOLE_NOT_FOUND: "404: no such route",
  CONSOLE_METHOD: "405: the route does not take this method",
  CONSOLE_BUSY: "503: too many live-update clients",
  CONSOLE_PUBLISH_FAILED: "502: the broker did not take the event",
} as const;

/** A code of CONSOLE_HTTP_CODES. */
export type ConsoleHttpCode = keyof typeof CONSOLE_HTTP_CODES;
