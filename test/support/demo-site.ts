/**
 * The demo site, Kestrel Bay Chemicals reactor R-1 (infra/sites/kestrel-r1), for tests: load the
 * optimizer's model and the simulated plant, optimize either, take a plant "measurement", fit the
 * model's parameters to it, and run the two RTO schemes the scenario is built to tell apart (the
 * two-step approach and modifier adaptation).
 *
 * `sequentialNlp` is general over any SiteModel: the decisions are the NLP variables, the model's
 * equations are solved by Newton inside every evaluation (warm-started from the last solution), and
 * gradients are total derivatives through the steady state, ∂f/∂u + ∂f/∂x · dx/du with
 * dx/du = −J_x⁻¹ J_u (`steadyStateSensitivity`). It is meant to move into services/optimize.
 */
import { fileURLToPath } from "node:url";
import { levenbergMarquardt } from "../../services/estimate/lm.js";
import { SteadfastError } from "../../services/kit/errors.js";
import {
  loadSiteModelFile,
  type SiteModel,
  type SolveOptions,
  type SolveResult,
  solveAtPoint,
  steadyStateSensitivity,
} from "../../services/model/index.js";
import { initialModifierState, modifyProblem, updateModifiers } from "../../services/optimize/modifier.js";
import { type NlpProblem, type SqpOptions, type SqpResult, solveNlp } from "../../services/optimize/sqp.js";

/** Codes of the demo-site helpers' errors (test support; a retired code is never reused). */
export const DEMO_SITE_ERROR_CODES = {
  DEMO_STEADY_STATE_FAILED: "the steady-state equations did not converge at the given inputs",
  DEMO_OPTIMIZE_FAILED: "the NLP solver did not report an optimum",
  DEMO_FIT_FAILED: "the parameter fit did not converge or left the model unsolvable",
} as const;

/** A code from {@link DEMO_SITE_ERROR_CODES}. */
export type DemoSiteErrorCode = keyof typeof DEMO_SITE_ERROR_CODES;

/** An error raised by the demo-site helpers. */
export class DemoSiteError extends SteadfastError {
  override readonly name = "DemoSiteError";
  constructor(
    readonly code: DemoSiteErrorCode,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}

/** Folder of the demo site's files. */
export const DEMO_SITE_DIR = fileURLToPath(new URL("../../infra/sites/kestrel-r1/", import.meta.url));

/** Loads infra/sites/kestrel-r1/site.yaml, the model the optimizer uses. */
export function loadDemoSite(): Promise<SiteModel> {
  return loadSiteModelFile(`${DEMO_SITE_DIR}site.yaml`);
}

/** Loads infra/sites/kestrel-r1/plant.yaml, the "true" plant the simulator runs. */
export function loadDemoPlant(): Promise<SiteModel> {
  return loadSiteModelFile(`${DEMO_SITE_DIR}plant.yaml`);
}

/** Values by symbol; anything missing keeps the model's default. */
export type Values = Readonly<Record<string, number>>;

/** Inputs held fixed while the decisions move. */
export interface FixedInputs {
  readonly parameters?: Values;
  readonly disturbances?: Values;
  readonly prices?: Values;
}

// ---------------------------------------------------------------------------------------------
// Sequential NLP over a SiteModel
// ---------------------------------------------------------------------------------------------

/** The steady state at one decision vector, with total derivatives through it. */
export interface SteadyEvaluation {
  /** The solve; `point` holds every block at the solution. */
  readonly solve: SolveResult;
  /** Objective as the model writes it (its own sense). */
  readonly objective: number;
  /** Constraint values g (feasible when g ≤ 0, or g = 0 for "eq"), in model order. */
  readonly constraints: Float64Array;
  /** dObjective/dDecisions, total (through the steady state). */
  objectiveGradient(): Float64Array;
  /** dg/dDecisions, total: one row per model constraint. */
  constraintJacobian(): Float64Array[];
}

/** Options of {@link sequentialNlp}. */
export interface SequentialNlpOptions {
  /** Starting decisions, by symbol; default each decision's `initial`. */
  readonly start?: Values;
  /**
   * Newton options for the inner steady-state solves. Default: tolerance 1e-12 (scaled residual), tighter
   * than `solveAtPoint`'s 1e-10, so that the SQP's line search does not see the inner solve's noise.
   */
  readonly solve?: SolveOptions;
  /**
   * Limit each decision to `start ± maxMovePerCycle` (where the site sets one) inside its bounds, as
   * one RTO cycle may move it. Default false: the whole range.
   */
  readonly moveLimits?: boolean;
}

/** The NLP over a site model's decisions, and the evaluation behind it. */
export interface SequentialNlp {
  readonly model: SiteModel;
  /**
   * Variables: the decisions in model order, then one elastic slack (≥ 0) per soft constraint.
   * Inequalities c ≥ 0: −g for each hard "le" constraint, s − g for a soft one (and s + g too for a
   * soft "eq"); equalities: g for each hard "eq". The objective carries −sense·penalty·s per slack.
   */
  readonly problem: NlpProblem;
  /** Decision symbols, in variable order (the first `decisions.length` variables). */
  readonly decisions: readonly string[];
  /** For each NLP inequality: the model constraint it comes from. */
  readonly inequalityOrigin: readonly number[];
  /** For each NLP equality: the model constraint it comes from. */
  readonly equalityOrigin: readonly number[];
  /** Steady state at the decisions `u` (model order). Throws DEMO_STEADY_STATE_FAILED when Newton fails from both the last solution and the initials. */
  evaluate(u: ArrayLike<number>): SteadyEvaluation;
}

/** Fills a point with the fixed inputs and the decisions. */
function pointAt(model: SiteModel, inputs: FixedInputs, u: ArrayLike<number>, unknowns?: Float64Array) {
  const point = model.newPoint();
  if (inputs.parameters) model.setBlock(point, "parameters", inputs.parameters);
  if (inputs.disturbances) model.setBlock(point, "disturbances", inputs.disturbances);
  if (inputs.prices) model.setBlock(point, "prices", inputs.prices);
  const d = model.layout.blocks.decisions;
  for (let j = 0; j < d.symbols.length; j += 1) point[d.offset + j] = u[j] as number;
  if (unknowns) point.set(unknowns, model.layout.blocks.unknowns.offset);
  return point;
}

/** Total derivative rows: explicit ∂/∂u + ∂/∂x · dx/du, for `rows` functions. */
function totalDerivative(
  explicitU: Float64Array,
  explicitX: Float64Array,
  sens: Float64Array,
  rows: number,
  nx: number,
  nu: number,
) {
  const out: Float64Array[] = [];
  for (let r = 0; r < rows; r += 1) {
    const row = explicitU.slice(r * nu, (r + 1) * nu);
    for (let i = 0; i < nx; i += 1) {
      const a = explicitX[r * nx + i] as number;
      if (a === 0) continue;
      for (let j = 0; j < nu; j += 1) row[j] = (row[j] as number) + a * (sens[i * nu + j] as number);
    }
    out.push(row);
  }
  return out;
}

/**
 * Builds the sequential NLP of a site model at fixed parameters, disturbances and prices (see
 * {@link SequentialNlp} for the variables and constraint forms). The objective sense is the model's.
 */
export function sequentialNlp(
  model: SiteModel,
  inputs: FixedInputs = {},
  options: SequentialNlpOptions = {},
): SequentialNlp {
  const nu = model.decisions.length;
  const nx = model.unknowns.length;
  const nc = model.constraints.length;
  const sense = model.objective.sense;
  const xOff = model.layout.blocks.unknowns.offset;
  const soft = model.constraints.flatMap((c, k) => (c.kind === "soft" ? [k] : []));
  const slackOf = new Map(soft.map((k, i) => [k, nu + i]));
  const n = nu + soft.length;

  const solveOptions: SolveOptions = { tolerance: 1e-12, ...options.solve };
  let warm: Float64Array | undefined;
  let cacheU: Float64Array | undefined;
  let cache: SteadyEvaluation | undefined;

  const evaluate = (u: ArrayLike<number>): SteadyEvaluation => {
    if (cache && cacheU?.every((v, j) => v === u[j])) return cache;
    let solve = solveAtPoint(model, pointAt(model, inputs, u, warm), solveOptions);
    if (!solve.converged && warm) solve = solveAtPoint(model, pointAt(model, inputs, u), solveOptions);
    if (!solve.converged) {
      throw new DemoSiteError(
        "DEMO_STEADY_STATE_FAILED",
        `${model.site.id}: steady state failed (${solve.reason}) at ${model.decisions.map((d, j) => `${d.symbol} = ${u[j]}`).join(", ")}`,
      );
    }
    const point = solve.point;
    warm = point.slice(xOff, xOff + nx);
    let sens: Float64Array | undefined;
    const sensitivity = (): Float64Array => {
      sens ??= steadyStateSensitivity(model, point, "decisions");
      if (!sens)
        throw new DemoSiteError(
          "DEMO_STEADY_STATE_FAILED",
          `${model.site.id}: singular Jacobian at the steady state`,
        );
      return sens;
    };
    const evaluation: SteadyEvaluation = {
      solve,
      objective: model.evalObjective(point),
      constraints: model.evalConstraints(point),
      objectiveGradient: () =>
        totalDerivative(
          model.objectiveGradient(point, "decisions"),
          model.objectiveGradient(point, "unknowns"),
          sensitivity(),
          1,
          nx,
          nu,
        )[0] as Float64Array,
      constraintJacobian: () =>
        totalDerivative(
          model.constraintJacobian(point, "decisions"),
          model.constraintJacobian(point, "unknowns"),
          sensitivity(),
          nc,
          nx,
          nu,
        ),
    };
    cacheU = Float64Array.from({ length: nu }, (_, j) => u[j] as number);
    cache = evaluation;
    return evaluation;
  };

  // Constraint rows of the NLP, each a function of (g, slack values).
  const inequalityOrigin: number[] = [];
  const inequalitySign: number[] = []; // c = sign·g (+ slack for soft)
  const equalityOrigin: number[] = [];
  model.constraints.forEach((c, k) => {
    if (c.sense === "le") {
      inequalityOrigin.push(k);
      inequalitySign.push(-1);
    } else if (c.kind === "hard") {
      equalityOrigin.push(k);
    } else {
      inequalityOrigin.push(k, k);
      inequalitySign.push(-1, 1);
    }
  });
  const nameOf = (k: number, i: number): string => {
    const name = model.constraints[k]?.name as string;
    return model.constraints[k]?.sense === "eq" && model.constraints[k]?.kind === "soft"
      ? `${name} (${inequalitySign[i] === -1 ? "upper" : "lower"})`
      : name;
  };
  const penaltyOf = (k: number): number => model.constraints[k]?.penalty ?? 0;
  const sign = sense === "max" ? -1 : 1;

  const decisions = model.decisions.map((d) => d.symbol);
  const x0 = new Float64Array(n);
  model.decisions.forEach((d, j) => {
    x0[j] = options.start?.[d.symbol] ?? d.initial;
  });
  const reach = (d: SiteModel["decisions"][number]): number =>
    options.moveLimits ? (d.maxMovePerCycle ?? Number.POSITIVE_INFINITY) : Number.POSITIVE_INFINITY;
  const problem: NlpProblem = {
    x0,
    variableNames: [...decisions, ...soft.map((k) => `slack(${model.constraints[k]?.name})`)],
    lower: [
      ...model.decisions.map((d, j) => Math.max(d.min, (x0[j] as number) - reach(d))),
      ...soft.map(() => 0),
    ],
    upper: [
      ...model.decisions.map((d, j) => Math.min(d.max, (x0[j] as number) + reach(d))),
      ...soft.map(() => Number.POSITIVE_INFINITY),
    ],
    sense,
    objective: (x) => {
      let f = evaluate(x).objective;
      for (const k of soft) f += sign * penaltyOf(k) * (x[slackOf.get(k) as number] as number);
      return f;
    },
    gradient: (x) => {
      const g = new Float64Array(n);
      g.set(evaluate(x).objectiveGradient());
      for (const k of soft) g[slackOf.get(k) as number] = sign * penaltyOf(k);
      return g;
    },
  };
  if (inequalityOrigin.length > 0) {
    problem.inequalities = {
      names: inequalityOrigin.map((k, i) => nameOf(k, i)),
      values: (x) => {
        const g = evaluate(x).constraints;
        return inequalityOrigin.map((k, i) => {
          const s = slackOf.has(k) ? (x[slackOf.get(k) as number] as number) : 0;
          return (inequalitySign[i] as number) * (g[k] as number) + s;
        });
      },
      jacobian: (x) => {
        const jac = evaluate(x).constraintJacobian();
        return inequalityOrigin.map((k, i) => {
          const row = new Float64Array(n);
          const src = jac[k] as Float64Array;
          for (let j = 0; j < nu; j += 1) row[j] = (inequalitySign[i] as number) * (src[j] as number);
          if (slackOf.has(k)) row[slackOf.get(k) as number] = 1;
          return row;
        });
      },
    };
  }
  if (equalityOrigin.length > 0) {
    problem.equalities = {
      names: equalityOrigin.map((k) => model.constraints[k]?.name as string),
      values: (x) => {
        const g = evaluate(x).constraints;
        return equalityOrigin.map((k) => g[k] as number);
      },
      jacobian: (x) => {
        const jac = evaluate(x).constraintJacobian();
        return equalityOrigin.map((k) => {
          const row = new Float64Array(n);
          row.set(jac[k] as Float64Array);
          return row;
        });
      },
    };
  }
  return { model, problem, decisions, inequalityOrigin, equalityOrigin, evaluate };
}

/** A constraint or bound that holds with equality at the optimum. */
export interface ActiveItem {
  /** The model constraint's name, or "FB ≥ 0.5" / "T_R ≤ 95" for a decision bound. */
  readonly name: string;
  readonly kind: "constraint" | "lower-bound" | "upper-bound";
  /**
   * Shadow price: ∂(optimal objective)/∂δ when the constraint g ≤ 0 is relaxed to g ≤ δ, or the bound is
   * moved outwards by δ (objective unit per constraint or decision unit). Positive for a binding
   * limit of a maximization, negative for one of a minimization.
   */
  readonly shadowPrice: number;
}

/** An optimum of a site model. */
export interface ModelOptimum {
  /** Optimal decisions, by symbol. */
  readonly decisions: Record<string, number>;
  /** Objective at the optimum (the model's sense and unit). */
  readonly objective: number;
  /** Active model constraints and decision bounds, with shadow prices. */
  readonly active: readonly ActiveItem[];
  /** Constraint values g at the optimum, by name. */
  readonly constraints: Record<string, number>;
  /** The steady state at the optimum. */
  readonly steady: SolveResult;
  /** The solver's full result. */
  readonly result: SqpResult;
}

/** Reads the optimum of a solved {@link SequentialNlp}; throws DEMO_OPTIMIZE_FAILED unless optimal. */
export function readOptimum(nlp: SequentialNlp, result: SqpResult): ModelOptimum {
  if (result.status !== "optimal") {
    throw new DemoSiteError(
      "DEMO_OPTIMIZE_FAILED",
      `${nlp.model.site.id}: ${result.status}: ${result.message}`,
    );
  }
  const nu = nlp.decisions.length;
  const active: ActiveItem[] = [];
  for (const a of result.active) {
    if (a.kind === "inequality") {
      // The NLP holds c = −g ≥ b, so relaxing g ≤ δ is b = −δ.
      active.push({
        name: nlp.model.constraints[nlp.inequalityOrigin[a.index] as number]?.name as string,
        kind: "constraint",
        shadowPrice: -a.shadowPrice,
      });
    } else if (a.kind === "equality") {
      active.push({ name: a.name, kind: "constraint", shadowPrice: a.shadowPrice });
    } else if (a.index < nu) {
      active.push({
        name: a.name,
        kind: a.kind,
        shadowPrice: a.kind === "lower-bound" ? -a.shadowPrice : a.shadowPrice,
      });
    }
  }
  const u = result.x.subarray(0, nu);
  const at = nlp.evaluate(u);
  const decisions: Record<string, number> = {};
  nlp.decisions.forEach((s, j) => {
    decisions[s] = u[j] as number;
  });
  const constraints: Record<string, number> = {};
  nlp.model.constraints.forEach((c, k) => {
    constraints[c.name] = at.constraints[k] as number;
  });
  return { decisions, objective: at.objective, active, constraints, steady: at.solve, result };
}

/** Default SQP options for the demo: tight enough that a 0.1 % profit difference is resolved. */
const SQP_OPTIONS: SqpOptions = {};

/** Optimizes a site model at fixed inputs. Throws DEMO_OPTIMIZE_FAILED when the solver fails. */
export function optimizeModel(
  model: SiteModel,
  inputs: FixedInputs = {},
  options: SequentialNlpOptions & { readonly sqp?: SqpOptions } = {},
): ModelOptimum {
  const nlp = sequentialNlp(model, inputs, options);
  return readOptimum(nlp, solveNlp(nlp.problem, { ...SQP_OPTIONS, ...options.sqp }));
}

// ---------------------------------------------------------------------------------------------
// The demo plant
// ---------------------------------------------------------------------------------------------

/** Clean-jacket UA of the plant (kW/K): plant.yaml's initial value. */
export function cleanUa(plant: SiteModel): number {
  const ua = plant.parameters.find((p) => p.symbol === "UA");
  if (!ua) throw new DemoSiteError("DEMO_STEADY_STATE_FAILED", `${plant.file} has no parameter UA`);
  return ua.initial;
}

/** Plant conditions: the jacket's fouling and anything else that differs from plant.yaml's defaults. */
export interface PlantConditions {
  /** UA as a fraction of the clean jacket's (1 = clean). Default 1. */
  readonly uaFactor?: number;
  /** Prices, by symbol; default plant.yaml's. */
  readonly prices?: Values;
  /** Disturbances (FA in kg/s, Tcw_in in °C); default plant.yaml's. */
  readonly disturbances?: Values;
}

/** The plant's fixed inputs under the given conditions. */
export function plantInputs(plant: SiteModel, conditions: PlantConditions = {}): FixedInputs {
  return {
    parameters: { UA: (conditions.uaFactor ?? 1) * cleanUa(plant) },
    ...(conditions.prices ? { prices: conditions.prices } : {}),
    ...(conditions.disturbances ? { disturbances: conditions.disturbances } : {}),
  };
}

/** The true plant optimum under the given conditions (what a perfect model would find). */
export function plantOptimum(
  plant: SiteModel,
  conditions: PlantConditions = {},
  options: SequentialNlpOptions = {},
): ModelOptimum {
  return optimizeModel(plant, plantInputs(plant, conditions), options);
}

/** A steady-state snapshot: tag values in each tag's own unit, as a data snapshot would carry them. */
export type Snapshot = Record<string, number>;

/** Value of a symbol at a solved point (any block or an output). */
function symbolValue(
  model: SiteModel,
  point: Float64Array,
  outputs: Float64Array,
  symbol: string,
): number | undefined {
  const slot = model.layout.slots.get(symbol);
  if (slot !== undefined) return point[slot];
  const o = model.layout.outputIndex.get(symbol);
  return o === undefined ? undefined : outputs[o];
}

/** Tag values at a solved point, in tag units (noise-free). */
export function tagValues(model: SiteModel, point: Float64Array): Snapshot {
  const outputs = model.evalOutputs(point);
  const snapshot: Snapshot = {};
  for (const tag of model.tags) {
    const v = symbolValue(model, point, outputs, tag.variable);
    if (v !== undefined) snapshot[tag.id] = (v - tag.toModel.offset) / tag.toModel.scale;
  }
  return snapshot;
}

/** The plant at steady state at decisions `u` (model order): solve and its tag values. */
export function plantSnapshot(plant: SiteModel, u: ArrayLike<number>, conditions: PlantConditions = {}) {
  const steady = sequentialNlp(plant, plantInputs(plant, conditions)).evaluate(u);
  return { steady, tags: tagValues(plant, steady.solve.point) };
}

// ---------------------------------------------------------------------------------------------
// Parameter estimation and the two RTO schemes
// ---------------------------------------------------------------------------------------------

/** Result of {@link fitParameters}. */
export interface ParameterFit {
  /** Fitted parameters, by symbol. */
  readonly parameters: Record<string, number>;
  /** Weighted residual sum of squares Σ ((model − measured)/σ)² (dimensionless). */
  readonly rss: number;
  /** Tags whose residuals entered the fit. */
  readonly tags: readonly string[];
}

/**
 * Least-squares fit of every model parameter to a steady-state snapshot (Levenberg–Marquardt,
 * weights 1/σ² from the tags): residuals are the tags whose variable is an unknown or an output of
 * the model; decisions and disturbances are taken from the snapshot's tags (model units). Derivatives
 * are analytic through the steady state (dx/dp = −J_x⁻¹ J_p).
 */
export function fitParameters(
  model: SiteModel,
  snapshot: Snapshot,
  fixed: FixedInputs = {},
  start?: Values,
): ParameterFit {
  const fitTags = model.tags.filter(
    (t) => (t.variableKind === "unknowns" || t.variableKind === "outputs") && snapshot[t.id] !== undefined,
  );
  const pSymbols = model.parameters.map((p) => p.symbol);
  const n = pSymbols.length;
  const m = fitTags.length;
  const nx = model.unknowns.length;
  const base = model.newPoint();
  if (fixed.prices) model.setBlock(base, "prices", fixed.prices);
  if (fixed.disturbances) model.setBlock(base, "disturbances", fixed.disturbances);
  for (const tag of model.tags) {
    const measured = snapshot[tag.id];
    if (measured === undefined || (tag.variableKind !== "decisions" && tag.variableKind !== "disturbances"))
      continue;
    base[model.layout.slots.get(tag.variable) as number] = tag.toModel.scale * measured + tag.toModel.offset;
  }
  const pOff = model.layout.blocks.parameters.offset;
  const xOff = model.layout.blocks.unknowns.offset;
  let warm: Float64Array | undefined;
  const solveAt = (p: Float64Array): Float64Array | undefined => {
    const point = base.slice();
    point.set(p, pOff);
    if (warm) point.set(warm, xOff);
    let r = solveAtPoint(model, point);
    if (!r.converged) {
      const again = base.slice();
      again.set(p, pOff);
      r = solveAtPoint(model, again);
    }
    if (!r.converged) return undefined;
    warm = r.point.slice(xOff, xOff + nx);
    return r.point;
  };
  // A tag's model value and its row of d/dp, in the tag's unit.
  const tagRow = (
    point: Float64Array,
    outputs: Float64Array,
    tag: (typeof fitTags)[number],
    dOut?: { readonly explicitP: Float64Array; readonly explicitX: Float64Array },
    sens?: Float64Array,
  ) => {
    const value =
      ((symbolValue(model, point, outputs, tag.variable) as number) - tag.toModel.offset) / tag.toModel.scale;
    if (!dOut || !sens) return { value, row: undefined };
    const row = new Float64Array(n);
    const x = model.layout.blocks.unknowns.index.get(tag.variable);
    const o = model.layout.outputIndex.get(tag.variable);
    for (let j = 0; j < n; j += 1) {
      let d = 0;
      if (x !== undefined) d = sens[x * n + j] as number;
      else if (o !== undefined) {
        d = dOut.explicitP[o * n + j] as number;
        for (let i = 0; i < nx; i += 1)
          d += (dOut.explicitX[o * nx + i] as number) * (sens[i * n + j] as number);
      }
      row[j] = d / tag.toModel.scale;
    }
    return { value, row };
  };
  const weights = Float64Array.from(fitTags, (t) => 1 / t.sigma ** 2);
  const result = levenbergMarquardt(
    {
      n,
      m,
      weights,
      lower: Float64Array.from(model.parameters, (p) => p.min),
      upper: Float64Array.from(model.parameters, (p) => p.max),
      residuals: (p, out) => {
        const point = solveAt(p);
        // A trial step with no steady state: NaN makes the fit reject the step and raise its damping.
        if (!point) {
          out.fill(Number.NaN);
          return;
        }
        const outputs = model.evalOutputs(point);
        fitTags.forEach((t, i) => {
          out[i] = tagRow(point, outputs, t).value - (snapshot[t.id] as number);
        });
      },
      jacobian: (p, out) => {
        const point = solveAt(p);
        if (!point)
          throw new DemoSiteError(
            "DEMO_FIT_FAILED",
            `${model.site.id}: no steady state at parameters ${Array.from(p).join(", ")}`,
          );
        const outputs = model.evalOutputs(point);
        const sens = steadyStateSensitivity(model, point, "parameters");
        if (!sens)
          throw new DemoSiteError("DEMO_FIT_FAILED", `${model.site.id}: singular Jacobian during the fit`);
        const d = {
          explicitP: model.outputJacobian(point, "parameters"),
          explicitX: model.outputJacobian(point, "unknowns"),
        };
        fitTags.forEach((t, i) => {
          out.set(tagRow(point, outputs, t, d, sens).row as Float64Array, i * n);
        });
      },
    },
    model.parameters.map((p) => start?.[p.symbol] ?? p.initial),
    // The residuals carry the inner Newton solve's error (scaled tolerance 1e-10), so the default
    // xtol 1e-12 / gtol 1e-13 can never fire; 1e-9 sits just above that noise.
    { maxIterations: 100, xtol: 1e-9, gtol: 1e-9 },
  );
  if (!result.converged)
    throw new DemoSiteError("DEMO_FIT_FAILED", `${model.site.id}: fit stopped by ${result.reason}`);
  const parameters: Record<string, number> = {};
  pSymbols.forEach((s, j) => {
    parameters[s] = result.p[j] as number;
  });
  return { parameters, rss: result.rss, tags: fitTags.map((t) => t.id) };
}

/** One RTO iteration as the plant saw it. */
export interface RtoStep {
  /** Decisions applied to the plant, by symbol. */
  readonly decisions: Record<string, number>;
  /** The plant's true objective there. */
  readonly plantObjective: number;
  /** Plant constraint values g there, by name. */
  readonly plantConstraints: Record<string, number>;
}

/** Options shared by the two RTO schemes. */
export interface RtoOptions {
  /** Plant conditions (fouling, prices, disturbances), also given to the model as prices and disturbances. */
  readonly conditions?: PlantConditions;
  /** Starting decisions; default the site's decision initials. */
  readonly start?: Values;
  /** Iterations. Default 10 (two-step) or 20 (modifier adaptation). */
  readonly iterations?: number;
  /** Hold each move within the decisions' `maxMovePerCycle`, as the RTO service does. Default false. */
  readonly moveLimits?: boolean;
}

function stepRecord(plantNlp: SequentialNlp, u: Float64Array): RtoStep {
  const at = plantNlp.evaluate(u);
  const decisions: Record<string, number> = {};
  plantNlp.decisions.forEach((s, j) => {
    decisions[s] = u[j] as number;
  });
  const plantConstraints: Record<string, number> = {};
  plantNlp.model.constraints.forEach((c, k) => {
    plantConstraints[c.name] = at.constraints[k] as number;
  });
  return { decisions, plantObjective: at.objective, plantConstraints };
}

function modelFixed(conditions: PlantConditions): FixedInputs {
  return {
    ...(conditions.prices ? { prices: conditions.prices } : {}),
    ...(conditions.disturbances ? { disturbances: conditions.disturbances } : {}),
  };
}

/**
 * The two-step approach: at each steady state fit the model's parameters to the plant's tags
 * ({@link fitParameters}), then optimize the fitted model and move the plant there. Returns the plant's
 * view of each iteration and the last fit.
 */
export function twoStepRto(model: SiteModel, plant: SiteModel, options: RtoOptions = {}) {
  const conditions = options.conditions ?? {};
  const plantNlp = sequentialNlp(plant, plantInputs(plant, conditions));
  let u = Float64Array.from(model.decisions, (d) => options.start?.[d.symbol] ?? d.initial);
  let fit: ParameterFit | undefined;
  const history: RtoStep[] = [];
  for (let k = 0; k < (options.iterations ?? 10); k += 1) {
    const snapshot = tagValues(plant, plantNlp.evaluate(u).solve.point);
    fit = fitParameters(model, snapshot, modelFixed(conditions), fit?.parameters);
    const start: Record<string, number> = {};
    model.decisions.forEach((d, j) => {
      start[d.symbol] = u[j] as number;
    });
    const opt = optimizeModel(
      model,
      { ...modelFixed(conditions), parameters: fit.parameters },
      { start, moveLimits: options.moveLimits ?? false },
    );
    u = Float64Array.from(model.decisions, (d) => opt.decisions[d.symbol] as number);
    history.push(stepRecord(plantNlp, u));
  }
  return { history, fit };
}

/** Options of {@link modifierAdaptationRto}. */
export interface ModifierRtoOptions extends RtoOptions {
  /** Filter gain of the objective's modifiers, in (0, 1]. Default 0.7. */
  readonly gain?: number;
  /**
   * Filter gain of the constraints' modifiers, in (0, 1]. Default 1: a filtered zeroth-order constraint
   * modifier lets the model believe in cooling capacity the plant has not got, and the first move
   * overshoots the plant's limit.
   */
  readonly constraintGain?: number;
  /** Central-difference step for the plant gradients, as a fraction of each decision's range. Default 1e-3. */
  readonly relativeStep?: number;
  /** Model parameters, by symbol (e.g. from a fit); default the site's initial values. */
  readonly modelParameters?: Values;
}

/**
 * Modifier adaptation (Marchetti, Chachuat & Bonvin 2009): the model at its nominal parameters, its
 * objective and every inequality corrected at each iterate to match the plant's value and gradient.
 * Plant gradients come from central differences on the plant model (2 steady states per decision),
 * standing in for the perturbations or past operating points a real plant would need.
 */
export function modifierAdaptationRto(model: SiteModel, plant: SiteModel, options: ModifierRtoOptions = {}) {
  const conditions = options.conditions ?? {};
  const gain = options.gain ?? 0.7;
  const relStep = options.relativeStep ?? 1e-3;
  const plantNlp = sequentialNlp(plant, plantInputs(plant, conditions));
  const nu = model.decisions.length;
  const fixed: FixedInputs = {
    ...modelFixed(conditions),
    ...(options.modelParameters ? { parameters: options.modelParameters } : {}),
  };
  const base = sequentialNlp(model, fixed);
  const names = base.problem.inequalities?.names ?? [];
  // Plant inequalities in the model NLP's order and form (c = −g ≥ 0), matched by name.
  const plantIndex = base.inequalityOrigin.map((k) => {
    const name = model.constraints[k]?.name;
    return plant.constraints.findIndex((c) => c.name === name);
  });
  const plantC = (u: Float64Array): Float64Array => {
    const at = plantNlp.evaluate(u);
    return Float64Array.from(plantIndex, (i) => (i < 0 ? 0 : -(at.constraints[i] as number)));
  };
  let state = initialModifierState(nu, names.length);
  let u = Float64Array.from(model.decisions, (d) => options.start?.[d.symbol] ?? d.initial);
  const history: RtoStep[] = [];
  for (let k = 0; k < (options.iterations ?? 20); k += 1) {
    const plantValue = plantNlp.evaluate(u).objective;
    const plantCk = plantC(u);
    const plantGrad = new Float64Array(nu);
    const plantJac = names.map(() => new Float64Array(nu));
    model.decisions.forEach((d, j) => {
      const h = relStep * (d.max - d.min);
      const up = u.slice();
      up[j] = (up[j] as number) + h;
      const dn = u.slice();
      dn[j] = (dn[j] as number) - h;
      const fUp = plantNlp.evaluate(up).objective;
      const cUp = plantC(up);
      const fDn = plantNlp.evaluate(dn).objective;
      const cDn = plantC(dn);
      plantGrad[j] = (fUp - fDn) / (2 * h);
      plantJac.forEach((row, i) => {
        row[j] = ((cUp[i] as number) - (cDn[i] as number)) / (2 * h);
      });
    });
    const modelAt = base.evaluate(u);
    const modelC = base.problem.inequalities?.values(u) ?? [];
    const modelJac = base.problem.inequalities?.jacobian(u).map((r) => Array.from(r).slice(0, nu)) ?? [];
    state = updateModifiers(
      state,
      {
        inputs: u,
        plantObjective: plantValue,
        modelObjective: modelAt.objective,
        plantObjectiveGradient: plantGrad,
        modelObjectiveGradient: modelAt.objectiveGradient(),
        plantConstraints: plantCk,
        modelConstraints: modelC,
        plantConstraintGradients: plantJac,
        modelConstraintGradients: modelJac,
      },
      { objective: gain, constraints: options.constraintGain ?? 1 },
    );
    const start: Record<string, number> = {};
    model.decisions.forEach((d, j) => {
      start[d.symbol] = u[j] as number;
    });
    const nlp = sequentialNlp(model, fixed, { start, moveLimits: options.moveLimits ?? false });
    const result = solveNlp(modifyProblem(nlp.problem, state, { constraintNames: names }), SQP_OPTIONS);
    if (result.status !== "optimal") {
      throw new DemoSiteError(
        "DEMO_OPTIMIZE_FAILED",
        `modifier adaptation, iteration ${k + 1}: ${result.status}: ${result.message}`,
      );
    }
    u = result.x.slice(0, nu);
    history.push(stepRecord(plantNlp, u));
  }
  return { history, modifiers: state };
}
