/**
 * Steady-state solver: damped Newton on the scaled residuals with projection onto the unknowns'
 * bounds and an Armijo backtracking line search on ½‖F‖² (Dennis & Schnabel 1983, ch. 6 — the
 * textbook globalization; no trust region, which small square plant models rarely need).
 */
import { SiteModelError } from "./errors.js";
import { luFactor, luSolve } from "./lu.js";
import type { SiteModel, WrtBlock } from "./site-model.js";

/** Why a solve stopped; `converged` is the only success. */
export const SOLVE_REASONS = {
  converged: "the scaled residual fell below the tolerance",
  "singular-jacobian": "the Jacobian w.r.t. the unknowns is singular at an iterate",
  "max-iterations": "the iteration limit was reached before convergence",
  "line-search-failed": "no step along the Newton direction reduced the residual",
  "out-of-bounds":
    "the Newton direction leaves the unknowns' bounds and the residual cannot be reduced inside them",
  "non-finite": "a residual or Jacobian entry is NaN or infinite (e.g. log of a negative number)",
} as const;

/** A solve outcome code. */
export type SolveReason = keyof typeof SOLVE_REASONS;

/** Values for the solve, by symbol; anything missing keeps the model's default. */
export interface SolveInputs {
  readonly decisions?: Readonly<Record<string, number>>;
  readonly parameters?: Readonly<Record<string, number>>;
  readonly disturbances?: Readonly<Record<string, number>>;
  readonly prices?: Readonly<Record<string, number>>;
  /** Initial guess for some or all unknowns; default: each unknown's `initial`. */
  readonly unknowns?: Readonly<Record<string, number>>;
}

/** Options of `solveSteadyState`. */
export interface SolveOptions {
  /** Newton iteration limit. Default 50. */
  readonly maxIterations?: number;
  /** Convergence when max |F_i| / rowScale_i ≤ tolerance (scaled residual, ~relative change of the unknowns). Default 1e-10. */
  readonly tolerance?: number;
  /** Halvings of the step before the line search gives up. Default 30. */
  readonly maxBacktracks?: number;
  /** Armijo sufficient-decrease constant. Default 1e-4. */
  readonly armijo?: number;
}

/** Result of `solveSteadyState`. */
export interface SolveResult {
  readonly converged: boolean;
  readonly reason: SolveReason;
  /** Unknowns by symbol, at the last accepted iterate. */
  readonly unknowns: Record<string, number>;
  /** Outputs by symbol at that iterate. */
  readonly outputs: Record<string, number>;
  /** Euclidean norm of the unscaled residuals (equation units). */
  readonly residualNorm: number;
  /** Max-norm of the scaled residuals, the quantity compared with `tolerance`. */
  readonly scaledResidualNorm: number;
  readonly iterations: number;
  /** The full point (all blocks) at the last iterate, for derivative calls. */
  readonly point: Float64Array;
}

/** Fills a point from inputs, rejecting unknown symbols, non-finite values and missing disturbances. */
export function pointFromInputs(model: SiteModel, inputs: SolveInputs): Float64Array {
  const point = model.newPoint();
  if (inputs.decisions) model.setBlock(point, "decisions", inputs.decisions);
  if (inputs.parameters) model.setBlock(point, "parameters", inputs.parameters);
  if (inputs.disturbances) model.setBlock(point, "disturbances", inputs.disturbances);
  if (inputs.prices) model.setBlock(point, "prices", inputs.prices);
  if (inputs.unknowns) model.setBlock(point, "unknowns", inputs.unknowns);
  const d = model.layout.blocks.disturbances;
  d.symbols.forEach((s, i) => {
    if (Number.isNaN(point[d.offset + i])) {
      throw new SiteModelError(
        "MODEL_INPUT_INVALID",
        { file: model.file, line: 0, path: "/disturbances" },
        `disturbance ${s} has no value and no default in ${model.file}`,
      );
    }
  });
  return point;
}

/**
 * Solves the model's steady-state equations for its unknowns at the given decisions, parameters,
 * disturbances and prices. Never throws for numerical trouble: it returns `converged: false` and a
 * `reason`; throws `SiteModelError` (MODEL_INPUT_INVALID) only for bad inputs.
 */
export function solveSteadyState(
  model: SiteModel,
  inputs: SolveInputs = {},
  options: SolveOptions = {},
): SolveResult {
  const point = pointFromInputs(model, inputs);
  return solveAtPoint(model, point, options);
}

/** As `solveSteadyState`, on a point prepared by the caller (updated in place with the unknowns). */
export function solveAtPoint(model: SiteModel, point: Float64Array, options: SolveOptions = {}): SolveResult {
  const maxIterations = options.maxIterations ?? 50;
  const tolerance = options.tolerance ?? 1e-10;
  const maxBacktracks = options.maxBacktracks ?? 30;
  const armijo = options.armijo ?? 1e-4;
  const n = model.unknowns.length;
  const off = model.layout.blocks.unknowns.offset;
  const lo = model.unknowns.map((u) => u.min);
  const hi = model.unknowns.map((u) => u.max);
  const colScale = Float64Array.from(model.unknowns, (u) => u.scale);
  const clip = (j: number, x: number): number => Math.min(hi[j] as number, Math.max(lo[j] as number, x));
  for (let j = 0; j < n; j += 1) point[off + j] = clip(j, point[off + j] as number);

  const f = new Float64Array(n);
  const jac = new Float64Array(n * n);
  const pivot = new Int32Array(n);
  const step = new Float64Array(n);
  const base = new Float64Array(n);
  const rowScale = new Float64Array(n).fill(1);

  const finite = (a: Float64Array): boolean => {
    for (let i = 0; i < a.length; i += 1) if (!Number.isFinite(a[i] as number)) return false;
    return true;
  };
  const scaledMax = (): number => {
    let m = 0;
    for (let i = 0; i < n; i += 1) m = Math.max(m, Math.abs((f[i] as number) / (rowScale[i] as number)));
    return m;
  };
  const merit = (): number => {
    let s = 0;
    for (let i = 0; i < n; i += 1) s += ((f[i] as number) / (rowScale[i] as number)) ** 2;
    return 0.5 * s;
  };
  const finish = (converged: boolean, reason: SolveReason, iterations: number): SolveResult => {
    model.residuals(point, f);
    let norm = 0;
    for (let i = 0; i < n; i += 1) norm += (f[i] as number) ** 2;
    const outputValues = model.evalOutputs(point);
    const outputs: Record<string, number> = {};
    model.outputs.forEach((o, i) => {
      outputs[o.symbol] = outputValues[i] as number;
    });
    return {
      converged,
      reason,
      unknowns: model.getBlock(point, "unknowns"),
      outputs,
      residualNorm: Math.sqrt(norm),
      scaledResidualNorm: scaledMax(),
      iterations,
      point,
    };
  };

  model.residuals(point, f);
  if (!finite(f)) return finish(false, "non-finite", 0);
  model.jacobian(point, "unknowns", jac);
  if (!finite(jac)) return finish(false, "non-finite", 0);
  // Row scales from the first Jacobian in scaled variables, kept fixed so the merit function does not
  // change under the line search (equations in kg/s and in kW then weigh alike).
  for (let i = 0; i < n; i += 1) {
    let m = 0;
    for (let j = 0; j < n; j += 1)
      m = Math.max(m, Math.abs((jac[i * n + j] as number) * (colScale[j] as number)));
    rowScale[i] = m > 0 ? m : 1;
  }

  for (let iteration = 0; iteration < maxIterations; iteration += 1) {
    if (scaledMax() <= tolerance) return finish(true, "converged", iteration);
    if (iteration > 0) {
      model.jacobian(point, "unknowns", jac);
      if (!finite(jac)) return finish(false, "non-finite", iteration);
    }
    for (let i = 0; i < n; i += 1) step[i] = -(f[i] as number);
    if (!luFactor(jac, n, pivot)) return finish(false, "singular-jacobian", iteration);
    luSolve(jac, n, pivot, step);
    if (!finite(step)) return finish(false, "singular-jacobian", iteration);

    const m0 = merit();
    for (let j = 0; j < n; j += 1) base[j] = point[off + j] as number;
    let alpha = 1;
    let accepted = false;
    let clipped = false;
    for (let k = 0; k <= maxBacktracks; k += 1) {
      clipped = false;
      for (let j = 0; j < n; j += 1) {
        const x = (base[j] as number) + alpha * (step[j] as number);
        const c = clip(j, x);
        if (c !== x) clipped = true;
        point[off + j] = c;
      }
      model.residuals(point, f);
      // The Newton direction makes the merit's directional derivative −2·m0, hence m0·(1 − 2·c·α).
      if (finite(f) && merit() <= m0 * (1 - 2 * armijo * alpha)) {
        accepted = true;
        break;
      }
      alpha *= 0.5;
    }
    if (!accepted) {
      for (let j = 0; j < n; j += 1) point[off + j] = base[j] as number;
      model.residuals(point, f);
      return finish(false, clipped ? "out-of-bounds" : "line-search-failed", iteration + 1);
    }
  }
  if (scaledMax() <= tolerance) return finish(true, "converged", maxIterations);
  return finish(false, "max-iterations", maxIterations);
}

/**
 * Sensitivity of the steady state: d(unknowns)/d(wrt) = −J_u⁻¹ · J_wrt, unknowns × count(wrt),
 * row-major, at a converged point (implicit function theorem). Returns undefined when J_u is singular.
 */
export function steadyStateSensitivity(
  model: SiteModel,
  point: Float64Array,
  wrt: Exclude<WrtBlock, "unknowns">,
): Float64Array | undefined {
  const n = model.unknowns.length;
  const m = model.layout.blocks[wrt].symbols.length;
  const ju = model.jacobian(point, "unknowns");
  const jw = model.jacobian(point, wrt);
  const pivot = new Int32Array(n);
  if (!luFactor(ju, n, pivot)) return undefined;
  const result = new Float64Array(n * m);
  const column = new Float64Array(n);
  for (let c = 0; c < m; c += 1) {
    for (let i = 0; i < n; i += 1) column[i] = -(jw[i * m + c] as number);
    luSolve(ju, n, pivot, column);
    for (let i = 0; i < n; i += 1) result[i * m + c] = column[i] as number;
  }
  return result;
}
