/**
 * Plant–model mismatch correction: modifier adaptation and output bias update. Pure functions; the
 * state goes in and comes out.
 *
 * Modifier adaptation (Marchetti, A., Chachuat, B. & Bonvin, D. (2009), "Modifier-adaptation
 * methodology for real-time optimization", Ind. Eng. Chem. Res. 48(13):6022–6033): at the operating
 * point u_k the model is corrected so that its value and gradient match the plant's,
 *
 *   objective:   φ_m(u) + ε_φ + λ_φᵀ(u − u_k)
 *   constraint:  G_m(u) + ε_G + λ_Gᵀ(u − u_k)
 *
 * with first-order filters (gain K; K = 1 means no filtering):
 *
 *   ε_k = (1 − K)·ε_{k−1} + K·(value_plant(u_k) − value_model(u_k))
 *   λ_k = (1 − K)·λ_{k−1} + K·(∇value_plant(u_k) − ∇value_model(u_k)).
 *
 * Sign convention: λ is "plant minus model" in the problem's own sense and unit (for a profit being
 * maximized, λ_φ = ∇profit_plant − ∇profit_model); the same λ is added whether the problem minimizes
 * or maximizes. A paper stated for a cost J = −profit has λ_J = −λ_φ.
 * ε_φ does not move the optimum; it is kept so that the modified model predicts the plant's profit at
 * u_k (what an improvement threshold needs). Constraints are c(x) ≥ 0, as in ./sqp.ts.
 */
import { Matrix, SingularValueDecomposition, solve } from "ml-matrix";
import type { OptimizeErrorCode } from "./errors.js";
import type { ConstraintBlock, NlpProblem } from "./sqp.js";

/** Modifiers at one operating point. */
export interface ModifierState {
  /** The operating point u_k the modifiers refer to (empty before the first update). */
  inputs: Float64Array;
  /** Zeroth-order objective modifier ε_φ (objective units). */
  objectiveEpsilon: number;
  /** First-order objective modifier λ_φ (objective units per input unit). */
  objectiveLambda: Float64Array;
  /** Zeroth-order constraint modifiers ε_G, one per modified constraint (constraint units). */
  constraintEpsilon: Float64Array;
  /** First-order constraint modifiers λ_G, one row per modified constraint. */
  constraintLambda: Float64Array[];
  /** Number of updates applied. */
  iteration: number;
}

/** Modifiers all zero: the unmodified model. */
export function initialModifierState(nInputs: number, nConstraints = 0): ModifierState {
  return {
    inputs: new Float64Array(0),
    objectiveEpsilon: 0,
    objectiveLambda: new Float64Array(nInputs),
    constraintEpsilon: new Float64Array(nConstraints),
    constraintLambda: Array.from({ length: nConstraints }, () => new Float64Array(nInputs)),
    iteration: 0,
  };
}

/** Plant and model values and gradients at the current operating point u_k. */
export interface ModifierMeasurement {
  /** u_k. */
  inputs: ArrayLike<number>;
  plantObjective: number;
  modelObjective: number;
  /** ∇φ_plant(u_k): supplied exactly, or from {@link estimatePlantGradient}. */
  plantObjectiveGradient: ArrayLike<number>;
  /** ∇φ_model(u_k). */
  modelObjectiveGradient: ArrayLike<number>;
  /** Plant values of the modified constraints; default none. */
  plantConstraints?: ArrayLike<number>;
  modelConstraints?: ArrayLike<number>;
  /** Gradients of the modified constraints (one row per constraint); default zero (ε only). */
  plantConstraintGradients?: ReadonlyArray<ArrayLike<number>>;
  modelConstraintGradients?: ReadonlyArray<ArrayLike<number>>;
}

/** Filter gains of {@link updateModifiers}. */
export interface ModifierGains {
  /** Gain K for the objective's ε and λ, in (0, 1]. Default 0.5. */
  objective?: number;
  /** Gain for the constraints' ε and λ, in (0, 1]. Default: the objective gain. */
  constraints?: number;
}

/** One modifier-adaptation update (the filtered ε and λ at u_k). Pure. */
export function updateModifiers(
  state: ModifierState,
  m: ModifierMeasurement,
  gains: ModifierGains = {},
): ModifierState {
  const k = gains.objective ?? 0.5;
  const kc = gains.constraints ?? k;
  const nu = state.objectiveLambda.length;
  const objectiveLambda = new Float64Array(nu);
  for (let j = 0; j < nu; j++) {
    const diff = (m.plantObjectiveGradient[j] ?? 0) - (m.modelObjectiveGradient[j] ?? 0);
    objectiveLambda[j] = (1 - k) * state.objectiveLambda[j]! + k * diff;
  }
  const nc = state.constraintEpsilon.length;
  const constraintEpsilon = new Float64Array(nc);
  const constraintLambda: Float64Array[] = [];
  for (let i = 0; i < nc; i++) {
    const diff = (m.plantConstraints?.[i] ?? 0) - (m.modelConstraints?.[i] ?? 0);
    constraintEpsilon[i] = (1 - kc) * state.constraintEpsilon[i]! + kc * diff;
    const row = new Float64Array(nu);
    for (let j = 0; j < nu; j++) {
      const g = (m.plantConstraintGradients?.[i]?.[j] ?? 0) - (m.modelConstraintGradients?.[i]?.[j] ?? 0);
      row[j] = (1 - kc) * state.constraintLambda[i]![j]! + kc * g;
    }
    constraintLambda.push(row);
  }
  return {
    inputs: Float64Array.from(m.inputs),
    objectiveEpsilon: (1 - k) * state.objectiveEpsilon + k * (m.plantObjective - m.modelObjective),
    objectiveLambda,
    constraintEpsilon,
    constraintLambda,
    iteration: state.iteration + 1,
  };
}

/** Where the inputs u sit in the NLP's variables and which inequalities are modified. */
export interface ModifyOptions {
  /** Index in x of each input u_j; default 0 … n_u − 1. */
  inputIndices?: readonly number[];
  /** Names of the inequalities (c ≥ 0) that the constraint modifiers apply to, in modifier order; default none. */
  constraintNames?: readonly string[];
}

/**
 * The modified model problem: the objective plus ε_φ + λ_φᵀ(u − u_k), and each named inequality plus
 * ε_G + λ_Gᵀ(u − u_k). Returns a new problem; the original is not touched.
 */
export function modifyProblem(
  problem: NlpProblem,
  state: ModifierState,
  options: ModifyOptions = {},
): NlpProblem {
  const nu = state.objectiveLambda.length;
  const idx = options.inputIndices ?? Array.from({ length: nu }, (_, j) => j);
  const uk = state.inputs.length === nu ? state.inputs : new Float64Array(nu);
  const shift = (x: Float64Array, lam: Float64Array) => {
    let s = 0;
    for (let j = 0; j < nu; j++) s += lam[j]! * (x[idx[j]!]! - uk[j]!);
    return s;
  };
  const out: NlpProblem = {
    ...problem,
    objective: (x) => problem.objective(x) + state.objectiveEpsilon + shift(x, state.objectiveLambda),
    gradient: (x) => {
      const g = Array.from(problem.gradient(x));
      for (let j = 0; j < nu; j++) g[idx[j]!]! += state.objectiveLambda[j]!;
      return g;
    },
  };
  const names = options.constraintNames ?? [];
  if (names.length > 0 && problem.inequalities) {
    const block = problem.inequalities;
    const which = names.map((name) => block.names.indexOf(name));
    const modified: ConstraintBlock = {
      names: block.names,
      values: (x) => {
        const c = Array.from(block.values(x));
        which.forEach((i, k) => {
          if (i >= 0) c[i] = c[i]! + state.constraintEpsilon[k]! + shift(x, state.constraintLambda[k]!);
        });
        return c;
      },
      jacobian: (x) => {
        const jac = block.jacobian(x).map((row) => Array.from(row));
        which.forEach((i, k) => {
          if (i < 0) return;
          for (let j = 0; j < nu; j++) jac[i]![idx[j]!]! += state.constraintLambda[k]![j]!;
        });
        return jac;
      },
    };
    out.inequalities = modified;
  }
  return out;
}

/** A past steady-state operating point and the plant's measured value there. */
export interface OperatingPoint {
  inputs: ArrayLike<number>;
  value: number;
}

/** Options of {@link estimatePlantGradient}. */
export interface GradientEstimateOptions {
  /** Typical size of each input (its units), used to scale the point set; default 1 for each. */
  inputScale?: ArrayLike<number>;
  /**
   * Largest accepted condition number of the scaled direction matrix. A larger one means the points
   * lie nearly on a line (plane) and the estimate would amplify measurement noise. Default 100.
   */
  maxConditionNumber?: number;
}

/** Either a gradient or the reason why none could be estimated. */
export type GradientEstimate =
  | { ok: true; gradient: Float64Array; conditionNumber: number }
  | { ok: false; code: OptimizeErrorCode; reason: string; conditionNumber?: number };

/**
 * Estimates the plant gradient at points[0] (the current point) by finite differences with the next
 * n points (n = number of inputs): S·g = Δφ with the rows of S the scaled differences u_k − u_{k−i}.
 * The point set is refused, with the reason, when it is too small or too badly conditioned.
 */
export function estimatePlantGradient(
  points: readonly OperatingPoint[],
  options: GradientEstimateOptions = {},
): GradientEstimate {
  const current = points[0];
  if (!current)
    return { ok: false, code: "OPTIMIZE_GRADIENT_TOO_FEW_POINTS", reason: "no operating point given" };
  const n = current.inputs.length;
  if (points.length < n + 1) {
    return {
      ok: false,
      code: "OPTIMIZE_GRADIENT_TOO_FEW_POINTS",
      reason: `${points.length} operating points given; ${n + 1} are needed for ${n} inputs`,
    };
  }
  const scale = Array.from({ length: n }, (_, j) => options.inputScale?.[j] ?? 1);
  const maxCond = options.maxConditionNumber ?? 100;
  const s = new Matrix(n, n);
  const dphi = new Matrix(n, 1);
  for (let i = 1; i <= n; i++) {
    const p = points[i]!;
    for (let j = 0; j < n; j++) s.set(i - 1, j, (current.inputs[j]! - p.inputs[j]!) / scale[j]!);
    dphi.set(i - 1, 0, current.value - p.value);
  }
  const sv = new SingularValueDecomposition(s, {
    computeLeftSingularVectors: false,
    computeRightSingularVectors: false,
  }).diagonal;
  const smax = Math.max(...sv);
  const smin = Math.min(...sv);
  const cond = smin > 0 ? smax / smin : Number.POSITIVE_INFINITY;
  if (!(cond <= maxCond)) {
    return {
      ok: false,
      code: "OPTIMIZE_GRADIENT_ILL_CONDITIONED",
      reason:
        smax === 0
          ? "the operating points coincide: no direction to difference along"
          : `the last ${n + 1} operating points are nearly collinear (condition number ${cond.toPrecision(3)} > ${maxCond}); ` +
            "a gradient from them would amplify measurement noise — move along another direction first",
      conditionNumber: cond,
    };
  }
  const gScaled = solve(s, dphi);
  const gradient = new Float64Array(n);
  for (let j = 0; j < n; j++) gradient[j] = gScaled.get(j, 0) / scale[j]!;
  return { ok: true, gradient, conditionNumber: cond };
}

/**
 * Output bias update (the correction of the two-step approach): b_k = (1 − K)·b_{k−1} + K·(y_plant −
 * y_model), added to the model's outputs before re-optimizing. `previous` undefined means zero.
 * Gain K in (0, 1], default 1.
 */
export function updateBias(
  previous: ArrayLike<number> | undefined,
  plantOutputs: ArrayLike<number>,
  modelOutputs: ArrayLike<number>,
  gain = 1,
): Float64Array {
  const out = new Float64Array(plantOutputs.length);
  for (let i = 0; i < out.length; i++) {
    out[i] = (1 - gain) * (previous?.[i] ?? 0) + gain * (plantOutputs[i]! - modelOutputs[i]!);
  }
  return out;
}
