/**
 * Gross-error detection on a reconciliation: the global χ² test, the maximum-power measurement test,
 * the nodal test, the Šidák correction for many simultaneous tests, and serial elimination.
 *
 * Sources: Narasimhan, S. & Jordache, C. (2000), "Data Reconciliation and Gross Error Detection", ch. 7
 * (global, nodal and measurement tests, serial elimination); Mah, R.S.H. & Tamhane, A.C. (1982),
 * "Detection of gross errors in process data", AIChE J. 28(5) (maximum-power measurement test);
 * Šidák, Z. (1967), JASA 62(318) (the correction α' = 1 − (1 − α)^(1/n)).
 */

import { chiSquareCritical, chiSquareSurvival, sidakNormalCritical } from "../model/distributions.js";
import type { CoreSolution } from "./reconcile.js";

/** Global test: γ = rᵀ(A·V·Aᵀ)⁻¹r against χ²(dof). */
export interface GlobalTest {
  /** γ, dimensionless. */
  readonly statistic: number;
  /** Degrees of freedom: the number of independent (reduced) balances. */
  readonly dof: number;
  /** χ² upper critical value at alpha (0 when dof is 0). */
  readonly critical: number;
  /** P(χ²(dof) > γ); 1 when dof is 0. */
  readonly pValue: number;
  /** Significance level used. */
  readonly alpha: number;
  /** γ ≤ critical: no evidence of a gross error. */
  readonly passed: boolean;
}

/** Maximum-power measurement test of one redundant measurement. */
export interface MeasurementTest {
  readonly name: string;
  readonly index: number;
  /** |z|, standard normal under no gross error. */
  readonly statistic: number;
  /** Šidák-corrected two-sided normal critical value for all redundant measurements tested. */
  readonly critical: number;
  readonly passed: boolean;
}

/** Nodal test of one (reduced) balance residual. */
export interface NodalTest {
  /** Name of the original balance, or a description of the combination when unmeasured variables were projected out. */
  readonly name: string;
  /** Index of the original balance, or null for a combination of balances. */
  readonly balance: number | null;
  /** Weights of the original balances in this residual (a unit vector for an original balance). */
  readonly weights: readonly number[];
  /** |r_i|/sqrt(H_ii), standard normal under no gross error. */
  readonly statistic: number;
  /** Šidák-corrected two-sided normal critical value for all balances tested. */
  readonly critical: number;
  readonly passed: boolean;
}

/** The global test of γ on dof degrees of freedom at level alpha. */
export function globalTest(statistic: number, dof: number, alpha: number): GlobalTest {
  if (dof === 0) return { statistic: 0, dof: 0, critical: 0, pValue: 1, alpha, passed: true };
  const critical = chiSquareCritical(alpha, dof);
  return {
    statistic,
    dof,
    critical,
    pValue: chiSquareSurvival(statistic, dof),
    alpha,
    passed: statistic <= critical,
  };
}

/** Measurement tests of every redundant measurement, Šidák-corrected over their number. */
export function measurementTests(
  core: CoreSolution,
  names: readonly string[],
  alpha: number,
): MeasurementTest[] {
  const idx: number[] = [];
  core.redundant.forEach((r, j) => {
    if (r) idx.push(j);
  });
  if (idx.length === 0) return [];
  const critical = sidakNormalCritical(alpha, idx.length);
  return idx.map((j) => {
    const statistic = core.measurementStatistic[j]!;
    return { name: names[j]!, index: j, statistic, critical, passed: statistic <= critical };
  });
}

/** Nodal tests of every (reduced) balance, Šidák-corrected over their number. */
export function nodalTests(core: CoreSolution, balanceNames: readonly string[], alpha: number): NodalTest[] {
  if (core.nodal.length === 0) return [];
  const critical = sidakNormalCritical(alpha, core.nodal.length);
  return core.nodal.map((row) => {
    const weights = Array.from(row.weights);
    const name =
      row.balance !== null
        ? balanceNames[row.balance]!
        : `combination of ${weights
            .map((w, i) => (Math.abs(w) > 1e-12 ? balanceNames[i] : null))
            .filter((s) => s !== null)
            .join(", ")}`;
    return {
      name,
      balance: row.balance,
      weights,
      statistic: row.statistic,
      critical,
      passed: row.statistic <= critical,
    };
  });
}

/** Options of {@link serialElimination}. */
export interface SerialEliminationOptions {
  /** Significance level of the global test. */
  readonly alpha: number;
  /** Most measurements to remove. */
  readonly maxEliminations: number;
}

/** What serial elimination did. */
export interface SerialEliminationRun {
  /** The last solve (with every removed measurement treated as unmeasured). */
  readonly final: CoreSolution;
  readonly initialGamma: number;
  readonly initialDof: number;
  /** Removed measurements in order, with their statistic and the measurements tied with them. */
  readonly removed: readonly { index: number; statistic: number; tiedWith: readonly number[] }[];
}

// Two statistics this close are the same number up to rounding: the measurements are indistinguishable.
const TIE_TOLERANCE = 1e-9;

/**
 * Serial elimination (Narasimhan & Jordache 2000, §8.2): while the global test fails, treat the
 * measurement with the largest measurement statistic as unmeasured and reconcile again; stop when the
 * test passes, no redundancy remains or maxEliminations is reached. `solve` maps a measured set to a
 * solution. Ties (equivalent gross-error candidates on this network) go to the lowest index and are
 * reported.
 */
export function serialElimination(
  solve: (measured: readonly boolean[]) => CoreSolution,
  initialMeasured: readonly boolean[],
  options: SerialEliminationOptions,
): SerialEliminationRun {
  const measured = [...initialMeasured];
  let core = solve(measured);
  const initialGamma = core.gamma;
  const initialDof = core.dof;
  const removed: { index: number; statistic: number; tiedWith: number[] }[] = [];
  while (removed.length < options.maxEliminations && core.dof > 0) {
    if (globalTest(core.gamma, core.dof, options.alpha).passed) break;
    let best = -1;
    let bestZ = -1;
    core.measurementStatistic.forEach((z, j) => {
      if (core.redundant[j] && z > bestZ * (1 + TIE_TOLERANCE)) {
        best = j;
        bestZ = z;
      }
    });
    if (best < 0) break;
    const tiedWith: number[] = [];
    core.measurementStatistic.forEach((z, j) => {
      if (j !== best && core.redundant[j] && Math.abs(z - bestZ) <= TIE_TOLERANCE * bestZ) tiedWith.push(j);
    });
    measured[best] = false;
    removed.push({ index: best, statistic: bestZ, tiedWith });
    core = solve(measured);
  }
  return { final: core, initialGamma, initialDof, removed };
}
