/**
 * Plant–model mismatch correction for the optimize stage, on top of ./modifier.ts: the state kept
 * between cycles, the plant's values measured in a snapshot, and one update per cycle. Pure: the
 * state goes in and comes out; no bus, no clock.
 *
 * Methods (per site, `mismatch` in the service config):
 * - "none": optimize the model as estimated;
 * - "bias": output bias update. For every unknown measured by a tag, b ← (1 − K)·b + K·(y_meas − y_model)
 *   at the current operating point; the objective and constraints are then evaluated at x(u) + b;
 * - "modifier": modifier adaptation (Marchetti, Chachuat & Bonvin 2009). Recent distinct steady-state
 *   operating points (u and the snapshot's values; repeated steady states at one point averaged) are
 *   kept, up to `maxPoints`. Each cycle the mismatch φ_plant − φ_model is evaluated at those within
 *   `maxDistance` of the current point — plant values recomputed from the kept snapshots, model
 *   values at this cycle's parameters and prices — and λ is the slope of a weighted least-squares
 *   plane through them. Differencing the mismatch rather than the plant: the model carries most of
 *   the plant's curvature, so a secant over a move-sized step is far closer to the gradient (on the
 *   demo site the plant's curvature in the feed rate biased a plant-only secant over 0.2 kg/s by
 *   several times the true λ). A plane through more than n+1 points averages the measurement noise
 *   that a finite difference through exactly n+1 passes on whole. ε and λ are filtered with gain K
 *   and applied by modifyProblem. When the points are too few, too close together (spread below
 *   `minSpread`) or too close to collinear, the previous modifiers are kept and the report says why.
 *
 * Excitation (planExcitation). A plant gradient needs operating points that span the inputs, far
 * enough apart that the measured objective's noise does not swamp the differences. Once the model
 * optimum is reached the points coincide and modifier adaptation stalls as plain two-step (and
 * validate's minimum improvement refuses the small moves that are left). So when the modifiers do
 * not rest on the full point set around where the corrected model wants to go, the move is made for
 * the gradient it will give: as it stands when it adds a well-placed point (a probe), else replaced
 * by a step of fixed length (a fraction `excitation` of the move limits) along the direction the
 * kept points cover least, with the rest optimized; the way back from such a step belongs to it.
 * This is the idea of dual modifier adaptation (Marchetti, Chachuat & Bonvin (2010), "A dual
 * modifier-adaptation approach for real-time optimization", J. Process Control 20(9):1027–1037,
 * from memory: keep the next point set well conditioned while optimizing), in a simpler form — a
 * fixed step in the least-covered direction instead of their conditioning constraint, and only
 * while the modifiers are not yet backed where the loop goes, so that a converged loop rests.
 *
 * The measured plant objective (definition): the site model's objective expression evaluated at the
 * snapshot, i.e. with the decisions, disturbances and every unknown measured by a tag set to their
 * snapshot means (model units), prices and parameters as in force this cycle, and the unknowns no tag
 * measures taken from the model's steady state at those inputs. Outputs are recomputed from these
 * values (a measured output's own tag is not substituted: outputs are expressions of the unknowns and
 * inputs). The constraints' plant values are defined the same way. The report lists the unknowns the
 * objective depends on but no tag measures, since for those the "plant" value is the model's.
 */
import { EigenvalueDecomposition, Matrix, solve } from "ml-matrix";
import type { SiteModel } from "../model/index.js";
import { initialModifierState, type ModifierState, updateBias, updateModifiers } from "./modifier.js";
import type { Evaluation, TotalGradients } from "./problem.js";

/** Which correction a site uses. */
export type MismatchMethod = "none" | "bias" | "modifier";

/** A past steady-state operating point with the plant's measured values there. */
export interface PlantPoint {
  /** The newest cycle it was measured in (a re-delivered cycle replaces the point). */
  cycleid: string | undefined;
  /** Steady states averaged into this point (repeated cycles at the same decisions). Default 1. */
  samples?: number;
  /** Decisions u, in model order and units. */
  inputs: number[];
  /** Measured plant objective (see the module comment), objective unit. */
  objective: number;
  /** Measured plant constraint values g, one per modified constraint. */
  constraints: number[];
  /**
   * The snapshot's values by model symbol (the mean over `samples`). When present, the plant values
   * are recomputed from it every cycle at that cycle's prices and parameters, so that a price change
   * between two points is not read as a plant gradient; when absent, `objective` and `constraints`
   * are used as they were measured.
   */
  measured?: Record<string, number>;
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
  /** Distinct operating points, newest first, at most n+1. */
  points: PlantPoint[];
  /** Decisions of the points the last successful plant-gradient estimate rests on (model order). */
  estimatedFrom?: number[][];
  /** Where the last cycle's proposal was an excitation step to, if it was one (model order). */
  excitedTo?: number[];
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
  /**
   * Smallest accepted spread of the point set (see pointSpread: each decision divided by its move
   * limit, or its range when it has none). Closer points make the gradient mostly measurement
   * noise. Default 0.2.
   */
  minSpread?: number;
  /**
   * Length of an excitation step, as a fraction of the move limits (same scaling as minSpread); 0
   * turns excitation off. It is also the radius, around the point of the last modifier update, in
   * which a proposal counts as backed by a plant gradient and needs no excitation. Default 0.5.
   */
  excitation?: number;
  /** Most repeated steady states averaged into one operating point. Default 5. */
  maxSamplesPerPoint?: number;
  /** Distinct operating points the plane through the mismatch is fitted to (at least n+1). Default 2(n+1). */
  maxPoints?: number;
  /**
   * Largest distance from the current point, in move limits (largest decision), of a point that
   * enters the plane; farther ones are kept but not used. Default 2.
   */
  maxDistance?: number;
}

/** Per-decision scale of the spread and excitation: the move limit, else the range. */
export function spreadScale(model: SiteModel): number[] {
  return model.decisions.map((d) =>
    d.maxMovePerCycle !== undefined && d.maxMovePerCycle > 0 ? d.maxMovePerCycle : d.max - d.min,
  );
}

/** Two decision vectors are one operating point when every decision differs by at most half its deadband. */
function samePoint(model: SiteModel, a: ArrayLike<number>, b: ArrayLike<number>): boolean {
  return model.decisions.every((d, j) => {
    const tol = Math.max(d.deadband / 2, 1e-9 * (1 + Math.abs(a[j]!)));
    return Math.abs(a[j]! - b[j]!) <= tol;
  });
}

/**
 * Spread of a weighted point set in scaled decisions: the square roots of the eigenvalues of
 * Σ w_i (x_i − x̄)(x_i − x̄)ᵀ (x̄ the weighted mean), largest first, with their unit eigenvectors. The
 * smallest value bounds the noise a least-squares slope through the points passes on (its variance
 * is the measurement variance over that value squared).
 */
export function pointSpread(
  points: ReadonlyArray<ArrayLike<number>>,
  weights: ArrayLike<number>,
  scale: ArrayLike<number>,
): { values: number[]; vectors: number[][] } {
  const n = scale.length;
  const total = points.reduce((s, _, i) => s + weights[i]!, 0);
  const mean = new Float64Array(n);
  points.forEach((x, i) => {
    for (let j = 0; j < n; j++) mean[j] = mean[j]! + (weights[i]! * x[j]!) / scale[j]! / total;
  });
  const m = Matrix.zeros(n, n);
  points.forEach((x, i) => {
    for (let a = 0; a < n; a++)
      for (let b = 0; b < n; b++)
        m.set(
          a,
          b,
          m.get(a, b) + weights[i]! * (x[a]! / scale[a]! - mean[a]!) * (x[b]! / scale[b]! - mean[b]!),
        );
  });
  const e = new EigenvalueDecomposition(m, { assumeSymmetric: true });
  const order = e.realEigenvalues.map((v, k) => ({ v, k })).sort((p, q) => q.v - p.v);
  return {
    values: order.map(({ v }) => Math.sqrt(Math.max(0, v))),
    vectors: order.map(({ k }) => Array.from({ length: n }, (_, j) => e.eigenvectorMatrix.get(j, k))),
  };
}

/** Slope (per decision unit) of the weighted least-squares plane value ≈ c + gᵀ(u − u_0) through the points. */
function fitPlane(
  points: ReadonlyArray<ArrayLike<number>>,
  values: readonly number[],
  weights: readonly number[],
  scale: ArrayLike<number>,
): Float64Array {
  const n = scale.length;
  const anchor = points[0]!;
  const a = Matrix.zeros(n + 1, n + 1);
  const b = Matrix.zeros(n + 1, 1);
  points.forEach((x, i) => {
    const row = [1, ...Array.from({ length: n }, (_, j) => (x[j]! - anchor[j]!) / scale[j]!)];
    for (let p = 0; p <= n; p++) {
      b.set(p, 0, b.get(p, 0) + weights[i]! * row[p]! * values[i]!);
      for (let q = 0; q <= n; q++) a.set(p, q, a.get(p, q) + weights[i]! * row[p]! * row[q]!);
    }
  });
  const c = solve(a, b);
  return Float64Array.from({ length: n }, (_, j) => c.get(j + 1, 0) / scale[j]!);
}

/** Largest scaled distance (move limits, largest decision) of a point that enters the plane. */
function maxDistanceOf(options: MismatchOptions): number {
  return options.maxDistance ?? 2;
}

/** Distance of two decision vectors in move limits (largest decision). */
function scaledDistance(model: SiteModel, a: ArrayLike<number>, b: ArrayLike<number>): number {
  const scale = spreadScale(model);
  let d = 0;
  for (let j = 0; j < scale.length; j++) d = Math.max(d, Math.abs(a[j]! - b[j]!) / scale[j]!);
  return d;
}

/** Distinct points kept for the plane: the option, at least n+1. */
function maxPointsOf(model: SiteModel, options: MismatchOptions): number {
  const n = model.decisions.length;
  return Math.max(n + 1, options.maxPoints ?? 2 * (n + 1));
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
  /** Set by the stage when the proposal is an excitation move rather than the corrected model's optimum. */
  excitation?: Excitation;
}

/** An excitation move, as the proposal reports it. */
export interface Excitation {
  /** Why the move was needed and what it is. */
  reason: string;
  /** Step length, as a fraction of the move limits; absent for a probe (the model's optimum itself). */
  step?: number;
  /** Unit direction of the step in decisions divided by their move limits, model order; absent for a probe. */
  direction?: number[];
  /** The corrected model's optimum the excitation replaces, model order and units. */
  modelOptimal: number[];
}

const fmtVec = (v: ArrayLike<number>) => `[${Array.from(v, (x) => Number(x.toPrecision(4))).join(", ")}]`;

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
  const measuredPoint: PlantPoint = {
    cycleid,
    samples: 1,
    inputs: Array.from({ length: nd }, (_, j) => u[j]!),
    measured: { ...measured },
    ...plantAt(model, state, atU, measured),
  };
  const kept = state.points.filter((p) => cycleid === undefined || p.cycleid !== cycleid);
  // A steady state at the decisions of a kept point is another sample of that point: the running
  // mean (capped, so that a slow drift is followed) rather than a second point in the same place,
  // which would add no direction to difference along.
  const same = kept.find((p) => samePoint(model, p.inputs, measuredPoint.inputs));
  let point = measuredPoint;
  if (same?.measured) {
    const n = Math.min(same.samples ?? 1, Math.max(0, (options.maxSamplesPerPoint ?? 5) - 1));
    const mean: Record<string, number> = {};
    for (const [symbol, now] of Object.entries(measured)) {
      const old = same.measured[symbol];
      mean[symbol] = old !== undefined && Number.isFinite(old) ? (n * old + now) / (n + 1) : now;
    }
    point = { ...measuredPoint, samples: n + 1, measured: mean, ...plantAt(model, state, atU, mean) };
  }
  const earlier = kept.filter((p) => !samePoint(model, p.inputs, measuredPoint.inputs));
  const points = [point, ...earlier].slice(0, maxPointsOf(model, options));
  const plant = plantValues(model, atU, point.measured ?? measured);
  const samples = (point.samples ?? 1) > 1 ? ` (mean of ${point.samples} steady states here)` : "";
  const report: MismatchReport = {
    ...base,
    plantObjective: point.objective,
    modelObjective: atU.objective,
    unmeasured: plant.unmeasured,
  };
  const next = { ...state, points };
  // Only points near the current one enter the plane: the mismatch is close to linear over a few
  // moves, not over the whole path the loop came along.
  const local = points.filter((p) => scaledDistance(model, p.inputs, point.inputs) <= maxDistanceOf(options));
  if (local.length < nd + 1) {
    const coincide = kept.length > earlier.length ? "the operating points coincide: " : "";
    const near = local.length < points.length ? ` within ${maxDistanceOf(options)} move limits` : " so far";
    return {
      state: next,
      report: {
        ...report,
        note: `previous modifiers kept: ${coincide}${local.length} distinct operating points${near}; ${nd + 1} are needed for ${nd} inputs`,
      },
    };
  }
  const weights = local.map((p) => p.samples ?? 1);
  // The geometry is judged with one weight per point: repeated steady states average the noise at a
  // point, not the errors that do not average (curvature, parameters that moved, slow drifts).
  const geometry = local.map(() => 1);
  const minSpread = options.minSpread ?? 0.2;
  const spread = pointSpread(
    local.map((p) => p.inputs),
    geometry,
    spreadScale(model),
  ).values;
  const smallest = spread.at(-1) ?? 0;
  if (!(smallest >= minSpread)) {
    return {
      state: next,
      report: {
        ...report,
        note:
          smallest <= 1e-12
            ? "previous modifiers kept: the operating points coincide or lie on a line: no direction to difference along"
            : `previous modifiers kept: the operating points lie too close together (spread ${smallest.toPrecision(3)} of a move limit < ${minSpread}); a gradient from them would be mostly measurement noise`,
      },
    };
  }
  const byRange = pointSpread(
    local.map((p) => p.inputs),
    geometry,
    model.decisions.map((d) => d.max - d.min),
  ).values;
  const conditionNumber = byRange[0]! / byRange.at(-1)!;
  report.conditionNumber = conditionNumber;
  const maxCond = options.maxConditionNumber ?? 100;
  if (!(conditionNumber <= maxCond)) {
    return {
      state: next,
      report: {
        ...report,
        note: `previous modifiers kept: the operating points are nearly collinear (condition number ${conditionNumber.toPrecision(3)} > ${maxCond}); move along another direction first`,
      },
    };
  }
  // The plane is fitted to the mismatch (plant − model, both at this cycle's parameters and prices)
  // rather than to the plant alone: a secant over a move-sized step is off by half the step times
  // the curvature, and the model carries most of the plant's curvature, so the mismatch is close to
  // linear over a few moves — and its slope is λ itself. A least-squares plane through more than
  // n+1 points (weighted by the steady states averaged into each) averages the measurement noise
  // that a finite difference through exactly n+1 would pass on whole.
  const mismatchAt: Array<{ objective: number; constraints: number[] }> = [];
  for (const p of local) {
    const at = p === point ? atU : modelAt.evaluate(p.inputs);
    if (!at.ok) {
      return {
        state: next,
        report: {
          ...report,
          note: `previous modifiers kept: the model has no steady state at the kept operating point ${fmtVec(p.inputs)} (${at.reason})`,
        },
      };
    }
    const pv = p.measured ? plantAt(model, state, at, p.measured) : p;
    mismatchAt.push({
      objective: pv.objective - at.objective,
      constraints: state.constraintIndices.map((k, i) => pv.constraints[i]! - at.constraints[k]!),
    });
  }
  const inputs = local.map((p) => p.inputs);
  const slope = fitPlane(
    inputs,
    mismatchAt.map((v) => v.objective),
    weights,
    spreadScale(model),
  );
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
  const plus = (a: ArrayLike<number>, b: ArrayLike<number>) => Float64Array.from(a, (v, j) => v + b[j]!);
  const plantConstraintGradients = state.constraintIndices.map((k, i) =>
    plus(
      model0.constraints[k]!,
      fitPlane(
        inputs,
        mismatchAt.map((v) => v.constraints[i]!),
        weights,
        spreadScale(model),
      ),
    ),
  );
  const modifiers = updateModifiers(
    state.modifiers,
    {
      inputs: u,
      plantObjective: point.objective,
      modelObjective: atU.objective,
      plantObjectiveGradient: plus(model0.objective, slope),
      modelObjectiveGradient: model0.objective,
      plantConstraints: point.constraints,
      modelConstraints: state.constraintIndices.map((k) => atU.constraints[k]!),
      plantConstraintGradients,
      modelConstraintGradients: state.constraintIndices.map((k) => model0.constraints[k]!),
    },
    { objective: gain },
  );
  return {
    state: { ...next, modifiers, estimatedFrom: local.map((p) => [...p.inputs]) },
    report: {
      ...report,
      updated: true,
      note: `modifiers updated from ${local.length} operating points${samples} (condition number ${conditionNumber.toPrecision(3)}, spread ${smallest.toPrecision(3)} of a move limit)`,
    },
  };
}

/** The plant's objective and modified-constraint values at a point, from its measured values. */
function plantAt(
  model: SiteModel,
  state: MismatchState,
  modelThere: Evaluation & { ok: true },
  measured: Measured,
): { objective: number; constraints: number[] } {
  const v = plantValues(model, modelThere, measured);
  return { objective: v.objective, constraints: state.constraintIndices.map((k) => v.constraints[k]!) };
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

/** Why no excitation, or the step to take: vᵀ·((u − anchor) / scale) = ±step. */
export type ExcitationPlan =
  | {
      excite: false;
      reason: string;
      /**
       * True when the proposal stands but is a probe: the modifiers were not estimated near it, and
       * the move is made (also) for the plant gradient it will give, not for its predicted gain alone.
       */
      probe?: boolean;
    }
  | {
      excite: true;
      reason: string;
      /** Unit direction in scaled decisions (each divided by `scale`). */
      direction: Float64Array;
      /** The current operating point (newest kept point), model units. */
      anchor: Float64Array;
      /** Per-decision scale (move limit, else range). */
      scale: Float64Array;
      /** Step along `direction`, scaled units (the option `excitation`). */
      step: number;
    };

/**
 * Decides whether the proposal `proposed` (the corrected model's optimum, model order and units) must
 * be replaced by an excitation move, and along which direction (see the module comment). An
 * excitation is planned only when both hold: the modifiers were not estimated within one excitation
 * step of the proposal, and the next point set (the proposal and the newest n kept points) would not
 * support a gradient estimate (spread or conditioning). When only the first holds, the proposal
 * stands as a probe: it is made for the gradient it will give as much as for its predicted gain.
 * Pure.
 */
export function planExcitation(
  model: SiteModel,
  state: MismatchState,
  proposed: ArrayLike<number>,
  options: MismatchOptions = {},
): ExcitationPlan {
  const plan = planAt(model, state, proposed, options);
  // An excitation step is a temporary probe: the way back to the corrected model's optimum belongs
  // to it, or the improvement threshold would lock in the step's cost.
  const at = state.points[0]?.inputs;
  if (!plan.excite && !plan.probe && at && state.excitedTo && samePoint(model, at, state.excitedTo))
    return {
      excite: false,
      probe: true,
      reason: `the plant sits at the excitation step of the previous cycle ${fmtVec(at)}: the return to the corrected model's optimum completes it (${plan.reason})`,
    };
  return plan;
}

function planAt(
  model: SiteModel,
  state: MismatchState,
  proposed: ArrayLike<number>,
  options: MismatchOptions,
): ExcitationPlan {
  if (state.method !== "modifier") return { excite: false, reason: "no modifier adaptation" };
  const step = options.excitation ?? 0.5;
  if (!(step > 0)) return { excite: false, reason: "excitation off by configuration" };
  const newest = state.points[0];
  if (!newest) return { excite: false, reason: "no measured operating point yet" };
  const nd = model.decisions.length;
  const scale = spreadScale(model);
  const minSpread = options.minSpread ?? 0.2;
  const maxCond = options.maxConditionNumber ?? 100;

  const m = state.modifiers;
  let last = "the modifiers have not been estimated yet";
  if (m.iteration > 0 && m.inputs.length === nd) {
    // How far the proposal lies outside the box of the points the last estimate rests on (scaled,
    // largest decision; those points lie within maxDistance of where it was made): inside, the
    // plane behind λ already covers where the proposal goes.
    const from = state.estimatedFrom?.length ? state.estimatedFrom : [Array.from(m.inputs)];
    let dist = 0;
    for (let j = 0; j < nd; j++) {
      const lo = Math.min(...from.map((x) => x[j]!));
      const hi = Math.max(...from.map((x) => x[j]!));
      const out = Math.max(0, lo - proposed[j]!, proposed[j]! - hi);
      dist = Math.max(dist, out / scale[j]!);
    }
    // Trusted only once the estimate rests on the full point set: with n+1 points a single noisy
    // steady state passes into λ whole, and a proposal that then falls short of validate's minimum
    // improvement would stall the loop on that λ for good.
    const full = from.length >= maxPointsOf(model, options);
    if (dist <= step && full)
      return {
        excite: false,
        reason: `the proposal lies within ${step} of a move limit of the ${from.length} points the modifiers were last estimated from`,
      };
    last = full
      ? `the model's optimum ${fmtVec(proposed)} lies ${dist.toPrecision(3)} of a move limit outside the points the modifiers were last estimated from (update ${m.iteration})`
      : `the modifiers rest on ${from.length} operating points, fewer than the ${maxPointsOf(model, options)} they are trusted on (update ${m.iteration})`;
  }
  const limit = maxPointsOf(model, options);
  const stay = state.points
    .filter((p) => !samePoint(model, p.inputs, proposed))
    .slice(0, limit - 1)
    .filter((p) => scaledDistance(model, p.inputs, proposed) <= maxDistanceOf(options));
  const next = [Array.from(proposed), ...stay.map((p) => p.inputs)];
  const nextWeights = next.map(() => 1);
  // A new point closer than a step to a kept one adds little but its noise.
  let nearest = Number.POSITIVE_INFINITY;
  for (const x of stay) {
    let d = 0;
    for (let j = 0; j < nd; j++) d = Math.max(d, Math.abs(proposed[j]! - x.inputs[j]!) / scale[j]!);
    nearest = Math.min(nearest, d);
  }
  let why =
    nearest < step
      ? `the model's optimum lies ${nearest.toPrecision(3)} of a move limit from a kept operating point, less than a step`
      : `${next.length} distinct operating points after this move, ${nd + 1} are needed`;
  // With fewer than n+1 points after the move, the first steps are shaped as excitation too: a
  // step of fixed length along the model's direction, then across it, gives a well-spread simplex
  // early (in 100 simulated noisy runs on the demo site: median final gap 0.04 % against 0.25 %
  // when following the model's own first moves, which tend to line up).
  let spreadOk = next.length >= nd + 1;
  let spreadNote = "";
  if (next.length >= nd + 1) {
    const smallest = pointSpread(next, nextWeights, scale).values.at(-1) ?? 0;
    const byRange = pointSpread(
      next,
      nextWeights,
      model.decisions.map((d) => d.max - d.min),
    ).values;
    const cond = byRange[0]! / byRange.at(-1)!;
    spreadNote = ` and keeps them spread (${smallest.toPrecision(3)})`;
    if (smallest < minSpread) {
      spreadOk = false;
      why = `the next operating points would lie too close together (spread ${smallest.toPrecision(3)} < ${minSpread} of a move limit)`;
    } else if (!(cond <= maxCond)) {
      spreadOk = false;
      why = `the next operating points would be nearly collinear (condition number ${cond.toPrecision(3)} > ${maxCond})`;
    }
  }
  if (spreadOk && nearest >= step)
    return {
      excite: false,
      probe: true,
      reason: `${last}; the move to the model's optimum adds an operating point ${nearest.toPrecision(3)} of a move limit from the others${spreadNote}`,
    };

  // The direction the points that stay cover least; with a single one, the model's own move (or
  // the first decision when there is none).
  const anchor = Float64Array.from(newest.inputs);
  const direction = new Float64Array(nd);
  if (stay.length >= 2) {
    const least = pointSpread(
      stay.map((p) => p.inputs),
      stay.map((p) => p.samples ?? 1),
      scale,
    ).vectors.at(-1)!;
    for (let j = 0; j < nd; j++) direction[j] = least[j]!;
  } else {
    let norm = 0;
    for (let j = 0; j < nd; j++) {
      direction[j] = (proposed[j]! - anchor[j]!) / scale[j]!;
      norm += direction[j]! ** 2;
    }
    norm = Math.sqrt(norm);
    // A model move much shorter than a step has no direction worth following (round-off decides it).
    if (norm > 0.1 * step) for (let j = 0; j < nd; j++) direction[j] = direction[j]! / norm;
    else {
      direction.fill(0);
      direction[0] = 1;
    }
  }
  return {
    excite: true,
    reason: `${last}; ${why}: step ${step} of a move limit along ${fmtVec(direction)} (decisions divided by their move limits)`,
    direction,
    anchor,
    scale: Float64Array.from(scale),
    step,
  };
}
