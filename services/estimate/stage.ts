/**
 * The estimate stage: reconciled snapshots and the site model in, fitted parameters with their
 * statistics and an acceptance verdict out. Pure: no bus, no clock; the service publishes the result.
 *
 * Each measured tag of a model unknown or output gives one residual per snapshot: the model's value at
 * the fitted parameters (steady state solved with that snapshot's reconciled decisions and disturbances)
 * minus the reconciled value. The Jacobian is analytic: the steady-state sensitivity dX/dp = −J_x⁻¹·J_p
 * (implicit function theorem) and, for outputs, the chain rule dy/dp = ∂y/∂x·dX/dp + ∂y/∂p; central
 * differences only when J_x is singular at some snapshot (reported as a warning).
 *
 * Choices:
 * - Weights: by default 1/σ² with σ the tag's measurement sigma (model unit), not the smaller posterior
 *   sd of the reconciled value. Reconciled values are correlated through the balances (their covariance
 *   is singular), so a diagonal weight with the posterior sd would count the same information twice;
 *   the measurement sigma errs on the safe side: wider intervals, a chi-square gate that rejects only
 *   real misfit. `weights: "reconciled"` uses the posterior sd instead.
 * - Inputs (decisions, disturbances) are taken as exact at their reconciled values (no errors in
 *   variables): reconciliation has already pulled them onto the balances.
 * - Eliminated (gross-error) and unmeasured tags give no residual: their value is a function of the
 *   other tags, which already enter.
 * - Parameters are fitted in scaled units q = p / s, s = |value in force| (or the bound range when
 *   that is 0), so that a UA of hundreds and an activity of about one weigh alike in the solver and in
 *   the statistics' condition numbers.
 * - Acceptance is all or nothing: the parameters are estimated jointly, so keeping some of them from a
 *   rejected fit would pair values that were never fitted together.
 */
import type { ModelUpdate, Reconciled } from "../kit/generated/messages.js";
import {
  pointFromInputs,
  type SiteModel,
  type SiteTag,
  solveAtPoint,
  steadyStateSensitivity,
} from "../model/index.js";
import { type AcceptanceRules, checkAcceptance } from "./acceptance.js";
import { finiteDifferenceJacobian, type LmProblem, type LmResult, levenbergMarquardt } from "./lm.js";
import {
  chiSquareQuantile,
  type FitStatistics,
  fitStatistics,
  normalQuantile,
  type StatWarningCode,
} from "./stats.js";

/** Codes of the stage's own reasons and warnings (acceptance reasons use ACCEPTANCE_CODES), with their meaning. */
export const ESTIMATE_STAGE_CODES = {
  ESTIMATE_INPUT_MISSING: "a decision, or a disturbance without a default, has no reconciled value",
  ESTIMATE_TOO_FEW_RESIDUALS: "fewer measured model values than fitted parameters + 1: nothing to fit",
  ESTIMATE_SOLVE_FAILED: "the steady-state model does not solve at the parameters in force for some snapshot",
  ESTIMATE_FIT_FAILED: "the least-squares solver or the statistics failed (the message quotes why)",
  ESTIMATE_AT_BOUND: "a fitted parameter sits on its min or max: the data want it beyond its sanity range",
  ESTIMATE_DEFAULT_USED: "a disturbance had no reconciled value and took its site-model default (warning)",
  ESTIMATE_FINITE_DIFFERENCES:
    "the analytic sensitivity was singular; central differences were used (warning)",
  ESTIMATE_PARAMETER_UNKNOWN: "a configured parameter is not declared by the site model: ignored (warning)",
} as const;

/** Code of a stage reason or warning. */
export type EstimateStageCode = keyof typeof ESTIMATE_STAGE_CODES;

/** A reconciled snapshot with its event id. */
export interface ReconciledSnapshot {
  readonly id: string;
  readonly data: Reconciled;
}

/** Options of {@link estimateParameters}. */
export interface EstimateStageOptions {
  /** Parameters to fit, by symbol; the others stay at their value in force. Default: all. */
  readonly parameters?: readonly string[];
  /** "measurement" (site-model sigma) or "reconciled" (posterior sd) weights. Default "measurement". */
  readonly weights?: "measurement" | "reconciled";
  /** Two-sided confidence level of the intervals. Default 0.95. */
  readonly confidence?: number;
  /** Confidence of the chi-square fit gate. Default 0.99. */
  readonly fitConfidence?: number;
  /** Apply the chi-square fit gate. Default true. */
  readonly checkFit?: boolean;
  /** Largest confidence half-width as a fraction of |value|. Default 0.5. */
  readonly maxRelativeHalfWidth?: number;
  /** Identifiability warnings that reject the estimate. Default ["STAT_RANK_DEFICIENT"]. */
  readonly rejectOnWarnings?: readonly StatWarningCode[];
  /** Levenberg–Marquardt iteration limit. Default 100. */
  readonly maxIterations?: number;
}

/** What {@link estimateParameters} returns: the event data and the parameter set in force after it. */
export interface EstimateOutcome {
  readonly data: ModelUpdate;
  /** Every site-model parameter's value in force after this estimate, by symbol. */
  readonly inForce: Record<string, number>;
}

type Note = { code: string; message: string };

interface Residual {
  readonly snapshot: number;
  readonly tag: SiteTag;
  readonly unit: string;
  readonly kind: "unknowns" | "outputs";
  /** Index of the unknown or output. */
  readonly index: number;
  readonly y: number;
  readonly sd: number;
}

interface Case {
  readonly decisions: Record<string, number>;
  readonly disturbances: Record<string, number>;
  unknowns: Record<string, number> | undefined;
}

const CONVERGED = new Set(["ftol", "xtol", "gtol", "zero-residual"]);

function note(code: EstimateStageCode, message: string): Note {
  return { code, message: message.slice(0, 1000) };
}

/** Mean of the usable values of the tags that measure `symbol`, or undefined when none. */
function meanOf(data: Reconciled, symbol: string): number | undefined {
  const vals = data.tags
    .filter((t) => t.variable === symbol && t.value !== null && t.status !== "unobservable")
    .map((t) => t.value as number);
  return vals.length ? vals.reduce((a, b) => a + b, 0) / vals.length : undefined;
}

/**
 * Fits the site model's adjustable parameters to a window of reconciled snapshots and judges the fit.
 * `inForce` holds the parameter values in force before this estimate (missing ones: the site model's
 * initial). Never throws for data or numerical trouble: the outcome says `failed` or `rejected` and why,
 * and the previous values stay in force.
 */
export function estimateParameters(
  model: SiteModel,
  window: readonly ReconciledSnapshot[],
  inForce: Readonly<Record<string, number>>,
  options: EstimateStageOptions = {},
): EstimateOutcome {
  const warnings: Note[] = [];
  const previous: Record<string, number> = {};
  for (const p of model.parameters) {
    const v = inForce[p.symbol];
    previous[p.symbol] = v !== undefined && Number.isFinite(v) ? v : p.initial;
  }
  const wanted = options.parameters ?? model.parameters.map((p) => p.symbol);
  for (const s of wanted)
    if (!model.parameters.some((p) => p.symbol === s))
      warnings.push(note("ESTIMATE_PARAMETER_UNKNOWN", `parameter ${s} is not in the site model: ignored`));
  const fittedParams = model.parameters.filter((p) => wanted.includes(p.symbol));
  const confidence = options.confidence ?? 0.95;
  const startMs = window.length ? Math.min(...window.map((w) => w.data.startMs)) : null;
  const endMs = window.length ? Math.max(...window.map((w) => w.data.endMs)) : null;
  const base = {
    window: { snapshots: window.length, reconciledIds: window.map((w) => w.id), startMs, endMs },
    correlation: [] as number[][],
    residuals: [] as ModelUpdate["residuals"],
    warnings,
  };
  const heldParameters = (reasonsFor: (s: string) => Note[] = () => []): ModelUpdate["parameters"] =>
    model.parameters.map((p) => ({
      symbol: p.symbol,
      unit: p.unit,
      fitted: false,
      value: null,
      sd: null,
      ciLower: null,
      ciUpper: null,
      previous: previous[p.symbol] as number,
      inForce: previous[p.symbol] as number,
      accepted: false,
      atBound: false,
      reasons: reasonsFor(p.symbol),
    }));
  const failed = (reasons: Note[]): EstimateOutcome => ({
    data: { ...base, status: "failed", accepted: false, parameters: heldParameters(), fit: null, reasons },
    inForce: { ...previous },
  });

  if (fittedParams.length === 0) {
    return {
      data: {
        ...base,
        status: "no-parameters",
        accepted: true,
        parameters: heldParameters(),
        fit: null,
        reasons: [],
      },
      inForce: { ...previous },
    };
  }

  // --- inputs and residuals per snapshot
  const cases: Case[] = [];
  const residuals: Residual[] = [];
  const missing: Note[] = [];
  window.forEach((snap, k) => {
    const decisions: Record<string, number> = {};
    const disturbances: Record<string, number> = {};
    for (const d of model.decisions) {
      const v = meanOf(snap.data, d.symbol);
      if (v === undefined)
        missing.push(
          note("ESTIMATE_INPUT_MISSING", `decision ${d.symbol} has no reconciled value in snapshot ${k}`),
        );
      else decisions[d.symbol] = v;
    }
    for (const d of model.disturbances) {
      const v = meanOf(snap.data, d.symbol);
      if (v !== undefined) disturbances[d.symbol] = v;
      else if (d.default !== undefined) {
        disturbances[d.symbol] = d.default;
        if (d.tag !== undefined)
          warnings.push(
            note(
              "ESTIMATE_DEFAULT_USED",
              `disturbance ${d.symbol} took its default ${d.default} in snapshot ${k}`,
            ),
          );
      } else
        missing.push(
          note(
            "ESTIMATE_INPUT_MISSING",
            `disturbance ${d.symbol} has no reconciled value and no default in snapshot ${k}`,
          ),
        );
    }
    cases.push({ decisions, disturbances, unknowns: undefined });
    for (const t of snap.data.tags) {
      if (
        t.value === null ||
        !(t.status === "reconciled" || t.status === "non-redundant" || t.status === "passed-through")
      )
        continue;
      const tag = model.tagById.get(t.tag);
      if (!tag || (tag.variableKind !== "unknowns" && tag.variableKind !== "outputs")) continue;
      const index =
        tag.variableKind === "unknowns"
          ? model.layout.blocks.unknowns.index.get(tag.variable)
          : model.layout.outputIndex.get(tag.variable);
      const sd = options.weights === "reconciled" ? t.sd : t.sigma;
      if (index === undefined || sd === null || !(sd > 0)) continue;
      residuals.push({ snapshot: k, tag, unit: t.unit, kind: tag.variableKind, index, y: t.value, sd });
    }
  });
  if (missing.length) return failed(missing.slice(0, 200));
  const n = fittedParams.length;
  const m = residuals.length;
  if (m <= n) {
    return failed([
      note(
        "ESTIMATE_TOO_FEW_RESIDUALS",
        `${m} measured model values in ${window.length} snapshot(s) for ${n} fitted parameter(s): need at least ${n + 1}`,
      ),
    ]);
  }

  // --- the least-squares problem in scaled parameters
  const scale = Float64Array.from(fittedParams, (p) => {
    const v = Math.abs(previous[p.symbol] as number);
    return v > 0 ? v : p.max - p.min;
  });
  const lower = Float64Array.from(fittedParams, (p, j) => p.min / (scale[j] as number));
  const upper = Float64Array.from(fittedParams, (p, j) => p.max / (scale[j] as number));
  const pOff = model.layout.blocks.parameters;
  const fitCols = fittedParams.map((p) => pOff.index.get(p.symbol) as number);
  const nP = pOff.symbols.length;
  const nU = model.unknowns.length;
  let evaluations = 0;
  let usedFiniteDifferences = false;
  let lastSolveFailure = "";

  const paramsAt = (q: Float64Array): Record<string, number> => {
    const all = { ...previous };
    fittedParams.forEach((p, j) => {
      all[p.symbol] = (q[j] as number) * (scale[j] as number);
    });
    return all;
  };
  /** Solves every snapshot at q; the points, or undefined when a solve fails. */
  const solveAll = (q: Float64Array): Float64Array[] | undefined => {
    const parameters = paramsAt(q);
    const points: Float64Array[] = [];
    for (let k = 0; k < cases.length; k++) {
      const c = cases[k] as Case;
      const inputs = {
        decisions: c.decisions,
        disturbances: c.disturbances,
        parameters,
        ...(c.unknowns ? { unknowns: c.unknowns } : {}),
      };
      const point = pointFromInputs(model, inputs);
      const solved = solveAtPoint(model, point);
      evaluations++;
      if (!solved.converged) {
        lastSolveFailure = `snapshot ${k}: ${solved.reason} at ${JSON.stringify(parameters)}`;
        return undefined;
      }
      c.unknowns = solved.unknowns;
      points.push(point);
    }
    return points;
  };
  let cache: { q: Float64Array; points: Float64Array[] | undefined } | undefined;
  const pointsAt = (q: Float64Array) => {
    if (cache?.q.every((v, j) => v === q[j])) return cache.points;
    cache = { q: Float64Array.from(q), points: solveAll(q) };
    return cache.points;
  };
  const predict = (points: Float64Array[], r: Residual, outputs: Float64Array[]): number =>
    r.kind === "unknowns"
      ? ((points[r.snapshot] as Float64Array)[model.layout.blocks.unknowns.offset + r.index] as number)
      : ((outputs[r.snapshot] as Float64Array)[r.index] as number);
  const residualFn = (q: Float64Array, out: Float64Array): void => {
    const points = pointsAt(q);
    if (!points) {
      out.fill(Number.NaN);
      return;
    }
    const outputs = points.map((p) => model.evalOutputs(p));
    residuals.forEach((r, i) => {
      out[i] = predict(points, r, outputs) - r.y;
    });
  };
  const jacobianFn = (q: Float64Array, out: Float64Array): void => {
    const points = pointsAt(q);
    if (!points) {
      out.fill(Number.NaN);
      return;
    }
    const sens = points.map((p) => steadyStateSensitivity(model, p, "parameters"));
    if (sens.some((s) => s === undefined)) {
      usedFiniteDifferences = true;
      finiteDifferenceJacobian(residualFn, Float64Array.from(q), m, out, { method: "central", lower, upper });
      return;
    }
    const ju = points.map((p) => model.outputJacobian(p, "unknowns"));
    const jp = points.map((p) => model.outputJacobian(p, "parameters"));
    residuals.forEach((r, i) => {
      const S = sens[r.snapshot] as Float64Array;
      fitCols.forEach((col, j) => {
        let d: number;
        if (r.kind === "unknowns") d = S[r.index * nP + col] as number;
        else {
          const Ju = ju[r.snapshot] as Float64Array;
          d = (jp[r.snapshot] as Float64Array)[r.index * nP + col] as number;
          for (let u = 0; u < nU; u++) d += (Ju[r.index * nU + u] as number) * (S[u * nP + col] as number);
        }
        out[i * n + j] = d * (scale[j] as number);
      });
    });
  };
  const weights = Float64Array.from(residuals, (r) => 1 / (r.sd * r.sd));
  const problem: LmProblem = { n, m, residuals: residualFn, jacobian: jacobianFn, weights, lower, upper };
  const q0 = Float64Array.from(fittedParams, (p, j) =>
    Math.min(
      upper[j] as number,
      Math.max(lower[j] as number, (previous[p.symbol] as number) / (scale[j] as number)),
    ),
  );
  if (!pointsAt(q0)) {
    return failed([
      note(
        "ESTIMATE_SOLVE_FAILED",
        `the model does not solve at the parameters in force: ${lastSolveFailure}`,
      ),
    ]);
  }

  let lm: LmResult;
  let stats: FitStatistics;
  try {
    // The residuals come from Newton solves converged to about 1e-10, so the NIST-grade defaults
    // (xtol 1e-12, gtol 1e-13) would only run out the iteration budget chasing solver noise; ten
    // digits in the scaled parameters is still far below their standard deviations.
    lm = levenbergMarquardt(problem, q0, {
      maxIterations: options.maxIterations ?? 100,
      xtol: 1e-10,
      gtol: 1e-10,
      ftol: 1e-12,
    });
    if (lm.reason === "non-finite-start")
      throw new Error(`no finite residuals (${lastSolveFailure || "non-finite Jacobian"})`);
    stats = fitStatistics(problem, lm.p, {
      confidence,
      varianceFactor: "known",
      names: fittedParams.map((p) => p.symbol),
    });
  } catch (err) {
    return failed([note("ESTIMATE_FIT_FAILED", (err as Error).message ?? String(err))]);
  }
  if (usedFiniteDifferences)
    warnings.push(
      note(
        "ESTIMATE_FINITE_DIFFERENCES",
        "J_x was singular at some snapshot: the Jacobian used central differences",
      ),
    );
  for (const w of stats.warnings) warnings.push({ code: w.code, message: w.detail.slice(0, 1000) });

  // --- back to parameter units, then the verdict
  const value = fittedParams.map((_, j) => (lm.p[j] as number) * (scale[j] as number));
  const sd = fittedParams.map((_, j) => (stats.standardErrors[j] as number) * (scale[j] as number));
  // The weights are the true 1/σ² (varianceFactor "known"), so the interval uses the normal quantile;
  // fitStatistics' Student-t quantile belongs to a variance estimated from the residuals and would widen
  // a one-snapshot interval by 6× at 1 dof.
  const z = normalQuantile(0.5 + confidence / 2);
  const half = sd.map((v) => z * v);
  const rules: AcceptanceRules = {
    fitConfidence: options.fitConfidence ?? 0.99,
    checkFit: options.checkFit ?? true,
    maxRelativeHalfWidth: options.maxRelativeHalfWidth ?? 0.5,
    rejectOnWarnings: options.rejectOnWarnings ?? ["STAT_RANK_DEFICIENT"],
    parameters: fittedParams.map((p) => ({
      name: p.symbol,
      lower: p.min,
      upper: p.max,
      ...(p.maxChangePerCycle !== undefined ? { maxMove: p.maxChangePerCycle } : {}),
    })),
  };
  const verdict = checkAcceptance(
    {
      p: value,
      weightedRss: stats.weightedRss,
      dof: stats.dof,
      ciHalfWidth: half,
      warnings: stats.warnings,
      converged: CONVERGED.has(lm.reason),
      reason: lm.reason,
      previous: fittedParams.map((p) => previous[p.symbol] as number),
    },
    rules,
  );
  const perParam = new Map<string, Note[]>();
  const overall: Note[] = [];
  for (const r of verdict.reasons) {
    const n1 = { code: r.code, message: r.detail.slice(0, 1000) };
    if (r.parameter) perParam.set(r.parameter, [...(perParam.get(r.parameter) ?? []), n1]);
    else overall.push(n1);
  }
  const atBound = fittedParams.map((p, j) => {
    const tol = 1e-9 * Math.max(1, Math.abs(p.max - p.min));
    const hit = (value[j] as number) <= p.min + tol || (value[j] as number) >= p.max - tol;
    if (hit)
      perParam.set(p.symbol, [
        ...(perParam.get(p.symbol) ?? []),
        note("ESTIMATE_AT_BOUND", `${p.symbol} = ${value[j]} sits on its range [${p.min}, ${p.max}]`),
      ]);
    return hit;
  });
  const accepted = verdict.accepted && !atBound.some(Boolean);
  const after: Record<string, number> = { ...previous };
  if (accepted)
    fittedParams.forEach((p, j) => {
      after[p.symbol] = value[j] as number;
    });

  const parameters = model.parameters.map((p) => {
    const j = fittedParams.indexOf(p);
    const prev = previous[p.symbol] as number;
    if (j < 0) {
      return {
        symbol: p.symbol,
        unit: p.unit,
        fitted: false,
        value: null,
        sd: null,
        ciLower: null,
        ciUpper: null,
        previous: prev,
        inForce: prev,
        accepted: false,
        atBound: false,
        reasons: [],
      };
    }
    return {
      symbol: p.symbol,
      unit: p.unit,
      fitted: true,
      value: value[j] as number,
      sd: sd[j] as number,
      ciLower: (value[j] as number) - (half[j] as number),
      ciUpper: (value[j] as number) + (half[j] as number),
      previous: prev,
      inForce: after[p.symbol] as number,
      accepted,
      atBound: atBound[j] as boolean,
      reasons: perParam.get(p.symbol) ?? [],
    };
  });

  // Residuals at the fitted point, for the console and the record.
  const points = pointsAt(lm.p);
  const table: ModelUpdate["residuals"] = [];
  if (points) {
    const outputs = points.map((p) => model.evalOutputs(p));
    for (const r of residuals.slice(0, 5000)) {
      const predicted = predict(points, r, outputs);
      table.push({
        tag: r.tag.id,
        snapshot: r.snapshot,
        unit: r.unit,
        reconciled: r.y,
        predicted,
        sd: r.sd,
        z: (predicted - r.y) / r.sd,
      });
    }
  }
  const correlation: number[][] = [];
  for (let a = 0; a < Math.min(n, 50); a++) {
    const row: number[] = [];
    for (let b = 0; b < Math.min(n, 50); b++) {
      const c = stats.correlation[a * n + b] as number;
      row.push(Number.isFinite(c) ? Math.max(-1, Math.min(1, c)) : 0);
    }
    correlation.push(row);
  }
  const checkFit = rules.checkFit !== false && stats.dof > 0;
  return {
    data: {
      ...base,
      status: accepted ? "accepted" : "rejected",
      accepted,
      parameters,
      fit: {
        converged: CONVERGED.has(lm.reason),
        reason: lm.reason,
        iterations: lm.iterations,
        evaluations,
        residuals: m,
        dof: stats.dof,
        weightedRss: stats.weightedRss,
        chiSquareLimit: checkFit ? chiSquareQuantile(rules.fitConfidence ?? 0.99, stats.dof) : null,
        confidence,
        conditionNumber: Number.isFinite(stats.conditionNumber) ? stats.conditionNumber : null,
        jacobian: usedFiniteDifferences ? "finite-difference" : "analytic",
      },
      correlation,
      residuals: table,
      reasons: overall,
    },
    inForce: after,
  };
}
