/**
 * Acceptance rules for a parameter estimate: pure checks that decide whether newly fitted parameters may
 * replace the ones the model uses. Every rule that fails adds a reason; the estimate is accepted only
 * with no reasons.
 */
import { chiSquareQuantile, type StatWarningCode } from "./stats.js";

/** Registry of rejection reasons, with the one-line meaning shown in the docs. */
export const ACCEPTANCE_CODES = {
  ACCEPT_NOT_CONVERGED: "the fit did not converge (the solver's reason is in the detail)",
  ACCEPT_NO_DOF: "no degrees of freedom: the fit-quality test cannot be made",
  ACCEPT_CHI_SQUARE:
    "Σ wᵢrᵢ² exceeds the chi-square quantile at fitConfidence: the model does not fit the data",
  ACCEPT_NOT_FINITE: "a parameter or its interval is not finite",
  ACCEPT_BELOW_LOWER: "a parameter is below its lower sanity limit",
  ACCEPT_ABOVE_UPPER: "a parameter is above its upper sanity limit",
  ACCEPT_MOVE_LIMIT: "a parameter moved more than its per-cycle move limit from the previous accepted value",
  ACCEPT_CI_TOO_WIDE: "a parameter's confidence half-width exceeds maxRelativeHalfWidth of its value",
  ACCEPT_IDENTIFIABILITY: "the statistics raised an identifiability warning listed in rejectOnWarnings",
} as const;

/** Code of an {@link AcceptanceReason}. */
export type AcceptanceCode = keyof typeof ACCEPTANCE_CODES;

/** Limits for one parameter, in the parameter's own unit. */
export interface ParameterRule {
  /** Name used in reasons. Default "p<index>". */
  name?: string;
  /** Lower sanity limit (inclusive). Default none. */
  lower?: number;
  /** Upper sanity limit (inclusive). Default none. */
  upper?: number;
  /** Largest allowed |p − previous| per cycle, in the parameter's unit. Default none. */
  maxMove?: number;
  /** Largest allowed |p − previous| / |previous| per cycle (0.2 = 20 %). Default none. */
  maxRelativeMove?: number;
  /** Overrides {@link AcceptanceRules.maxRelativeHalfWidth} for this parameter. */
  maxRelativeHalfWidth?: number;
}

/** Configuration of {@link checkAcceptance}. */
export interface AcceptanceRules {
  /**
   * Confidence of the chi-square fit-quality gate, in (0, 1): reject when Σ wᵢrᵢ² > χ²(fitConfidence, dof).
   * Meaningful only when the weights are true 1/σ² of the measurements (else set `checkFit: false`).
   * Default 0.99.
   */
  fitConfidence?: number;
  /** Make the chi-square gate (true) or skip it (false). Default true. */
  checkFit?: boolean;
  /** Largest allowed confidence half-width as a fraction of |value|. Default 0.5. */
  maxRelativeHalfWidth?: number;
  /** Per-parameter limits, by index. */
  parameters?: ReadonlyArray<ParameterRule | undefined>;
  /** Identifiability warnings that reject the estimate. Default ["STAT_RANK_DEFICIENT"]. */
  rejectOnWarnings?: readonly StatWarningCode[];
}

/** What {@link checkAcceptance} needs: the fit result and its statistics (FitStatistics fits structurally). */
export interface AcceptanceInput {
  /** The fitted parameters. */
  p: ArrayLike<number>;
  /** Σ wᵢ·rᵢ² at p. */
  weightedRss: number;
  /** Degrees of freedom m − n. */
  dof: number;
  /** Confidence half-widths, same units as p. */
  ciHalfWidth: ArrayLike<number>;
  /** Identifiability warnings from fitStatistics. */
  warnings?: ReadonlyArray<{ code: StatWarningCode; parameters: number[]; detail: string }>;
  /** The solver's verdict; false rejects. Default true. */
  converged?: boolean;
  /** The solver's stopping reason, quoted when not converged. */
  reason?: string;
  /** The previously accepted parameters, for the move limits. */
  previous?: ArrayLike<number>;
}

/** One failed rule. */
export interface AcceptanceReason {
  code: AcceptanceCode;
  /** Name of the parameter concerned, when the rule is per parameter. */
  parameter?: string;
  detail: string;
}

/** The verdict: accepted when no rule failed. */
export interface AcceptanceVerdict {
  accepted: boolean;
  reasons: AcceptanceReason[];
}

/** Checks an estimate against the acceptance rules; pure, total (never throws on bad numbers: it rejects). */
export function checkAcceptance(input: AcceptanceInput, rules: AcceptanceRules = {}): AcceptanceVerdict {
  const reasons: AcceptanceReason[] = [];
  const n = input.p.length;
  const maxHalf = rules.maxRelativeHalfWidth ?? 0.5;
  const rejectOn = new Set(rules.rejectOnWarnings ?? ["STAT_RANK_DEFICIENT"]);
  const name = (j: number) => rules.parameters?.[j]?.name ?? `p${j}`;

  if (input.converged === false) {
    reasons.push({
      code: "ACCEPT_NOT_CONVERGED",
      detail: `solver stopped: ${input.reason ?? "not converged"}`,
    });
  }
  if (rules.checkFit !== false) {
    const confidence = rules.fitConfidence ?? 0.99;
    if (!(input.dof > 0)) {
      reasons.push({ code: "ACCEPT_NO_DOF", detail: `dof = ${input.dof}` });
    } else {
      const limit = chiSquareQuantile(confidence, input.dof);
      if (!(input.weightedRss <= limit)) {
        reasons.push({
          code: "ACCEPT_CHI_SQUARE",
          detail: `Σwr² = ${input.weightedRss.toPrecision(6)} > χ²(${confidence}, ${input.dof}) = ${limit.toPrecision(6)}`,
        });
      }
    }
  }
  for (const w of input.warnings ?? []) {
    if (rejectOn.has(w.code))
      reasons.push({ code: "ACCEPT_IDENTIFIABILITY", detail: `${w.code}: ${w.detail}` });
  }
  for (let j = 0; j < n; j++) {
    const rule = rules.parameters?.[j];
    const value = Number(input.p[j]);
    const half = Number(input.ciHalfWidth[j]);
    const parameter = name(j);
    if (!Number.isFinite(value) || !Number.isFinite(half)) {
      reasons.push({ code: "ACCEPT_NOT_FINITE", parameter, detail: `${parameter} = ${value} ± ${half}` });
      continue;
    }
    if (rule?.lower !== undefined && value < rule.lower) {
      reasons.push({
        code: "ACCEPT_BELOW_LOWER",
        parameter,
        detail: `${parameter} = ${value} < lower limit ${rule.lower}`,
      });
    }
    if (rule?.upper !== undefined && value > rule.upper) {
      reasons.push({
        code: "ACCEPT_ABOVE_UPPER",
        parameter,
        detail: `${parameter} = ${value} > upper limit ${rule.upper}`,
      });
    }
    const previous = input.previous === undefined ? undefined : Number(input.previous[j]);
    if (previous !== undefined && Number.isFinite(previous)) {
      const move = Math.abs(value - previous);
      if (rule?.maxMove !== undefined && move > rule.maxMove) {
        reasons.push({
          code: "ACCEPT_MOVE_LIMIT",
          parameter,
          detail: `${parameter} moved ${move.toPrecision(4)} from ${previous} (limit ${rule.maxMove} per cycle)`,
        });
      } else if (rule?.maxRelativeMove !== undefined && move > rule.maxRelativeMove * Math.abs(previous)) {
        reasons.push({
          code: "ACCEPT_MOVE_LIMIT",
          parameter,
          detail: `${parameter} moved ${((100 * move) / Math.abs(previous)).toPrecision(3)} % from ${previous} (limit ${100 * rule.maxRelativeMove} % per cycle)`,
        });
      }
    }
    const limit = rule?.maxRelativeHalfWidth ?? maxHalf;
    if (half > limit * Math.abs(value)) {
      reasons.push({
        code: "ACCEPT_CI_TOO_WIDE",
        parameter,
        detail: `${parameter} = ${value.toPrecision(6)} ± ${half.toPrecision(3)}: half-width above ${100 * limit} % of the value`,
      });
    }
  }
  return { accepted: reasons.length === 0, reasons };
}
