/**
 * Plant–model mismatch correction for the optimize stage, on top of ./modifier.ts: the state kept
 * between cycles, the plant's values measured in a snapshot, and one update per cycle. Pure: the
 * state goes in and comes out; no bus, no clock.
 *
 * Methods (per site, `mismatch` in the service config):
 * - "none": optimize the model as estimated;
 * - "bias": output bias update. For every unknown measured by a tag, b ← (1 − K)·b + K·(y_meas − y_model)
 *   at the current operating point; the objective and constraints are then evaluated at x(u) + b;
 * - "modifier": modifier adaptation (Marchetti, Chachuat & Bonvin 2009). The last n+1 steady-state
 *   operating points (u, measured plant objective, measured constraint values) are kept; the plant
 *   gradient at the newest is estimated from them by finite differences (estimatePlantGradient, with
 *   its conditioning check); the modifiers ε, λ are filtered with gain K and applied by modifyProblem.
 *   When the points are too few or too close to collinear, the previous modifiers are kept and the
 *   report says why.
 *
 * The measured plant objective (definition): the site model's objective expression evaluated at the
 * snapshot, i.e. with the decisions, disturbances and every unknown measured by a tag set to their
 * snapshot means (model units), prices and parameters as in force this cycle, and the unknowns no tag
 * measures taken from the model's steady state at those inputs. Outputs are recomputed from these
 * values (a measured output's own tag is not substituted: outputs are expressions of the unknowns and
 * inputs). The constraints' plant values are defined the same way. The report lists the unknowns the
 * objective depends on but no tag measures, since for those the "plant" value is the model's.
 */
import type { SiteModel } from "../model/index.js";
import {
  estimatePlantGradient,
  initialModifierState,
  type ModifierState,
  updateBias,
  updateModifiers,
} from "./modifier.js";
import type { Evaluation, TotalGradients } from "./problem.js";

/** Which correction a site uses. */
export type MismatchMethod = "none" | "bias" | "modifier";

/** A past steady-state operating point with the plant's measured values there. */
export interface PlantPoint {
  /** The cycle it was measured in (replaces an earlier point of the same cycle). */
  cycleid: string | undefined;
  /** Decisions u, in model order and units. */
  inputs: number[];
  /** Measured plant objective (see the module comment), objective unit. */
  objective: number;
  /** Measured plant constraint values g, one per modified constraint. */
  constraints: number[];
}

/** Mismatch state kept between cycles. */
export interface MismatchState {
  method: MismatchMethod;
  /** Bias per measured unknown (bias update), model units. */
  bias: Record<string, number>;
  /** Modifiers; constraint modifiers are in the model's g form (added to g) for `constraintIndices`. */
  modifiers: ModifierState;
  /** Model constraints (indices) that get constraint modifiers: the inequalities. */
  constraintIndices: number[];
  /** Newest first, at most n+1. */
  points: PlantPoint[];
}

/** A fresh state for a site: no bias, zero modifiers, no points. */
export function initialMismatchState(model: SiteModel, method: MismatchMethod): MismatchState {
  const constraintIndices = model.constraints.flatMap((c, k) => (c.sense === "le" ? [k] : []));
  return {
    method,
    bias: {},
    modifiers: initialModifierState(model.decisions.length, constraintIndices.length),
    constraintIndices,
    points: [],
  };
}

/** What the mismatch update needs from the model at a decision vector (a SiteProblem built without bias). */
export interface ModelAt {
  evaluate(u: ArrayLike<number>): Evaluation;
  totalGradients(u: ArrayLike<number>): TotalGradients | undefined;
}

/** Options of {@link updateMismatch}. */
export interface MismatchOptions {
  /** Filter gain K in (0, 1] for the bias and the modifiers. Default 0.5. */
  gain?: number;
  /** Largest accepted condition number of the point set (scaled by the decisions' ranges). Default 100. */
  maxConditionNumber?: number;
}

/** What one update did, for the proposal and the log. */
export interface MismatchReport {
  method: MismatchMethod;
  gain: number;
  /** True when new values were computed this cycle; false when the previous ones were kept. */
  updated: boolean;
  /** Why it was kept, or what it rests on. */
  note: string;
  /** Measured plant objective at the current point (modifier only), objective unit. */
  plantObjective?: number;
  /** Model objective at the current point (no correction), objective unit. */
  modelObjective?: number;
  /** Unknowns the objective depends on that no tag measures (their "plant" value is the model's). */
  unmeasured?: string[];
  /** Condition number of the point set used for the plant gradient. */
  conditionNumber?: number;
}

/** Measured values by model symbol, model units (from a snapshot's modelMean). */
export type Measured = Readonly<Record<string, number>>;

/** The plant's objective and constraint values at the snapshot (see the module comment for the definition). */
export function plantValues(
  model: SiteModel,
  modelAtCurrent: Evaluation & { ok: true },
  measured: Measured,
): { objective: number; constraints: Float64Array; unmeasured: string[] } {
  const p = modelAtCurrent.point.slice();
  const blocks = model.layout.blocks;
  for (const block of ["decisions", "disturbances", "unknowns"] as const) {
    const b = blocks[block];
    b.symbols.forEach((s, i) => {
      const v = measured[s];
      if (v !== undefined && Number.isFinite(v)) p[b.offset + i] = v;
    });
  }
  const dfdx = model.objectiveGradient(p, "unknowns");
  const unmeasured = blocks.unknowns.symbols.filter(
    (s, i) => dfdx[i] !== 0 && !(measured[s] !== undefined && Number.isFinite(measured[s])),
  );
  return { objective: model.evalObjective(p), constraints: model.evalConstraints(p), unmeasured };
}

/**
 * One cycle's mismatch update at the current operating point. `modelAt` evaluates the model without
 * bias or modifiers; `ctx.current` is u_k. Returns the new state and a report; never throws for a
 * numerical reason (a failed steady state keeps the previous state and says so).
 */
export function updateMismatch(
  state: MismatchState,
  model: SiteModel,
  modelAt: ModelAt,
  u: ArrayLike<number>,
  measured: Measured,
  cycleid: string | undefined,
  options: MismatchOptions = {},
): { state: MismatchState; report: MismatchReport } {
  const gain = options.gain ?? 0.5;
  const base: MismatchReport = { method: state.method, gain, updated: false, note: "" };
  if (state.method === "none") return { state, report: { ...base, note: "no mismatch correction" } };
  const atU = modelAt.evaluate(u);
  if (!atU.ok) {
    return {
      state,
      report: {
        ...base,
        note: `previous correction kept: the model has no steady state at the current point (${atU.reason})`,
      },
    };
  }
  if (state.method === "bias") {
    const symbols = model.unknowns
      .map((x) => x.symbol)
      .filter((s) => measured[s] !== undefined && Number.isFinite(measured[s]));
    if (symbols.length === 0) {
      return { state, report: { ...base, note: "no unknown is measured by a tag: no bias to update" } };
    }
    const b = updateBias(
      symbols.map((s) => state.bias[s] ?? 0),
      symbols.map((s) => measured[s]!),
      symbols.map((s) => atU.unknowns[s]!),
      gain,
    );
    const bias: Record<string, number> = { ...state.bias };
    symbols.forEach((s, i) => {
      bias[s] = b[i]!;
    });
    return {
      state: { ...state, bias },
      report: {
        ...base,
        updated: true,
        note: `bias updated on ${symbols.length} measured unknowns`,
        modelObjective: atU.objective,
      },
    };
  }

  // Modifier adaptation.
  const nd = model.decisions.length;
  const plant = plantValues(model, atU, measured);
  const point: PlantPoint = {
    cycleid,
    inputs: Array.from({ length: nd }, (_, j) => u[j]!),
    objective: plant.objective,
    constraints: state.constraintIndices.map((k) => plant.constraints[k]!),
  };
  const points = [point, ...state.points.filter((p) => cycleid === undefined || p.cycleid !== cycleid)].slice(
    0,
    nd + 1,
  );
  const report: MismatchReport = {
    ...base,
    plantObjective: plant.objective,
    modelObjective: atU.objective,
    unmeasured: plant.unmeasured,
  };
  const next = { ...state, points };
  const scale = model.decisions.map((d) => d.max - d.min);
  const gradOptions = { inputScale: scale, maxConditionNumber: options.maxConditionNumber ?? 100 };
  const est = estimatePlantGradient(
    points.map((p) => ({ inputs: p.inputs, value: p.objective })),
    gradOptions,
  );
  if (!est.ok) {
    if (est.conditionNumber !== undefined) report.conditionNumber = est.conditionNumber;
    return { state: next, report: { ...report, note: `previous modifiers kept: ${est.reason}` } };
  }
  report.conditionNumber = est.conditionNumber;
  const model0 = modelAt.totalGradients(u);
  if (!model0) {
    return {
      state: next,
      report: {
        ...report,
        note: "previous modifiers kept: the model's sensitivity is singular at the current point",
      },
    };
  }
  const plantConstraintGradients: Float64Array[] = [];
  for (let i = 0; i < state.constraintIndices.length; i++) {
    const e = estimatePlantGradient(
      points.map((p) => ({ inputs: p.inputs, value: p.constraints[i]! })),
      gradOptions,
    );
    // Same point set, same conditioning as the objective's, so this cannot fail where that one passed.
    plantConstraintGradients.push(e.ok ? e.gradient : model0.constraints[state.constraintIndices[i]!]!);
  }
  const modifiers = updateModifiers(
    state.modifiers,
    {
      inputs: u,
      plantObjective: plant.objective,
      modelObjective: atU.objective,
      plantObjectiveGradient: est.gradient,
      modelObjectiveGradient: model0.objective,
      plantConstraints: point.constraints,
      modelConstraints: state.constraintIndices.map((k) => atU.constraints[k]!),
      plantConstraintGradients,
      modelConstraintGradients: state.constraintIndices.map((k) => model0.constraints[k]!),
    },
    { objective: gain },
  );
  return {
    state: { ...next, modifiers },
    report: {
      ...report,
      updated: true,
      note: `modifiers updated from ${points.length} operating points (condition number ${est.conditionNumber.toPrecision(3)})`,
    },
  };
}

/**
 * The modifiers in the NLP's c = −g ≥ 0 form that modifyProblem expects (constraint ε and λ negated),
 * with the NLP names of the modified constraints.
 */
export function modifiersForNlp(
  model: SiteModel,
  state: MismatchState,
): { state: ModifierState; constraintNames: string[] } {
  const m = state.modifiers;
  return {
    state: {
      ...m,
      constraintEpsilon: m.constraintEpsilon.map((v) => -v),
      constraintLambda: m.constraintLambda.map((row) => row.map((v) => -v)),
    },
    constraintNames: state.constraintIndices.map((k) => model.constraints[k]!.name),
  };
}

/** The modified model's value at u: value + ε + λᵀ(u − u_k) (u_k = the modifiers' point; zero before the first update). */
export function modifiedValue(
  value: number,
  epsilon: number,
  lambda: ArrayLike<number>,
  inputs: ArrayLike<number>,
  u: ArrayLike<number>,
): number {
  let s = value + epsilon;
  for (let j = 0; j < lambda.length; j++) s += lambda[j]! * (u[j]! - (inputs.length > 0 ? inputs[j]! : 0));
  return s;
}
