/**
 * The optimize stage's pure core: one cycle from (site model, parameters, prices, disturbances,
 * current operating point, mismatch state) to a proposal or to the reasons why there is none.
 * No bus, no wall clock (solve time comes from an injected timer); the HiGHS model kept between
 * cycles is an explicit cache object owned by the caller.
 *
 * Path choice: a site whose model is linear (detected by ./problem.ts isLinearSite, or forced by the
 * `lp` option) is solved as an LP — HiGHS by default, javascript-lp-solver for tiny LPs (HiGHS costs
 * about 3 ms per fresh solve whatever the size; LIBRARY-NOTES.md) — with the HiGHS model kept between
 * cycles and re-solved warm when only costs and limits changed. Every other site goes to SQP.
 */
import type { Highs } from "highs";
import type { Proposal } from "../kit/generated/messages.js";
import type { SiteModel } from "../model/index.js";
import { type MathNode, parseExpression } from "../model/index.js";
import type { OptimizeErrorCode } from "./errors.js";
import { createHighsLp, type HighsLp, type LpProblem, type LpResult, solveLpHighs, solveLpJs } from "./lp.js";
import {
  type Excitation,
  initialMismatchState,
  type Measured,
  type MismatchMethod,
  type MismatchOptions,
  type MismatchReport,
  type MismatchState,
  modifiedValue,
  modifiersForNlp,
  planExcitation,
  updateMismatch,
} from "./mismatch.js";
import { modifyProblem } from "./modifier.js";
import {
  boundName,
  buildSiteLp,
  buildSiteProblem,
  type DecisionBounds,
  type Evaluation,
  isLinearSite,
  type LinearModifiers,
  type OperatingContext,
} from "./problem.js";
import { type ConstraintBlock, type NlpProblem, type SqpOptions, type SqpResult, solveNlp } from "./sqp.js";

/** Options of one optimization (the service config's `optimize` section maps onto these). */
export interface StageOptions {
  /** NLP formulation; default "sequential". */
  formulation?: "sequential" | "simultaneous";
  /** Tighten decision bounds by maxMovePerCycle around the current point. Default true. */
  moveLimits?: boolean;
  /** "auto" (default): LP when the model is linear; "always": LP (refused if it is not linear); "never": SQP. */
  lp?: "auto" | "always" | "never";
  /** LP solver: "auto" (default) javascript-lp-solver up to `tinyLpMaxVariables` variables, HiGHS above. */
  lpSolver?: "auto" | "highs" | "javascript-lp-solver";
  /** Largest LP (variables) that "auto" gives to javascript-lp-solver. Default 8. */
  tinyLpMaxVariables?: number;
  /** SQP options (iterations, tolerances); defaults of ./sqp.ts. */
  sqp?: SqpOptions;
  /** Mismatch correction: filter gain (default 0.5) and conditioning limit (default 100). */
  mismatch?: MismatchOptions;
}

/** A HiGHS model kept between cycles for warm re-solves. Dispose with {@link disposeLpCache}. */
export interface LpCache {
  key?: string;
  lp?: HighsLp;
}

/** Releases the kept HiGHS model (WebAssembly memory is not garbage-collected). */
export function disposeLpCache(cache: LpCache): void {
  cache.lp?.dispose();
  delete cache.lp;
  delete cache.key;
}

/** Everything one cycle's optimization needs. */
export interface StageInput {
  model: SiteModel;
  /** Parameters, prices, disturbances and current decisions, by symbol, model units (no bias: the stage adds it). */
  context: OperatingContext;
  /** Mismatch state from the previous cycle; default: a fresh state with method "none". */
  mismatch?: MismatchState;
  /** Measured values by model symbol (snapshot modelMean), for the mismatch update; default none (no update). */
  measured?: Measured;
  /** The cycle, so that a re-delivered cycle replaces its own operating point. */
  cycleid?: string;
  /** HiGHS, loaded by the caller (`loadHighs()`); without it LPs go to javascript-lp-solver. */
  highs?: Highs;
  /** Kept HiGHS model (mutated). */
  lpCache?: LpCache;
  /** Timer for the solve time, ms (e.g. performance.now); default: solve time 0. */
  timerMs?: () => number;
}

/** A reason in the cycle stream's shape. */
export interface StageReason {
  code: string;
  message: string;
}

/** The cycle's outcome: a proposal, or why there is none. The mismatch state is returned either way. */
export type StageResult =
  | { status: "proposed"; proposal: Proposal; mismatch: MismatchState; report: MismatchReport }
  | {
      status: "aborted";
      reasons: StageReason[];
      /** Constraints and bounds that conflict, by name (infeasible problems). */
      conflicting: string[];
      mismatch: MismatchState;
      report: MismatchReport | undefined;
    };

const ACTIVE_TOL = 1e-6;

/** The unit of a constraint's g, read from its left-hand side when that is a symbol or a sum of them. */
export function constraintUnit(model: SiteModel, expression: string): string | undefined {
  let node: MathNode;
  try {
    node = parseExpression(expression);
  } catch {
    return undefined;
  }
  const walk = (n: MathNode): string | undefined => {
    const any = n as MathNode & {
      type: string;
      name?: string;
      fn?: unknown;
      op?: string;
      args?: MathNode[];
      content?: MathNode;
    };
    if (any.type === "SymbolNode" && any.name) return model.layout.units.get(any.name);
    if (any.type === "ParenthesisNode" && any.content) return walk(any.content);
    if (any.type === "OperatorNode" && any.args?.[0]) {
      if (["+", "-", "<=", ">=", "==", "<", ">"].includes(any.op ?? "")) {
        return walk(any.args[0]) ?? (any.args[1] ? walk(any.args[1]) : undefined);
      }
    }
    return undefined;
  };
  return walk(node);
}

const per = (objUnit: string, unit: string | undefined) => `${objUnit} per ${unit ?? "unit of g"}`;
const finite = (v: number) => (Number.isFinite(v) ? v : 0);
const reasonOf = (err: unknown): StageReason => {
  const e = err as { code?: string; message?: string };
  return {
    code: typeof e?.code === "string" && /^[A-Z0-9_]+$/.test(e.code) ? e.code : "OPTIMIZE_EVALUATION_FAILED",
    message: (e?.message ?? String(err)).slice(0, 1000),
  };
};

/**
 * One cycle: mismatch update at the current point, then the optimization (LP or SQP), then the
 * proposal with predictions, constraints, active set, shadow prices and the solver's account.
 * Never throws for bad data or a failed solve: the result says "aborted" with coded reasons.
 */
export function runOptimization(input: StageInput, options: StageOptions = {}): StageResult {
  const { model } = input;
  let mismatch = input.mismatch ?? initialMismatchState(model, "none");
  let report: MismatchReport | undefined;
  const timer = input.timerMs ?? (() => 0);
  if (model.decisions.length === 0) {
    return aborted(
      [{ code: "OPTIMIZE_INVALID_PROBLEM", message: `site model ${model.file} declares no decisions` }],
      [],
    );
  }
  try {
    // 1. mismatch update at the current point (the model without any correction)
    if (mismatch.method !== "none" && input.measured) {
      const plain = buildSiteProblem(model, { ...input.context, unknownBias: {} }, { moveLimits: false });
      if (plain.ok) {
        const u = plain.bounds.map((d) => d.current);
        const up = updateMismatch(mismatch, model, plain, u, input.measured, input.cycleid, options.mismatch);
        mismatch = up.state;
        report = up.report;
      }
    }
    report ??= {
      method: mismatch.method,
      gain: options.mismatch?.gain ?? 0.5,
      updated: false,
      note:
        mismatch.method === "none"
          ? "no mismatch correction"
          : "no measurements given: previous correction kept",
    };
    const ctx: OperatingContext = {
      ...input.context,
      unknownBias: mismatch.method === "bias" ? mismatch.bias : {},
    };
    const lpMode = options.lp ?? "auto";
    const linear = lpMode !== "never" && isLinearSite(model, ctx);
    if (lpMode === "always" && !linear) {
      return aborted(
        [
          {
            code: "OPTIMIZE_INVALID_PROBLEM",
            message: "lp: always, but the site model is not linear in its decisions and unknowns",
          },
        ],
        [],
      );
    }
    return linear
      ? solveAsLp(input, ctx, mismatch, report, options, timer)
      : solveAsNlp(input, ctx, mismatch, report, options, timer);
  } catch (err) {
    return aborted([reasonOf(err)], []);
  }

  function aborted(reasons: StageReason[], conflicting: string[]): StageResult {
    return { status: "aborted", reasons, conflicting, mismatch, report };
  }
}

interface Outcome {
  u: Float64Array;
  /** Shadow price (relaxation convention) per model constraint. */
  constraintPrices: Float64Array;
  /** Active decision bounds: side and shadow price (relaxation convention). */
  boundPrices: Array<{ j: number; side: "lower" | "upper"; price: number }>;
  /** Active unknown bounds (simultaneous). */
  unknownBounds: Array<{ symbol: string; side: "lower" | "upper"; value: number; price: number }>;
  /** Model constraints the solver reports active. */
  activeConstraints: Set<number>;
  kkt: Proposal["kkt"];
  solver: Proposal["solver"];
  formulation: Proposal["formulation"];
}

function solveAsNlp(
  input: StageInput,
  ctx: OperatingContext,
  initialMismatch: MismatchState,
  initialReport: MismatchReport,
  options: StageOptions,
  timer: () => number,
): StageResult {
  const { model } = input;
  let report = initialReport;
  let mismatch = initialMismatch;
  const built = buildSiteProblem(model, ctx, {
    formulation: options.formulation ?? "sequential",
    moveLimits: options.moveLimits ?? true,
  });
  if (!built.ok) {
    return {
      status: "aborted",
      reasons: [{ code: "OPTIMIZE_INFEASIBLE", message: built.message }],
      conflicting: built.conflicting,
      mismatch,
      report,
    };
  }
  const start = built.evaluate(built.current);
  if (!start.ok) {
    return {
      status: "aborted",
      reasons: [
        { code: "OPTIMIZE_EVALUATION_FAILED", message: `at the current operating point: ${start.reason}` },
      ],
      conflicting: [],
      mismatch,
      report,
    };
  }
  let nlp = built.nlp;
  if (mismatch.method === "modifier") {
    const m = modifiersForNlp(model, mismatch);
    nlp = modifyProblem(nlp, m.state, {
      inputIndices: built.decisionIndices,
      constraintNames: m.constraintNames,
    });
  }
  const t0 = timer();
  let r = solveNlp(nlp, options.sqp);
  const nd = model.decisions.length;
  if (r.status === "optimal" && mismatch.method === "modifier") {
    const excited = excite(model, nlp, built.decisionIndices, mismatch, r, options);
    const { excitedTo: _previous, ...rest } = mismatch;
    mismatch = rest;
    if (excited.result) {
      r = excited.result;
      nlp = excited.nlp;
      mismatch = { ...mismatch, excitedTo: built.decisionIndices.map((i) => r.x[i]!) };
    }
    if (excited.excitation) report = { ...report, excitation: excited.excitation };
    else if (excited.note) report = { ...report, note: `${report.note}; ${excited.note}` };
  }
  const solveTimeMs = Math.max(0, timer() - t0);
  // Names of the SQP's own bound entries ("x ≥ lb") mapped to this project's bound names.
  const sqpBoundName = (j: number, side: "lower" | "upper") =>
    `${built.variableNames[j]} ${side === "lower" ? "≥" : "≤"} ${side === "lower" ? nlp.lower![j] : nlp.upper![j]}`;
  const niceBound = (j: number, side: "lower" | "upper"): string | undefined => {
    if (j < nd) {
      const d = built.bounds[j]!;
      const dec = model.decisions[j]!;
      const from = side === "lower" ? d.lowerFrom : d.upperFrom;
      return boundName(
        d.symbol,
        side,
        side === "lower" ? d.lower : d.upper,
        from,
        d.current,
        dec.maxMovePerCycle,
      );
    }
    const name = built.variableNames[j]!;
    if (name.startsWith("slack")) return undefined;
    return `${name} ${side === "lower" ? "≥" : "≤"} ${side === "lower" ? nlp.lower![j] : nlp.upper![j]} (model bound)`;
  };
  if (r.status !== "optimal") {
    const map = new Map<string, string | undefined>();
    for (let j = 0; j < built.variableNames.length; j++) {
      map.set(sqpBoundName(j, "lower"), niceBound(j, "lower"));
      map.set(sqpBoundName(j, "upper"), niceBound(j, "upper"));
    }
    const conflicting = r.conflicting.flatMap((c) => {
      if (!map.has(c)) return [c];
      const nice = map.get(c);
      return nice ? [nice] : [];
    });
    return {
      status: "aborted",
      reasons: [
        { code: r.code ?? "OPTIMIZE_SOLVER_FAILED", message: `SQP ${r.status}: ${r.message}`.slice(0, 1000) },
      ],
      conflicting,
      mismatch,
      report,
    };
  }
  const constraintPrices = new Float64Array(model.constraints.length);
  const activeConstraints = new Set<number>();
  built.inequalityRows.forEach((row, i) => {
    if (row.constraint !== undefined) constraintPrices[row.constraint] = -r.inequalityMultipliers[i]!;
  });
  built.equalityRows.forEach((row, i) => {
    if (row.constraint !== undefined) constraintPrices[row.constraint] = r.equalityMultipliers[i]!;
  });
  const boundPrices: Outcome["boundPrices"] = [];
  const unknownBounds: Outcome["unknownBounds"] = [];
  for (const a of r.active) {
    if (a.kind === "inequality") {
      const k = built.inequalityRows[a.index]?.constraint;
      if (k !== undefined) activeConstraints.add(k);
    } else if (a.kind === "equality") {
      const k = built.equalityRows[a.index]?.constraint;
      if (k !== undefined) activeConstraints.add(k);
    } else {
      const side = a.kind === "lower-bound" ? "lower" : "upper";
      // ∂f*/∂lower is reported by SQP; relaxing a lower bound means lowering it.
      const price = side === "lower" ? -a.shadowPrice : a.shadowPrice;
      const name = built.variableNames[a.index]!;
      if (a.index < nd) boundPrices.push({ j: a.index, side, price });
      else if (!name.startsWith("slack")) {
        const value = side === "lower" ? nlp.lower![a.index]! : nlp.upper![a.index]!;
        unknownBounds.push({ symbol: name, side, value, price });
      }
    }
  }
  return finishProposal(input, built.evaluate, built.bounds, mismatch, report, {
    u: r.x.slice(0, nd),
    constraintPrices,
    boundPrices,
    unknownBounds,
    activeConstraints,
    kkt: {
      stationarity: finite(r.kkt.stationarity),
      complementarity: finite(r.kkt.complementarity),
      feasibility: finite(r.kkt.feasibility),
    },
    solver: {
      name: "sqp",
      status: r.status,
      message: r.message.slice(0, 500),
      iterations: r.iterations,
      solveTimeMs,
    },
    formulation: built.formulation,
  });
}

/**
 * Replaces the corrected model's optimum by an excitation move when planExcitation asks for one: the
 * same problem with the step along ±v held to [1, 1.1]·step (vᵀ·(u − u_k) / scale), solved for
 * both signs; the sign with the better corrected objective is kept (the cheaper of the
 * two informative moves). When neither sign is feasible the optimum stands and the note says so.
 * A probe (the optimum itself, made for the gradient it will give) is only reported.
 */
function excite(
  model: SiteModel,
  nlp: NlpProblem,
  decisionIndices: readonly number[],
  mismatch: MismatchState,
  optimum: SqpResult,
  options: StageOptions,
): { result?: SqpResult; nlp: NlpProblem; excitation?: Excitation; note?: string } {
  const u = decisionIndices.map((i) => optimum.x[i]!);
  const plan = planExcitation(model, mismatch, u, options.mismatch);
  if (!plan.excite)
    return plan.probe ? { nlp, excitation: { reason: plan.reason, modelOptimal: u } } : { nlp };
  const n = nlp.x0.length;
  const along = (x: Float64Array) => {
    let s = 0;
    decisionIndices.forEach((i, j) => {
      s += (plan.direction[j]! * (x[i]! - plan.anchor[j]!)) / plan.scale[j]!;
    });
    return s;
  };
  let best: { result: SqpResult; nlp: NlpProblem; value: number } | undefined;
  for (const sign of [1, -1]) {
    const jac = new Float64Array(n);
    decisionIndices.forEach((i, j) => {
      jac[i] = (sign * plan.direction[j]!) / plan.scale[j]!;
    });
    // A narrow band rather than an equality (the SQP's reported KKT residual is wrong for equality
    // rows, and validate checks it): between one and 1.1 steps, so that the optimizer cannot turn the
    // probe into a full move-limit step where the corrected model likes that direction.
    const minus = Float64Array.from(jac, (v) => -v);
    const row: ConstraintBlock = {
      names: ["excitation step ≥", "excitation step ≤"],
      values: (x) => [sign * along(x) - plan.step, 1.1 * plan.step - sign * along(x)],
      jacobian: () => [jac, minus],
    };
    const ineq = nlp.inequalities;
    const withStep: NlpProblem = {
      ...nlp,
      inequalities: ineq
        ? {
            names: [...ineq.names, ...row.names],
            values: (x) => [...Array.from(ineq.values(x)), ...Array.from(row.values(x))],
            jacobian: (x) => [...ineq.jacobian(x), ...row.jacobian(x)],
          }
        : row,
    };
    const result = solveNlp(withStep, options.sqp);
    if (result.status !== "optimal") continue;
    const value = withStep.objective(result.x);
    const better = !best || (nlp.sense === "max" ? value > best.value : value < best.value);
    if (better) best = { result, nlp: withStep, value };
  }
  if (!best)
    return {
      nlp,
      note: `excitation needed but neither direction is feasible within the bounds and move limits (${plan.reason})`,
    };
  return {
    result: best.result,
    nlp: best.nlp,
    excitation: {
      reason: plan.reason,
      step: plan.step,
      direction: Array.from(plan.direction),
      modelOptimal: u,
    },
  };
}

function solveAsLp(
  input: StageInput,
  ctx: OperatingContext,
  mismatch: MismatchState,
  report: MismatchReport,
  options: StageOptions,
  timer: () => number,
): StageResult {
  const { model } = input;
  let modifiers: LinearModifiers | undefined;
  if (mismatch.method === "modifier") {
    const m = mismatch.modifiers;
    const nd = model.decisions.length;
    const inputs = m.inputs.length === nd ? m.inputs : new Float64Array(nd);
    modifiers = {
      inputs,
      objectiveLambda: m.objectiveLambda,
      constraints: new Map(
        mismatch.constraintIndices.map((k, i) => [
          k,
          { epsilon: m.constraintEpsilon[i]!, lambda: m.constraintLambda[i]! },
        ]),
      ),
    };
  }
  const built = buildSiteLp(model, ctx, {
    moveLimits: options.moveLimits ?? true,
    ...(modifiers ? { modifiers } : {}),
  });
  if (!built.ok) {
    return {
      status: "aborted",
      reasons: [{ code: "OPTIMIZE_INFEASIBLE", message: built.message }],
      conflicting: built.conflicting,
      mismatch,
      report,
    };
  }
  const lp = built.lp;
  const choice = options.lpSolver ?? "auto";
  const useJs =
    !input.highs ||
    choice === "javascript-lp-solver" ||
    (choice === "auto" && lp.variables.length <= (options.tinyLpMaxVariables ?? 8));
  const t0 = timer();
  let warmStart = false;
  let result: LpResult;
  if (useJs) result = solveLpJs(lp);
  else {
    const highs = input.highs as Highs;
    const cache = input.lpCache;
    if (!cache) result = solveLpHighs(highs, lp);
    else {
      if (cache.lp && cache.key === built.structureKey) {
        // Same structure: only costs and limits can differ; HiGHS keeps its basis (warm start).
        cache.lp.setCosts(Object.fromEntries(lp.variables.map((v) => [v.name, v.cost])));
        for (const v of lp.variables)
          cache.lp.setVariableBounds(v.name, v.lb ?? 0, v.ub ?? Number.POSITIVE_INFINITY);
        for (const c of lp.constraints)
          cache.lp.setConstraintLimits(
            c.name,
            c.lb ?? Number.NEGATIVE_INFINITY,
            c.ub ?? Number.POSITIVE_INFINITY,
          );
        warmStart = true;
      } else {
        disposeLpCache(cache);
        cache.lp = createHighsLp(highs, lp);
        cache.key = built.structureKey;
      }
      result = cache.lp!.solve();
    }
  }
  const solveTimeMs = Math.max(0, timer() - t0);
  if (result.status !== "optimal") {
    const conflicting =
      result.status === "infeasible" ? lpConflicts(lp, built.bounds, model, input.highs) : [];
    return {
      status: "aborted",
      reasons: [
        {
          code: result.code ?? "OPTIMIZE_SOLVER_FAILED",
          message:
            `${result.solver} ${result.status}: ${result.message}${conflicting.length ? `; conflicting: ${conflicting.join(", ")}` : ""}`.slice(
              0,
              1000,
            ),
        },
      ],
      conflicting,
      mismatch,
      report,
    };
  }
  const nd = model.decisions.length;
  const u = Float64Array.from(built.bounds, (d) => result.values[d.symbol] ?? Number.NaN);
  const constraintPrices = Float64Array.from(model.constraints, (c) => result.duals[c.name] ?? 0);
  const activeConstraints = new Set<number>();
  const boundPrices: Outcome["boundPrices"] = [];
  for (let j = 0; j < nd; j++) {
    const d = built.bounds[j]!;
    const x = u[j]!;
    const rc = result.reducedCosts[d.symbol] ?? 0;
    const tol = ACTIVE_TOL * (1 + Math.abs(x));
    // Reduced cost = ∂obj*/∂(binding bound); relaxing a lower bound lowers it.
    if (x - d.lower <= tol) boundPrices.push({ j, side: "lower", price: -rc });
    else if (d.upper - x <= tol) boundPrices.push({ j, side: "upper", price: rc });
  }
  const unknownBounds: Outcome["unknownBounds"] = [];
  model.unknowns.forEach((x, i) => {
    const v = result.values[x.symbol] ?? 0;
    const rc = result.reducedCosts[x.symbol] ?? 0;
    const tol = ACTIVE_TOL * (1 + Math.abs(v));
    if (Number.isFinite(x.min) && v - x.min <= tol)
      unknownBounds.push({ symbol: x.symbol, side: "lower", value: x.min, price: -rc });
    else if (Number.isFinite(x.max) && x.max - v <= tol)
      unknownBounds.push({ symbol: x.symbol, side: "upper", value: x.max, price: rc });
    void i;
  });
  const kkt = lpKkt(lp, result);
  model.constraints.forEach((c, k) => {
    const row = lp.constraints.find((r) => r.name === c.name);
    if (!row) return;
    const act = Object.entries(row.coeffs).reduce((s, [v, a]) => s + a * (result.values[v] ?? 0), 0);
    const lim = row.ub ?? row.lb ?? 0;
    if (
      c.sense === "eq" ||
      Math.abs(act - lim) <= ACTIVE_TOL * (1 + Math.abs(lim)) ||
      constraintPrices[k] !== 0
    )
      activeConstraints.add(k);
  });
  // The predictions come from the model itself (a linear model: one Newton step), with the bias.
  const sequential = buildSiteProblem(model, ctx, { moveLimits: false });
  if (!sequential.ok) throw new Error(sequential.message);
  return finishProposal(input, sequential.evaluate, built.bounds, mismatch, report, {
    u,
    constraintPrices,
    boundPrices,
    unknownBounds,
    activeConstraints,
    kkt,
    solver: {
      name: result.solver,
      status: result.status,
      message: result.message.slice(0, 500),
      solveTimeMs,
      ...(result.solver === "highs" ? { warmStart } : {}),
    },
    formulation: "lp",
  });
}

/** KKT residual of an LP answer from its primal values, duals and reduced costs. */
function lpKkt(lp: LpProblem, r: LpResult): Proposal["kkt"] {
  let stationarity = 0;
  let complementarity = 0;
  let feasibility = 0;
  for (const v of lp.variables) {
    let g = v.cost - (r.reducedCosts[v.name] ?? 0);
    for (const c of lp.constraints) g -= (c.coeffs[v.name] ?? 0) * (r.duals[c.name] ?? 0);
    stationarity = Math.max(stationarity, Math.abs(g));
    const x = r.values[v.name] ?? 0;
    const lb = v.lb ?? 0;
    const ub = v.ub ?? Number.POSITIVE_INFINITY;
    feasibility = Math.max(feasibility, lb - x, x - ub);
    const dist = Math.min(Math.abs(x - lb), Math.abs(ub - x));
    if (Number.isFinite(dist))
      complementarity = Math.max(complementarity, Math.abs((r.reducedCosts[v.name] ?? 0) * dist));
  }
  for (const c of lp.constraints) {
    const act = Object.entries(c.coeffs).reduce((s, [v, a]) => s + a * (r.values[v] ?? 0), 0);
    const lb = c.lb ?? Number.NEGATIVE_INFINITY;
    const ub = c.ub ?? Number.POSITIVE_INFINITY;
    feasibility = Math.max(feasibility, lb - act, act - ub);
    const dist = Math.min(Math.abs(act - lb), Math.abs(ub - act));
    if (Number.isFinite(dist))
      complementarity = Math.max(complementarity, Math.abs((r.duals[c.name] ?? 0) * dist));
  }
  return {
    stationarity: finite(stationarity),
    complementarity: finite(complementarity),
    feasibility: Math.max(0, finite(feasibility)),
  };
}

/**
 * Names the rows and bounds of an infeasible LP that conflict: a phase-1 LP minimizes the total
 * elastic violation of the hard rows (equations and hard constraints); rows left violated or with a
 * non-zero dual there, and decision bounds with a non-zero reduced cost, are the conflict.
 */
function lpConflicts(
  lp: LpProblem,
  bounds: DecisionBounds[],
  model: SiteModel,
  highs: Highs | undefined,
): string[] {
  const variables = lp.variables.map((v) => ({ ...v, cost: 0 }));
  const soft = new Set(model.constraints.filter((c) => c.kind === "soft").map((c) => c.name));
  const constraints = lp.constraints.map((c) => {
    if (soft.has(c.name)) return c;
    const coeffs: Record<string, number> = { ...c.coeffs };
    const up = `elastic+ ${c.name}`;
    const dn = `elastic- ${c.name}`;
    variables.push({ name: up, lb: 0, ub: Number.POSITIVE_INFINITY, cost: 1 });
    variables.push({ name: dn, lb: 0, ub: Number.POSITIVE_INFINITY, cost: 1 });
    coeffs[up] = -1;
    coeffs[dn] = 1;
    return { ...c, coeffs };
  });
  const phase1: LpProblem = { sense: "min", variables, constraints };
  const r = highs ? solveLpHighs(highs, phase1) : solveLpJs(phase1);
  if (r.status !== "optimal") return [];
  const tol = 1e-7;
  const names: string[] = [];
  for (const c of lp.constraints) {
    if (soft.has(c.name)) continue;
    const viol = (r.values[`elastic+ ${c.name}`] ?? 0) + (r.values[`elastic- ${c.name}`] ?? 0);
    if (viol > tol || Math.abs(r.duals[c.name] ?? 0) > tol) names.push(c.name);
  }
  bounds.forEach((d, j) => {
    const rc = r.reducedCosts[d.symbol] ?? 0;
    if (Math.abs(rc) <= tol) return;
    const x = r.values[d.symbol] ?? 0;
    const side = Math.abs(x - d.lower) <= Math.abs(d.upper - x) ? "lower" : "upper";
    names.push(
      boundName(
        d.symbol,
        side,
        side === "lower" ? d.lower : d.upper,
        side === "lower" ? d.lowerFrom : d.upperFrom,
        d.current,
        model.decisions[j]?.maxMovePerCycle,
      ),
    );
  });
  return names;
}

function finishProposal(
  input: StageInput,
  evaluate: (u: ArrayLike<number>) => Evaluation,
  bounds: DecisionBounds[],
  mismatch: MismatchState,
  report: MismatchReport,
  o: Outcome,
): StageResult {
  const { model } = input;
  const objUnit = model.objective.unit;
  const current = Float64Array.from(bounds, (d) => d.current);
  const atP = evaluate(o.u);
  const atC = evaluate(current);
  if (!atP.ok || !atC.ok) {
    const why = !atP.ok
      ? `at the proposal: ${atP.reason}`
      : !atC.ok
        ? `at the current point: ${atC.reason}`
        : "";
    return {
      status: "aborted",
      reasons: [{ code: "OPTIMIZE_EVALUATION_FAILED", message: `the model could not be evaluated ${why}` }],
      conflicting: [],
      mismatch,
      report,
    };
  }
  const m = mismatch.method === "modifier" ? mismatch.modifiers : undefined;
  const corrected = (e: Evaluation & { ok: true }, u: ArrayLike<number>) => {
    if (!m) return { objective: e.objective, constraints: e.constraints };
    const g = Float64Array.from(e.constraints);
    mismatch.constraintIndices.forEach((k, i) => {
      g[k] = modifiedValue(g[k]!, m.constraintEpsilon[i]!, m.constraintLambda[i]!, m.inputs, u);
    });
    return {
      objective: modifiedValue(e.objective, m.objectiveEpsilon, m.objectiveLambda, m.inputs, u),
      constraints: g,
    };
  };
  const p = corrected(atP, o.u);
  const c = corrected(atC, current);
  let softViolated = false;
  const constraints: Proposal["constraints"] = model.constraints.map((con, k) => {
    const unit = constraintUnit(model, con.expression);
    const g = p.constraints[k]!;
    const entry: Proposal["constraints"][number] = {
      name: con.name,
      kind: con.kind,
      sense: con.sense,
      value: finite(g),
      active: o.activeConstraints.has(k),
      shadowPrice: finite(o.constraintPrices[k]!),
      shadowPriceUnit: per(objUnit, unit),
    };
    if (unit !== undefined) entry.unit = unit;
    if (con.kind === "soft") {
      const violation = con.sense === "eq" ? Math.abs(g) : Math.max(0, g);
      entry.violation = finite(violation);
      if (violation > 1e-6 * (1 + Math.abs(g))) softViolated = true;
    }
    return entry;
  });
  const active: Proposal["active"] = [];
  model.constraints.forEach((con, k) => {
    if (o.activeConstraints.has(k))
      active.push({
        name: con.name,
        kind: "constraint",
        shadowPrice: finite(o.constraintPrices[k]!),
        unit: constraints[k]!.shadowPriceUnit,
      });
  });
  for (const b of o.boundPrices) {
    const d = bounds[b.j]!;
    const from = b.side === "lower" ? d.lowerFrom : d.upperFrom;
    active.push({
      name: boundName(
        d.symbol,
        b.side,
        b.side === "lower" ? d.lower : d.upper,
        from,
        d.current,
        model.decisions[b.j]?.maxMovePerCycle,
      ),
      kind: from === "bound" ? "bound" : "move-limit",
      shadowPrice: finite(b.price),
      unit: per(objUnit, d.unit),
    });
  }
  for (const b of o.unknownBounds) {
    active.push({
      name: `${b.symbol} ${b.side === "lower" ? "≥" : "≤"} ${b.value} (model bound)`,
      kind: "unknown-bound",
      shadowPrice: finite(b.price),
      unit: per(objUnit, model.layout.units.get(b.symbol)),
    });
  }
  const point = (vals: ArrayLike<number>) =>
    model.decisions.map((d, j) => ({ decision: d.symbol, value: finite(vals[j] ?? 0) }));
  const mm: Proposal["mismatch"] = {
    method: report.method,
    gain: report.gain,
    updated: report.updated,
    note: report.note.slice(0, 500),
  };
  if (report.plantObjective !== undefined && Number.isFinite(report.plantObjective))
    mm.plantObjective = report.plantObjective;
  if (report.modelObjective !== undefined && Number.isFinite(report.modelObjective))
    mm.modelObjective = report.modelObjective;
  if (report.conditionNumber !== undefined && Number.isFinite(report.conditionNumber))
    mm.conditionNumber = report.conditionNumber;
  if (report.unmeasured) mm.unmeasured = report.unmeasured;
  if (report.excitation) {
    const e = report.excitation;
    mm.excitation = { reason: e.reason.slice(0, 1000), modelOptimal: point(e.modelOptimal) };
    if (e.step !== undefined) mm.excitation.step = e.step;
    if (e.direction) mm.excitation.direction = point(e.direction);
  }
  if (mismatch.method === "bias") {
    mm.bias = Object.entries(mismatch.bias).map(([symbol, value]) => ({
      symbol,
      unit: model.layout.units.get(symbol) ?? "1",
      value: finite(value),
    }));
  }
  if (m) {
    mm.modifiers = {
      point: m.inputs.length === model.decisions.length ? point(m.inputs) : [],
      objectiveEpsilon: finite(m.objectiveEpsilon),
      objectiveLambda: point(m.objectiveLambda),
      constraints: mismatch.constraintIndices.map((k, i) => ({
        name: model.constraints[k]!.name,
        epsilon: finite(m.constraintEpsilon[i]!),
        lambda: point(m.constraintLambda[i]!),
      })),
      iteration: m.iteration,
    };
  }
  const layoutBlock = (block: "parameters" | "prices") =>
    model.layout.blocks[block].symbols.map((symbol, i) => ({
      symbol,
      value: finite(atP.point[model.layout.blocks[block].offset + i]!),
      unit: model.layout.units.get(symbol) ?? "1",
    }));
  const proposal: Proposal = {
    status: softViolated ? "soft-violated" : "optimal",
    formulation: o.formulation,
    setpoints: bounds.map((d, j) => ({
      decision: d.symbol,
      tag: d.setpointTag,
      unit: d.unit,
      current: d.current,
      proposed: o.u[j]!,
      lower: d.lower,
      upper: d.upper,
      lowerFrom: d.lowerFrom,
      upperFrom: d.upperFrom,
    })) as Proposal["setpoints"],
    objective: {
      sense: model.objective.sense,
      unit: objUnit,
      current: c.objective,
      proposed: p.objective,
      change: p.objective - c.objective,
    },
    constraints,
    active,
    kkt: o.kkt,
    solver: o.solver,
    mismatch: mm,
    parameters: layoutBlock("parameters"),
    prices: layoutBlock("prices"),
  };
  for (const v of [proposal.objective.current, proposal.objective.proposed, ...o.u]) {
    if (!Number.isFinite(v)) {
      return {
        status: "aborted",
        reasons: [{ code: "OPTIMIZE_NAN", message: "the solution or its predicted objective is not finite" }],
        conflicting: [],
        mismatch,
        report,
      };
    }
  }
  return { status: "proposed", proposal, mismatch, report };
}

/** Inputs of {@link optimizeOffline}: the what-if of one cycle, by symbol, model units. */
export interface OfflineInput {
  model: SiteModel;
  /** Parameters; missing symbols keep the site model's initial values. */
  parameters?: Readonly<Record<string, number>>;
  /** Prices; missing symbols keep the site model's defaults. */
  prices?: Readonly<Record<string, number>>;
  /** Disturbances; missing symbols keep the site model's defaults. */
  disturbances?: Readonly<Record<string, number>>;
  /** Current decisions (the operating point the move limits are taken around); missing → initial. */
  current?: Readonly<Record<string, number>>;
}

/**
 * The offline what-if: one optimization without bus, history or mismatch correction (the CLI's
 * "what would optimize propose here"). Loads HiGHS only when the site is linear and the LP is not
 * tiny. `options` as for the service (formulation, moveLimits, lp, …).
 */
export async function optimizeOffline(input: OfflineInput, options: StageOptions = {}): Promise<StageResult> {
  const context: OperatingContext = {
    ...(input.parameters ? { parameters: input.parameters } : {}),
    ...(input.prices ? { prices: input.prices } : {}),
    ...(input.disturbances ? { disturbances: input.disturbances } : {}),
    ...(input.current ? { current: input.current } : {}),
  };
  let highs: Highs | undefined;
  if ((options.lp ?? "auto") !== "never" && options.lpSolver !== "javascript-lp-solver") {
    let linear = false;
    try {
      linear = isLinearSite(input.model, context);
    } catch {
      linear = false;
    }
    if (linear) {
      const { loadHighs } = await import("./lp.js");
      highs = await loadHighs();
    }
  }
  return runOptimization({ model: input.model, context, ...(highs ? { highs } : {}) }, options);
}

/** The method names, for config schemas. */
export const MISMATCH_METHODS: readonly MismatchMethod[] = ["none", "bias", "modifier"];

/** Code type re-export for callers that branch on a reason. */
export type { OptimizeErrorCode };
