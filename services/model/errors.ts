/**
 * Typed errors for the site-model library. Callers branch on `code`, never on message text.
 * `MODEL_ERROR_CODES` is the registry; services/model/README.md lists it (a test keeps both in step),
 * and a retired code is never reused.
 */
import { SteadfastError } from "../kit/errors.js";

/** Registry of the model library's error codes, with the one-line meaning shown in the docs. */
export const MODEL_ERROR_CODES = {
  MODEL_FILE_READ: "the site-model file could not be read, or is larger than the size limit",
  MODEL_YAML_SYNTAX: "the file is not well-formed YAML (or has a duplicate key)",
  MODEL_SCHEMA: "the document breaks schemas/site-model.schema.json (missing, unknown or ill-typed field)",
  MODEL_DUPLICATE_NAME: "a symbol, tag id, equation, balance or constraint name is declared twice",
  MODEL_SYMBOL_RESERVED: "a declared symbol collides with a built-in name (e, pi, i, Infinity...)",
  MODEL_SYMBOL_UNDECLARED: "an expression or tag uses a symbol that no section declares",
  MODEL_TAG_UNKNOWN: "a decision, disturbance or balance names a tag id that is not declared",
  MODEL_EXPRESSION_PARSE: "an expression does not parse",
  MODEL_EXPRESSION_UNSUPPORTED: "an expression uses an operator or function the compiler does not support",
  MODEL_UNITS_UNKNOWN: "a unit string cannot be understood",
  MODEL_UNITS_MISMATCH: "an expression adds, compares or equates quantities of different dimension or scale",
  MODEL_DECISION_UNBOUNDED: "a decision lacks a lower or an upper bound",
  MODEL_BOUNDS_INVALID: "a range has min >= max, or an initial value lies outside its bounds",
  MODEL_SQUARE: "the number of equations differs from the number of unknowns",
  MODEL_STRUCTURALLY_SINGULAR: "no equation can be paired with some unknown (structurally singular system)",
  MODEL_OUTPUT_CYCLE: "outputs refer to each other in a cycle",
  MODEL_INPUT_INVALID: "a value passed to the model is missing, not finite, or names an undeclared symbol",
} as const;

/** One of the model library's stable error codes. */
export type SiteModelCode = keyof typeof MODEL_ERROR_CODES;

/** Where in a site-model file a problem sits. `line` is 1-based; 0 when unknown. */
export interface SourceSpot {
  readonly file: string;
  readonly line: number;
  /** JSON path into the document, e.g. "/model/equations/2/expression". */
  readonly path: string;
}

/** A site model was refused at load, or a model function was called with bad input. */
export class SiteModelError extends SteadfastError {
  override readonly name = "SiteModelError";
  constructor(
    readonly code: SiteModelCode,
    readonly at: SourceSpot,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}
