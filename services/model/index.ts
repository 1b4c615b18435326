/**
 * Shared site-model library: load and check a site model, evaluate and differentiate its
 * expressions, and solve its steady-state equations. Pure: no bus, no clock, no environment.
 */
export type {
  ConstraintDocument,
  DecisionDocument,
  SiteModelDocument,
  SteadyStatePolicy,
  TagDocument,
  ValidationPolicy,
} from "./document.js";
export { STEADY_STATE_DEFAULTS, VALIDATION_DEFAULTS } from "./document.js";
export { MODEL_ERROR_CODES, type SiteModelCode, SiteModelError, type SourceSpot } from "./errors.js";
export { loadSiteModel, loadSiteModelFile, MAX_SITE_MODEL_BYTES, siteModelValidator } from "./load.js";
export { luFactor, luSolve } from "./lu.js";
export { type MathNode, parse as parseExpression } from "./mathjs.js";
export {
  type Affine,
  BLOCKS,
  type Block,
  type BlockLayout,
  type CompileOptions,
  compileSiteModel,
  type Layout,
  type ModelLogEntry,
  type ModelLogger,
  type SiteBalance,
  type SiteConstraint,
  type SiteDecision,
  type SiteModel,
  type SiteParameter,
  type SiteTag,
  type SiteUnknown,
  WRT_BLOCKS,
  type WrtBlock,
} from "./site-model.js";
export {
  pointFromInputs,
  SOLVE_REASONS,
  type SolveInputs,
  type SolveOptions,
  type SolveReason,
  type SolveResult,
  solveAtPoint,
  solveSteadyState,
  steadyStateSensitivity,
} from "./solve.js";
