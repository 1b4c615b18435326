/**
 * Reconciliation under bilinear balances (component flow = flow × composition, enthalpy flow =
 * flow × temperature) by successive linearization: linearize the balances at the current estimate,
 * reconcile the linear problem exactly (reconcile.ts), repeat until the step vanishes. At the fixed
 * point x̂ = y − V·J(x̂)ᵀ·λ with f(x̂) = 0, which is the optimality condition of the nonlinear weighted
 * least-squares problem (Narasimhan & Jordache 2000, ch. 5).
 *
 * The linear problems are solved in step form, J·Δ = −f(x_k), so that an unmeasured variable the
 * balances leave free keeps its starting value instead of drifting to a minimum-norm value.
 */
import { ReconcileError } from "./errors.js";
import { serialElimination } from "./gross-errors.js";
import {
  type CoreSolution,
  type Prepared,
  type ReconcileOptions,
  type ReconcileResult,
  solveCore,
  summarize,
} from "./reconcile.js";

/** One term of a balance: coef × the product of the listed variables (one of them: linear; two: bilinear). */
export interface BalanceTerm {
  /** Coefficient, in the balance's unit per unit of the product (e.g. a heat capacity for F·T). */
  readonly coef: number;
  /** Variable indices multiplied together; at least one (a constant goes into `rhs`). */
  readonly vars: readonly number[];
}

/** A balance Σ terms = rhs. */
export interface BilinearBalance {
  /** Balance name, for messages and nodal tests. Default "balance <i>". */
  readonly name?: string;
  readonly terms: readonly BalanceTerm[];
  /** Right-hand side, in the balance's unit. Default 0. */
  readonly rhs?: number;
}

/** A reconciliation problem with bilinear (or any multilinear) balances. */
export interface BilinearProblem {
  readonly balances: readonly BilinearBalance[];
  /** Measured values, n entries; entries of unmeasured variables are ignored. */
  readonly y: readonly number[];
  /** Measurement standard deviations, n entries, > 0 for measured variables. */
  readonly sigma: readonly number[];
  /** Which variables are measured. Default: all. */
  readonly measured?: readonly boolean[];
  /** Variable names, n entries. Default "x0", "x1", … */
  readonly names?: readonly string[];
  /**
   * Starting values, n entries; required (finite) for unmeasured variables, optional for measured ones
   * (default: the measurement). A flow guessed at 0 hides the compositions it multiplies.
   */
  readonly initial?: readonly (number | null)[];
}

/** Options of {@link reconcileBilinear}. */
export interface BilinearOptions extends ReconcileOptions {
  /** Most linearizations per reconciliation. Default 50. */
  readonly maxIterations?: number;
  /** Convergence: largest step, in units of each variable's σ (measured) or of max(|x|, 1) (unmeasured). Default 1e-10. */
  readonly stepTolerance?: number;
}

/** Result of {@link reconcileBilinear}. */
export interface BilinearResult extends ReconcileResult {
  /** Linearizations used by the last reconciliation (after the last elimination). */
  readonly iterations: number;
  /** Largest |balance residual| at the returned values, in the balances' units. */
  readonly maxBalanceResidual: number;
}

interface Compiled {
  readonly n: number;
  readonly m: number;
  readonly rhs: Float64Array;
  readonly terms: readonly {
    readonly row: number;
    readonly coef: number;
    readonly vars: readonly number[];
  }[];
}

function compile(problem: BilinearProblem, n: number): Compiled {
  const m = problem.balances.length;
  const rhs = new Float64Array(m);
  const terms: { row: number; coef: number; vars: readonly number[] }[] = [];
  problem.balances.forEach((bal, i) => {
    const label = bal.name ?? `balance ${i}`;
    rhs[i] = bal.rhs ?? 0;
    if (!Number.isFinite(rhs[i])) invalid(`rhs of ${label} is not finite`);
    for (const t of bal.terms) {
      if (!Number.isFinite(t.coef)) invalid(`a coefficient of ${label} is not finite`);
      if (t.vars.length === 0) invalid(`a term of ${label} has no variable (put constants in rhs)`);
      for (const v of t.vars)
        if (!(Number.isInteger(v) && v >= 0 && v < n))
          invalid(`${label} refers to variable ${v}, outside 0..${n - 1}`);
      terms.push({ row: i, coef: t.coef, vars: t.vars });
    }
  });
  return { n, m, rhs, terms };
}

function invalid(message: string): never {
  throw new ReconcileError("RECONCILE_INPUT_INVALID", message);
}

/** f(x) = Σ terms − rhs, per balance. */
function residuals(c: Compiled, x: Float64Array): Float64Array {
  const f = new Float64Array(c.m);
  for (let i = 0; i < c.m; i++) f[i] = -c.rhs[i]!;
  for (const t of c.terms) {
    let prod = t.coef;
    for (const v of t.vars) prod *= x[v]!;
    f[t.row]! += prod;
  }
  return f;
}

/** Exact Jacobian of f (product rule), row-major m × n. */
function jacobian(c: Compiled, x: Float64Array): Float64Array {
  const J = new Float64Array(c.m * c.n);
  for (const t of c.terms) {
    for (let k = 0; k < t.vars.length; k++) {
      let d = t.coef;
      for (let l = 0; l < t.vars.length; l++) if (l !== k) d *= x[t.vars[l]!]!;
      J[t.row * c.n + t.vars[k]!]! += d;
    }
  }
  return J;
}

/**
 * Reconciles measurements against bilinear balances by successive linearization, then runs the same
 * gross-error tests and serial elimination as {@link reconcileLinear} on the balances linearized at the
 * solution. Throws ReconcileError RECONCILE_INPUT_INVALID, RECONCILE_RANK_DEFICIENT (dependent
 * balances at a linearization point) or RECONCILE_NOT_CONVERGED.
 */
export function reconcileBilinear(problem: BilinearProblem, options: BilinearOptions = {}): BilinearResult {
  const n = problem.y.length;
  const alpha = options.alpha ?? 0.05;
  if (!(alpha > 0 && alpha < 1)) invalid(`alpha must lie in (0, 1) (got ${alpha})`);
  const maxIterations = options.maxIterations ?? 50;
  const stepTolerance = options.stepTolerance ?? 1e-10;
  if (n === 0) invalid("the problem has no variables (y is empty)");
  for (const [label, arr] of [
    ["sigma", problem.sigma],
    ["measured", problem.measured],
    ["names", problem.names],
    ["initial", problem.initial],
  ] as const) {
    if (arr && arr.length !== n) invalid(`${label} has ${arr.length} entries, y has ${n}`);
  }
  const names = problem.names ? [...problem.names] : Array.from({ length: n }, (_, j) => `x${j}`);
  const balanceNames = problem.balances.map((b, i) => b.name ?? `balance ${i}`);
  const measured0 = problem.measured ? [...problem.measured] : new Array<boolean>(n).fill(true);
  const compiled = compile(problem, n);
  const y = new Float64Array(n);
  const variance = new Float64Array(n);
  const start = new Float64Array(n);
  for (let j = 0; j < n; j++) {
    const guess = problem.initial?.[j];
    if (measured0[j]) {
      const v = problem.y[j]!;
      const s = problem.sigma[j]!;
      if (!Number.isFinite(v)) invalid(`measured value of ${names[j]} is not finite`);
      if (!(Number.isFinite(s) && s > 0)) invalid(`sigma of ${names[j]} must be finite and > 0 (got ${s})`);
      y[j] = v;
      variance[j] = s * s;
      start[j] = guess ?? v;
    } else {
      if (guess === undefined || guess === null || !Number.isFinite(guess))
        invalid(`unmeasured ${names[j]} needs a finite starting value in 'initial'`);
      start[j] = guess;
    }
    if (!Number.isFinite(start[j]!)) invalid(`starting value of ${names[j]} is not finite`);
  }

  let lastIterations = 0;
  let lastX = start;
  // Eliminated measurements become unmeasured; they start from their (biased) measurement.
  const solve = (measured: readonly boolean[]): CoreSolution => {
    let x = Float64Array.from(start);
    for (let it = 1; it <= maxIterations; it++) {
      const f = residuals(compiled, x);
      const J = jacobian(compiled, x);
      const prep: Prepared = {
        n,
        m: compiled.m,
        A: J,
        b: f.map((v) => -v),
        y: y.map((v, j) => (measured[j] ? v - x[j]! : 0)),
        variance: variance.map((v, j) => (measured[j] ? v : 0)),
        names,
        balanceNames,
        measured,
      };
      const core = solveCore(prep, measured, options.covariance ?? false);
      let step = 0;
      const next = Float64Array.from(x);
      for (let j = 0; j < n; j++) {
        if (!core.known[j]) continue;
        const d = core.values[j]!;
        next[j] = x[j]! + d;
        const scale = measured[j] ? Math.sqrt(variance[j]!) : Math.max(Math.abs(x[j]!), 1);
        step = Math.max(step, Math.abs(d) / scale);
      }
      if (!Number.isFinite(step)) break;
      if (step <= stepTolerance) {
        lastIterations = it;
        lastX = next;
        // The tests come from the linearization at the solution; values shift back to absolute units.
        const values = Float64Array.from(next);
        return { ...core, values };
      }
      x = next;
    }
    throw new ReconcileError(
      "RECONCILE_NOT_CONVERGED",
      `successive linearization did not converge in ${maxIterations} iterations: check starting values of unmeasured variables and the balance signs`,
    );
  };

  const run = serialElimination(solve, measured0, {
    alpha,
    maxEliminations: options.maxEliminations ?? Number.POSITIVE_INFINITY,
  });
  const absolute: Prepared = {
    n,
    m: compiled.m,
    A: jacobian(compiled, lastX),
    b: new Float64Array(compiled.m),
    y,
    variance,
    names,
    balanceNames,
    measured: measured0,
  };
  const result = summarize(absolute, run.final, run.initialGamma, run.initialDof, run.removed, alpha);
  const f = residuals(compiled, lastX);
  let maxBalanceResidual = 0;
  for (const v of f) maxBalanceResidual = Math.max(maxBalanceResidual, Math.abs(v));
  return { ...result, iterations: lastIterations, maxBalanceResidual };
}
