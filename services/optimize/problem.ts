/**
 * From a compiled site model to an optimization problem: the NLP for ./sqp.ts (sequential or
 * simultaneous) and, for a linear model, the LP for ./lp.ts. Pure: no bus, no clock.
 *
 * Formulations:
 * - sequential (default): the NLP's variables are the decisions; the model's unknowns are solved by
 *   Newton (services/model solveAtPoint) inside every evaluation, and total derivatives come from the
 *   chain rule with the steady-state sensitivity dx/du = −J_x⁻¹·J_u. Small NLP, every iterate is a
 *   converged steady state (a stopped solve still gives a physical point);
 * - simultaneous: decisions and unknowns are both variables and the model equations are equality
 *   constraints. No Newton solve per iterate; iterates are not steady states until the end.
 *
 * Decision bounds are the site model's [min, max] tightened by the per-cycle move limit around the
 * current operating point (max(min, u₀ − Δ), min(max, u₀ + Δ)).
 *
 * Soft constraints: exact L1 penalty through elastic variables (g(u) − s ≤ 0, s ≥ 0, objective −/+
 * penalty·s). Chosen over a smooth quadratic penalty because (1) it is exact: a soft limit that can be
 * met at a marginal cost below its penalty is met exactly, not missed by cost/penalty as a quadratic
 * penalty does; (2) the problem stays smooth, so SQP keeps its exact derivatives and fast convergence;
 * (3) the multiplier of the row is the constraint's shadow price capped at the penalty, which reads
 * directly as "worth this much to relax"; (4) the same rows go unchanged into the LP path.
 * Hard constraints are inequality (or equality) constraints.
 *
 * Sign conventions: the model gives constraints as g ≤ 0 (or g = 0); the NLP wants c = −g ≥ 0. Shadow
 * prices reported by this module are ∂objective* / ∂δ for the relaxed constraint g ≤ δ (g = δ), in the
 * objective's own sense: for a maximized profit a binding limit has a shadow price ≥ 0.
 */
import {
  pointFromInputs,
  type SiteModel,
  type SolveOptions,
  solveAtPoint,
  steadyStateSensitivity,
} from "../model/index.js";
import type { LpConstraint, LpProblem, LpVariable } from "./lp.js";
import type { ConstraintBlock, NlpProblem } from "./sqp.js";

/** Where the optimizer stands this cycle: inputs by model symbol, in model units. */
export interface OperatingContext {
  /** Parameters in force; a missing symbol keeps the site model's initial value. */
  parameters?: Readonly<Record<string, number>>;
  /** Prices; a missing symbol keeps the site model's default. */
  prices?: Readonly<Record<string, number>>;
  /** Measured disturbances; a missing symbol keeps the site model's default (error when none). */
  disturbances?: Readonly<Record<string, number>>;
  /** Current decision values (the operating point, from the setpoint tags); missing → the decision's initial. */
  current?: Readonly<Record<string, number>>;
  /**
   * Output bias (bias update) on unknowns, by symbol: the objective and constraints are evaluated at
   * x(u) + b. Default none.
   */
  unknownBias?: Readonly<Record<string, number>>;
}

/** Options of {@link buildSiteProblem}. */
export interface ProblemOptions {
  /** "sequential" (default) or "simultaneous"; see the module comment. */
  formulation?: "sequential" | "simultaneous";
  /** Tighten each decision's bounds to the current value ± maxMovePerCycle. Default true. */
  moveLimits?: boolean;
  /** Options of the inner steady-state Newton solve. Default: the model library's, with tolerance 1e-13. */
  steadyState?: SolveOptions;
}

/** The bounds a decision got this cycle and where each side came from. */
export interface DecisionBounds {
  symbol: string;
  unit: string;
  setpointTag: string;
  current: number;
  lower: number;
  upper: number;
  lowerFrom: "bound" | "move-limit";
  upperFrom: "bound" | "move-limit";
}

/** How an NLP constraint row relates to the site model. */
export interface RowInfo {
  /** Index in `model.constraints`, or undefined for a model equation (simultaneous only). */
  constraint: number | undefined;
  /** Name as the NLP knows it (constraint name, or "equation <name>"). */
  name: string;
}

/** Model values at one decision vector (after bias, before modifiers). */
export interface PointValues {
  /** Objective as the model writes it (no penalty terms), objective unit. */
  objective: number;
  /** Constraint values g (≤ 0 or = 0 feasible), one per model constraint. */
  constraints: Float64Array;
  /** Unknowns by symbol (the steady state; bias not added). */
  unknowns: Record<string, number>;
  /** The full point (bias not added). */
  point: Float64Array;
}

/** Result of evaluating the model at decisions u: the values, or why the steady state failed. */
export type Evaluation = ({ ok: true } & PointValues) | { ok: false; reason: string };

/** Total derivatives through the steady state w.r.t. the decisions. */
export interface TotalGradients {
  objective: Float64Array;
  /** One row per model constraint. */
  constraints: Float64Array[];
}

/** The NLP built for one cycle, with the maps back to the site model. */
export interface SiteProblem {
  formulation: "sequential" | "simultaneous";
  nlp: NlpProblem;
  /** NLP variable names: decisions, then unknowns (simultaneous), then elastic slacks. */
  variableNames: string[];
  /** Index of each decision in the NLP's x (always 0 … n_d − 1). */
  decisionIndices: number[];
  bounds: DecisionBounds[];
  equalityRows: RowInfo[];
  inequalityRows: RowInfo[];
  /** Decisions at the current operating point (projected into the bounds). */
  current: Float64Array;
  /** Model values at decisions u (Newton solve, warm-started); never throws. */
  evaluate(u: ArrayLike<number>): Evaluation;
  /** Total derivatives at decisions u, or undefined when the steady state fails there. */
  totalGradients(u: ArrayLike<number>): TotalGradients | undefined;
}

/** Decision bounds that contradict each other (the current point sits beyond a bound by more than a move). */
export interface BoundConflict {
  ok: false;
  conflicting: string[];
  message: string;
}

const fmt = (v: number): string => String(Number(v.toPrecision(10)));

/** This cycle's bounds of every decision (see the module comment); a conflict names both sides. */
export function decisionBounds(
  model: SiteModel,
  current: Readonly<Record<string, number>>,
  moveLimits = true,
): { ok: true; bounds: DecisionBounds[] } | BoundConflict {
  const bounds: DecisionBounds[] = [];
  for (const d of model.decisions) {
    const u0 = current[d.symbol] ?? d.initial;
    const move = moveLimits ? d.maxMovePerCycle : undefined;
    let lower = d.min;
    let upper = d.max;
    let lowerFrom: DecisionBounds["lowerFrom"] = "bound";
    let upperFrom: DecisionBounds["upperFrom"] = "bound";
    if (move !== undefined) {
      if (u0 - move > lower) {
        lower = u0 - move;
        lowerFrom = "move-limit";
      }
      if (u0 + move < upper) {
        upper = u0 + move;
        upperFrom = "move-limit";
      }
    }
    if (!(lower <= upper)) {
      const lo = boundName(d.symbol, "lower", lower, lowerFrom, u0, move);
      const up = boundName(d.symbol, "upper", upper, upperFrom, u0, move);
      return {
        ok: false,
        conflicting: [lo, up],
        message: `decision ${d.symbol} has no admissible value this cycle: ${lo} contradicts ${up} (current ${fmt(u0)} ${d.unit})`,
      };
    }
    bounds.push({
      symbol: d.symbol,
      unit: d.unit,
      setpointTag: d.setpointTag,
      current: u0,
      lower,
      upper,
      lowerFrom,
      upperFrom,
    });
  }
  return { ok: true, bounds };
}

/** The reported name of a decision bound, e.g. "FB ≤ 6 (bound)" or "T_R ≥ 72 (move limit ±3 around 75)". */
export function boundName(
  symbol: string,
  side: "lower" | "upper",
  value: number,
  from: "bound" | "move-limit",
  current?: number,
  move?: number,
): string {
  const rel = side === "lower" ? "≥" : "≤";
  const why =
    from === "bound"
      ? "bound"
      : `move limit ±${fmt(move ?? Number.NaN)} around ${fmt(current ?? Number.NaN)}`;
  return `${symbol} ${rel} ${fmt(value)} (${why})`;
}

const sub = (a: Float64Array, offset: number, n: number) => a.subarray(offset, offset + n);

/**
 * Builds the cycle's NLP from a site model (see the module comment). Returns a conflict instead when
 * the decision bounds contradict each other. Throws SiteModelError (MODEL_INPUT_INVALID) for an
 * undeclared symbol or a non-finite input value.
 */
export function buildSiteProblem(
  model: SiteModel,
  ctx: OperatingContext,
  options: ProblemOptions = {},
): ({ ok: true } & SiteProblem) | BoundConflict {
  const formulation = options.formulation ?? "sequential";
  // The objective seen by SQP is only as smooth as the inner solve is tight: at the model library's
  // 1e-10 a warm-started Newton step leaves noise that stalls the line search near the optimum.
  const steadyOptions: SolveOptions = { tolerance: 1e-13, ...options.steadyState };
  const b = decisionBounds(model, ctx.current ?? {}, options.moveLimits ?? true);
  if (!b.ok) return b;
  const bounds = b.bounds;
  const layout = model.layout.blocks;
  const nd = model.decisions.length;
  const nx = model.unknowns.length;
  const offD = layout.decisions.offset;
  const offX = layout.unknowns.offset;
  const base = pointFromInputs(model, {
    decisions: Object.fromEntries(bounds.map((d) => [d.symbol, d.current])),
    ...(ctx.parameters ? { parameters: ctx.parameters } : {}),
    ...(ctx.prices ? { prices: ctx.prices } : {}),
    ...(ctx.disturbances ? { disturbances: ctx.disturbances } : {}),
  });
  const bias = new Float64Array(nx);
  for (const [symbol, v] of Object.entries(ctx.unknownBias ?? {})) {
    const i = layout.unknowns.index.get(symbol);
    if (i !== undefined && Number.isFinite(v)) bias[i] = v;
  }
  const hasBias = bias.some((v) => v !== 0);
  const current = Float64Array.from(bounds, (d) => Math.min(d.upper, Math.max(d.lower, d.current)));

  // Elastic slacks of soft constraints: one for "le", a pair for "eq".
  const slackOf: Array<{ plus: number; minus: number | undefined } | undefined> = [];
  const slackNames: string[] = [];
  const slackPenalty: number[] = [];
  const firstSlack = formulation === "sequential" ? nd : nd + nx;
  model.constraints.forEach((c) => {
    if (c.kind !== "soft") {
      slackOf.push(undefined);
      return;
    }
    const p = c.penalty ?? 0;
    const plus = firstSlack + slackNames.length;
    slackNames.push(c.sense === "eq" ? `slack+ ${c.name}` : `slack ${c.name}`);
    slackPenalty.push(p);
    let minus: number | undefined;
    if (c.sense === "eq") {
      minus = firstSlack + slackNames.length;
      slackNames.push(`slack- ${c.name}`);
      slackPenalty.push(p);
    }
    slackOf.push({ plus, minus });
  });
  const ns = slackNames.length;
  const n = firstSlack + ns;
  // Penalties lower a maximized objective and raise a minimized one.
  const penaltySign = model.objective.sense === "max" ? -1 : 1;
  const nc = model.constraints.length;

  // ---- steady state at decisions u (warm-started from the last converged unknowns)
  const work = base.slice();
  let warm = base.slice(offX, offX + nx);
  {
    const first = solveAtPoint(model, work.slice(), steadyOptions);
    if (first.converged) warm = first.point.slice(offX, offX + nx);
  }
  const solveAt = (
    u: ArrayLike<number>,
  ): { ok: true; point: Float64Array } | { ok: false; reason: string } => {
    for (let j = 0; j < nd; j++) work[offD + j] = u[j]!;
    work.set(warm, offX);
    let r = solveAtPoint(model, work, steadyOptions);
    // Rounding can keep a badly conditioned model from 1e-13; the library's own 1e-10 still counts.
    const good = (x: typeof r) =>
      x.converged || (x.reason === "max-iterations" && x.scaledResidualNorm <= 1e-10);
    if (!good(r)) {
      // A far iterate may need the model's own initial guess rather than the last steady state.
      work.set(base.subarray(offX, offX + nx), offX);
      r = solveAtPoint(model, work, steadyOptions);
    }
    if (!good(r)) return { ok: false, reason: `steady state not found (${r.reason})` };
    warm = work.slice(offX, offX + nx);
    return { ok: true, point: work.slice() };
  };
  const biased = (point: Float64Array): Float64Array => {
    if (!hasBias) return point;
    const p = point.slice();
    for (let i = 0; i < nx; i++) p[offX + i]! += bias[i]!;
    return p;
  };

  const evaluate = (u: ArrayLike<number>): Evaluation => {
    const s = solveAt(u);
    if (!s.ok) return s;
    const bp = biased(s.point);
    return {
      ok: true,
      objective: model.evalObjective(bp),
      constraints: model.evalConstraints(bp),
      unknowns: model.getBlock(s.point, "unknowns"),
      point: s.point,
    };
  };
  const totalAt = (point: Float64Array): TotalGradients | undefined => {
    const sens = nx > 0 ? steadyStateSensitivity(model, point, "decisions") : new Float64Array(0);
    if (!sens) return undefined;
    const bp = biased(point);
    const chain = (du: Float64Array, dx: Float64Array): Float64Array => {
      const out = Float64Array.from(du);
      for (let j = 0; j < nd; j++) {
        let s = 0;
        for (let i = 0; i < nx; i++) s += dx[i]! * sens[i * nd + j]!;
        out[j]! += s;
      }
      return out;
    };
    const objective = chain(
      model.objectiveGradient(bp, "decisions"),
      model.objectiveGradient(bp, "unknowns"),
    );
    const cu = model.constraintJacobian(bp, "decisions");
    const cx = model.constraintJacobian(bp, "unknowns");
    const constraints: Float64Array[] = [];
    for (let k = 0; k < nc; k++) constraints.push(chain(sub(cu, k * nd, nd), sub(cx, k * nx, nx)));
    return { objective, constraints };
  };
  const totalGradients = (u: ArrayLike<number>): TotalGradients | undefined => {
    const s = solveAt(u);
    return s.ok ? totalAt(s.point) : undefined;
  };

  // ---- rows: hard and soft constraints, then (simultaneous) the model equations
  const equalityRows: RowInfo[] = [];
  const inequalityRows: RowInfo[] = [];
  model.constraints.forEach((c, k) => {
    (c.sense === "eq" ? equalityRows : inequalityRows).push({ constraint: k, name: c.name });
  });
  if (formulation === "simultaneous") {
    for (const e of model.equations) equalityRows.push({ constraint: undefined, name: `equation ${e.name}` });
  }

  const penaltyOf = (x: Float64Array): number => {
    let s = 0;
    for (let k = 0; k < ns; k++) s += slackPenalty[k]! * x[firstSlack + k]!;
    return penaltySign * s;
  };

  // Values and first derivatives of objective and g at x, in NLP variable order (without slacks).
  interface Local {
    f: number;
    g: Float64Array;
    /** ∂f/∂(decisions[, unknowns]). */
    df: Float64Array;
    /** Rows of ∂g/∂(decisions[, unknowns]). */
    dg: Float64Array[];
    /** Simultaneous only: residuals and their Jacobian rows. */
    h?: Float64Array;
    dh?: Float64Array[];
  }
  let lastX: Float64Array | undefined;
  let lastLocal: Local | undefined;
  let lastFailure: string | undefined;
  const local = (x: Float64Array, withDerivatives: boolean): Local | undefined => {
    if (
      lastX &&
      lastLocal &&
      lastX.every((v, j) => v === x[j]) &&
      (!withDerivatives || lastLocal.df.length > 0)
    )
      return lastLocal;
    if (lastX && !lastLocal && lastX.every((v, j) => v === x[j])) return undefined;
    lastX = x.slice();
    lastLocal = undefined;
    if (formulation === "sequential") {
      const s = solveAt(x);
      if (!s.ok) {
        lastFailure = s.reason;
        return undefined;
      }
      const bp = biased(s.point);
      const out: Local = {
        f: model.evalObjective(bp),
        g: model.evalConstraints(bp),
        df: new Float64Array(0),
        dg: [],
      };
      if (withDerivatives) {
        const t = totalAt(s.point);
        if (!t) {
          lastFailure = "the Jacobian of the model equations is singular at this steady state";
          return undefined;
        }
        out.df = t.objective;
        out.dg = t.constraints;
      }
      lastLocal = out;
      return out;
    }
    const p = base.slice();
    for (let j = 0; j < nd; j++) p[offD + j] = x[j]!;
    for (let i = 0; i < nx; i++) p[offX + i] = x[nd + i]!;
    const bp = biased(p);
    const out: Local = {
      f: model.evalObjective(bp),
      g: model.evalConstraints(bp),
      df: new Float64Array(0),
      dg: [],
      h: model.residuals(p),
    };
    if (withDerivatives) {
      const df = new Float64Array(nd + nx);
      df.set(model.objectiveGradient(bp, "decisions"), 0);
      df.set(model.objectiveGradient(bp, "unknowns"), nd);
      out.df = df;
      const cu = model.constraintJacobian(bp, "decisions");
      const cx = model.constraintJacobian(bp, "unknowns");
      for (let k = 0; k < nc; k++) {
        const row = new Float64Array(nd + nx);
        row.set(sub(cu, k * nd, nd), 0);
        row.set(sub(cx, k * nx, nx), nd);
        out.dg.push(row);
      }
      const hu = model.jacobian(p, "decisions");
      const hx = model.jacobian(p, "unknowns");
      out.dh = [];
      for (let i = 0; i < nx; i++) {
        const row = new Float64Array(nd + nx);
        row.set(sub(hu, i * nd, nd), 0);
        row.set(sub(hx, i * nx, nx), nd);
        out.dh.push(row);
      }
    }
    lastLocal = out;
    return out;
  };
  const failed = (): never => {
    // SQP turns a throw into an evaluation error with this message; NaN would hide the reason.
    throw new Error(lastFailure ?? "the model could not be evaluated");
  };
  const nanVector = (m: number) => new Float64Array(m).fill(Number.NaN);

  const widen = (row: ArrayLike<number>): Float64Array => {
    const out = new Float64Array(n);
    for (let j = 0; j < row.length; j++) out[j] = row[j]!;
    return out;
  };
  const eqValues = (x: Float64Array): Float64Array => {
    const l = local(x, false);
    const out = nanVector(equalityRows.length);
    if (!l) return out;
    equalityRows.forEach((r, i) => {
      if (r.constraint === undefined) {
        out[i] = l.h![i - (equalityRows.length - nx)]!;
        return;
      }
      const s = slackOf[r.constraint];
      let v = l.g[r.constraint]!;
      if (s) v += -x[s.plus]! + x[s.minus!]!;
      out[i] = v;
    });
    return out;
  };
  const eqJacobian = (x: Float64Array): Float64Array[] => {
    const l = local(x, true);
    if (!l) return equalityRows.map(() => nanVector(n));
    return equalityRows.map((r, i) => {
      if (r.constraint === undefined) return widen(l.dh![i - (equalityRows.length - nx)]!);
      const row = widen(l.dg[r.constraint]!);
      const s = slackOf[r.constraint];
      if (s) {
        row[s.plus] = -1;
        row[s.minus!] = 1;
      }
      return row;
    });
  };
  const inValues = (x: Float64Array): Float64Array => {
    const l = local(x, false);
    const out = nanVector(inequalityRows.length);
    if (!l) return out;
    inequalityRows.forEach((r, i) => {
      const k = r.constraint!;
      const s = slackOf[k];
      out[i] = -l.g[k]! + (s ? x[s.plus]! : 0);
    });
    return out;
  };
  const inJacobian = (x: Float64Array): Float64Array[] => {
    const l = local(x, true);
    if (!l) return inequalityRows.map(() => nanVector(n));
    return inequalityRows.map((r) => {
      const k = r.constraint!;
      const row = widen(l.dg[k]!).map((v) => -v);
      const s = slackOf[k];
      if (s) row[s.plus] = 1;
      return row;
    });
  };

  // ---- bounds and start point
  const lower = new Float64Array(n);
  const upper = new Float64Array(n);
  const x0 = new Float64Array(n);
  bounds.forEach((d, j) => {
    lower[j] = d.lower;
    upper[j] = d.upper;
    x0[j] = current[j]!;
  });
  const start = evaluate(current);
  if (formulation === "simultaneous") {
    model.unknowns.forEach((u, i) => {
      lower[nd + i] = u.min;
      upper[nd + i] = u.max;
      x0[nd + i] = start.ok ? start.point[offX + i]! : base[offX + i]!;
    });
  }
  for (let k = 0; k < ns; k++) {
    lower[firstSlack + k] = 0;
    upper[firstSlack + k] = Number.POSITIVE_INFINITY;
  }
  if (start.ok) {
    // Start the slacks at the violation so that the start point is as feasible as it can be.
    model.constraints.forEach((c, k) => {
      const s = slackOf[k];
      if (!s) return;
      const g = start.constraints[k]!;
      if (c.sense === "eq") {
        x0[s.plus] = Math.max(0, g);
        x0[s.minus!] = Math.max(0, -g);
      } else x0[s.plus] = Math.max(0, g);
    });
  }

  const variableNames = [
    ...model.decisions.map((d) => d.symbol),
    ...(formulation === "simultaneous" ? model.unknowns.map((u) => u.symbol) : []),
    ...slackNames,
  ];
  const block = (
    rows: RowInfo[],
    values: (x: Float64Array) => Float64Array,
    jac: (x: Float64Array) => Float64Array[],
  ): ConstraintBlock | undefined =>
    rows.length === 0 ? undefined : { names: rows.map((r) => r.name), values, jacobian: jac };
  const equalities = block(equalityRows, eqValues, eqJacobian);
  const inequalities = block(inequalityRows, inValues, inJacobian);
  const nlp: NlpProblem = {
    x0,
    variableNames,
    lower,
    upper,
    sense: model.objective.sense,
    objective: (x) => {
      const l = local(x, false);
      return l ? l.f + penaltyOf(x) : failed();
    },
    gradient: (x) => {
      const l = local(x, true);
      if (!l) return failed();
      const g = widen(l.df);
      for (let k = 0; k < ns; k++) g[firstSlack + k] = penaltySign * slackPenalty[k]!;
      return g;
    },
    ...(equalities ? { equalities } : {}),
    ...(inequalities ? { inequalities } : {}),
  };
  return {
    ok: true,
    formulation,
    nlp,
    variableNames,
    decisionIndices: Array.from({ length: nd }, (_, j) => j),
    bounds,
    equalityRows,
    inequalityRows,
    current,
    evaluate,
    totalGradients,
  };
}

// -------------------------------------------------------------------------------------------------
// Linear sites

/** Options of {@link isLinearSite}. */
export interface LinearityOptions {
  /** Relative tolerance on Jacobian entries between probe points. Default 1e-9. */
  tolerance?: number;
}

/**
 * True when the site's equations, objective and constraints are affine in the decisions and unknowns
 * at the given parameters, prices and disturbances. Tested numerically: the Jacobians must agree at
 * three probe points spread over the decisions' bounds and around the unknowns' initial values (an
 * affine map has one Jacobian everywhere; a nonlinear expression that happened to agree at three
 * generic points would be a coincidence). Symbolic checks would need the expression trees, which the
 * compiled model does not expose.
 */
export function isLinearSite(
  model: SiteModel,
  ctx: OperatingContext,
  options: LinearityOptions = {},
): boolean {
  const tol = options.tolerance ?? 1e-9;
  let base: Float64Array;
  try {
    base = pointFromInputs(model, {
      ...(ctx.parameters ? { parameters: ctx.parameters } : {}),
      ...(ctx.prices ? { prices: ctx.prices } : {}),
      ...(ctx.disturbances ? { disturbances: ctx.disturbances } : {}),
    });
  } catch {
    return false;
  }
  const offD = model.layout.blocks.decisions.offset;
  const offX = model.layout.blocks.unknowns.offset;
  const fractions = [0.23, 0.61, 0.87];
  const probes = fractions.map((t, k) => {
    const p = base.slice();
    model.decisions.forEach((d, j) => {
      p[offD + j] = d.min + ((t + 0.07 * j) % 1) * (d.max - d.min);
    });
    model.unknowns.forEach((u, i) => {
      const lo = Number.isFinite(u.min) ? u.min : u.initial - Math.max(1, Math.abs(u.initial));
      const hi = Number.isFinite(u.max) ? u.max : u.initial + Math.max(1, Math.abs(u.initial));
      p[offX + i] = lo + ((fractions[(k + i) % 3]! + 0.05 * i) % 1) * (hi - lo);
    });
    return p;
  });
  const signature = (p: Float64Array): Float64Array[] =>
    (["decisions", "unknowns"] as const).flatMap((w) => [
      model.jacobian(p, w),
      model.objectiveGradient(p, w),
      model.constraintJacobian(p, w),
    ]);
  const ref = signature(probes[0]!);
  for (const p of probes.slice(1)) {
    const s = signature(p);
    for (let b = 0; b < ref.length; b++) {
      const a = ref[b]!;
      const c = s[b]!;
      for (let i = 0; i < a.length; i++) {
        if (!Number.isFinite(a[i]!) || !Number.isFinite(c[i]!)) return false;
        if (Math.abs(a[i]! - c[i]!) > tol * (1 + Math.abs(a[i]!))) return false;
      }
    }
  }
  return true;
}

/** The LP of a linear site, with what is needed to read its answer back. */
export interface SiteLp {
  lp: LpProblem;
  /** Objective = Σ cost·value + constant (the affine part the LP drops). */
  constant: number;
  bounds: DecisionBounds[];
  /** Variable names of the decisions in the LP (the symbols). */
  decisionNames: string[];
  /** Row name of each model constraint (its own name). */
  constraintRows: string[];
  /** A key of the LP's structure (names and coefficients); equal keys allow a warm re-solve. */
  structureKey: string;
}

/** Extra linear terms on the decisions (modifier adaptation): objective λᵀ(u − u_k) + ε, constraints likewise. */
export interface LinearModifiers {
  inputs: ArrayLike<number>;
  objectiveLambda: ArrayLike<number>;
  /** By model constraint index: ε and λ in the model's g form (added to g). */
  constraints?: ReadonlyMap<number, { epsilon: number; lambda: ArrayLike<number> }>;
}

/**
 * Builds the LP of a linear site (see {@link isLinearSite}): variables are the decisions (with this
 * cycle's bounds), the unknowns and the elastic slacks of soft constraints; rows are the model
 * equations, then the constraints under their own names. Linearized exactly at the current point.
 */
export function buildSiteLp(
  model: SiteModel,
  ctx: OperatingContext,
  options: { moveLimits?: boolean; modifiers?: LinearModifiers } = {},
): ({ ok: true } & SiteLp) | BoundConflict {
  const b = decisionBounds(model, ctx.current ?? {}, options.moveLimits ?? true);
  if (!b.ok) return b;
  const nd = model.decisions.length;
  const nx = model.unknowns.length;
  const offD = model.layout.blocks.decisions.offset;
  const offX = model.layout.blocks.unknowns.offset;
  const p = pointFromInputs(model, {
    decisions: Object.fromEntries(b.bounds.map((d) => [d.symbol, d.current])),
    ...(ctx.parameters ? { parameters: ctx.parameters } : {}),
    ...(ctx.prices ? { prices: ctx.prices } : {}),
    ...(ctx.disturbances ? { disturbances: ctx.disturbances } : {}),
  });
  const bp = p.slice();
  for (const [symbol, v] of Object.entries(ctx.unknownBias ?? {})) {
    const i = model.layout.blocks.unknowns.index.get(symbol);
    if (i !== undefined) bp[offX + i]! += v;
  }
  const z0 = [...p.subarray(offD, offD + nd), ...p.subarray(offX, offX + nx)];
  const names = [...model.decisions.map((d) => d.symbol), ...model.unknowns.map((u) => u.symbol)];
  const row = (du: ArrayLike<number>, dx: ArrayLike<number>, k: number): number[] => [
    ...Array.from({ length: nd }, (_, j) => du[k * nd + j]!),
    ...Array.from({ length: nx }, (_, i) => dx[k * nx + i]!),
  ];
  const dot = (a: readonly number[]) => a.reduce((s, v, j) => s + v * z0[j]!, 0);
  const coeffs = (a: readonly number[]): Record<string, number> => {
    const out: Record<string, number> = {};
    a.forEach((v, j) => {
      if (v !== 0) out[names[j]!] = v;
    });
    return out;
  };
  const fu = model.objectiveGradient(bp, "decisions");
  const fx = model.objectiveGradient(bp, "unknowns");
  const cost = row(fu, fx, 0);
  const mod = options.modifiers;
  let constant = model.evalObjective(bp) - dot(cost);
  if (mod) {
    for (let j = 0; j < nd; j++) {
      cost[j]! += mod.objectiveLambda[j]!;
      constant -= mod.objectiveLambda[j]! * (mod.inputs[j] ?? 0);
    }
  }
  const penaltySign = model.objective.sense === "max" ? -1 : 1;
  const variables: LpVariable[] = [
    ...b.bounds.map((d, j) => ({ name: d.symbol, lb: d.lower, ub: d.upper, cost: cost[j]! })),
    ...model.unknowns.map((u, i) => ({ name: u.symbol, lb: u.min, ub: u.max, cost: cost[nd + i]! })),
  ];
  const constraints: LpConstraint[] = [];
  const h0 = model.residuals(p);
  const hu = model.jacobian(p, "decisions");
  const hx = model.jacobian(p, "unknowns");
  model.equations.forEach((e, i) => {
    const a = row(hu, hx, i);
    const rhs = dot(a) - h0[i]!;
    constraints.push({ name: `equation ${e.name}`, coeffs: coeffs(a), lb: rhs, ub: rhs });
  });
  const g0 = model.evalConstraints(bp);
  const gu = model.constraintJacobian(bp, "decisions");
  const gx = model.constraintJacobian(bp, "unknowns");
  model.constraints.forEach((c, k) => {
    const a = row(gu, gx, k);
    let rhs = dot(a) - g0[k]!;
    const m = mod?.constraints?.get(k);
    if (m) {
      for (let j = 0; j < nd; j++) {
        a[j]! += m.lambda[j]!;
        rhs += m.lambda[j]! * (mod?.inputs[j] ?? 0);
      }
      rhs -= m.epsilon;
    }
    const cf = coeffs(a);
    if (c.kind === "soft") {
      const pen = penaltySign * (c.penalty ?? 0);
      const plus = c.sense === "eq" ? `slack+ ${c.name}` : `slack ${c.name}`;
      variables.push({ name: plus, lb: 0, ub: Number.POSITIVE_INFINITY, cost: pen });
      cf[plus] = -1;
      if (c.sense === "eq") {
        const minus = `slack- ${c.name}`;
        variables.push({ name: minus, lb: 0, ub: Number.POSITIVE_INFINITY, cost: pen });
        cf[minus] = 1;
      }
    }
    constraints.push(
      c.sense === "eq"
        ? { name: c.name, coeffs: cf, lb: rhs, ub: rhs }
        : { name: c.name, coeffs: cf, ub: rhs },
    );
  });
  const lp: LpProblem = { sense: model.objective.sense, variables, constraints };
  const structureKey = JSON.stringify([
    variables.map((v) => v.name),
    constraints.map((c) => [c.name, Object.entries(c.coeffs)]),
  ]);
  return {
    ok: true,
    lp,
    constant,
    bounds: b.bounds,
    decisionNames: b.bounds.map((d) => d.symbol),
    constraintRows: model.constraints.map((c) => c.name),
    structureKey,
  };
}
