/**
 * LP and MILP on one problem description, solved by HiGHS (`highs`, WebAssembly) or by
 * `javascript-lp-solver` (pure JavaScript, for tiny problems).
 *
 * Duals are reported as shadow prices: the dual of a constraint is ∂obj* / ∂b, the change of the
 * optimal objective (in the problem's own sense) per unit raise of the constraint's binding limit
 * (lb or ub, whichever is active); zero for a constraint not at a limit. For a MILP the duals are
 * those of the LP with the integer variables fixed at their optimal values.
 *
 * Library traps (LIBRARY-NOTES.md): HiGHS's loader is asynchronous, a fresh solve costs about 3 ms
 * whatever the size, and a kept model re-solved after a cost change is 13–46× faster, so
 * `createHighsLp` keeps a persistent model (which must be disposed: Wasm memory is not garbage
 * collected). javascript-lp-solver makes every variable ≥ 0 unless told otherwise, wants bounds as
 * constraints, rounds values to 1e-8, leaves zero-valued variables out of its answer and reports no
 * duals: the duals are recovered here from the primal solution (see `activeSetDuals`).
 */
import highsImport, { type Highs, type Model as HighsModel } from "highs";
import jsLpImport from "javascript-lp-solver";
import { Matrix, pseudoInverse } from "ml-matrix";
import { OptimizeError, type OptimizeErrorCode } from "./errors.js";
import { type ColumnLp, transposeCompressed, WarmSimplex } from "./warm-simplex.js";

/** A decision variable. */
export interface LpVariable {
  name: string;
  /** Lower bound; default 0. Use -Infinity for a free variable. */
  lb?: number;
  /** Upper bound; default +Infinity. */
  ub?: number;
  /** Objective coefficient. */
  cost: number;
  /** Restrict to integer values; default false. */
  integer?: boolean;
}

/** A linear constraint lb ≤ Σ coeffs[var]·var ≤ ub. */
export interface LpConstraint {
  name: string;
  /** Sparse coefficients by variable name. */
  coeffs: Readonly<Record<string, number>>;
  /** Lower limit; default -Infinity. */
  lb?: number;
  /** Upper limit; default +Infinity. */
  ub?: number;
}

/** An LP or MILP. */
export interface LpProblem {
  sense: "min" | "max";
  variables: readonly LpVariable[];
  constraints: readonly LpConstraint[];
}

/** Outcome of an LP/MILP solve. */
export type LpStatus = "optimal" | "infeasible" | "unbounded" | "limit" | "error";

/**
 * Result of an LP/MILP solve.
 *
 * Every answer comes by index as typed arrays (`columnValues`, `rowDuals`, `columnDuals`, in the order
 * of the problem's `variables` and `constraints`) and by name as records (`values`, `duals`,
 * `reducedCosts`). A HiGHS result builds each record on its first read (at 2,000 variables, building
 * all three took several times the warm re-solve itself: bench/optimize.ts); a kept HiGHS model made
 * with `records: false` leaves them empty.
 */
export interface LpResult {
  status: LpStatus;
  /** Registry code when the status is not "optimal". */
  code?: OptimizeErrorCode;
  message: string;
  /** Optimal objective value (NaN unless optimal). */
  objective: number;
  /** Primal values by variable name (every variable present when optimal; empty otherwise). */
  values: Record<string, number>;
  /** Shadow price ∂obj* / ∂(binding limit) by constraint name; 0 where no limit binds. */
  duals: Record<string, number>;
  /** Reduced costs ∂obj* / ∂(binding bound) by variable name; 0 for a variable strictly inside its bounds. */
  reducedCosts: Record<string, number>;
  /** `values` by index, in the order of `variables`; length 0 unless optimal. */
  columnValues: Float64Array;
  /**
   * `duals` by index, in the order of `constraints`; length 0 unless optimal, and for a MILP whose
   * integer-fixed LP (the source of its duals) failed.
   */
  rowDuals: Float64Array;
  /** `reducedCosts` by index, in the order of `variables`; length 0 whenever `rowDuals` is. */
  columnDuals: Float64Array;
  /** Which solver produced it. */
  solver: "highs" | "javascript-lp-solver";
  /** Simplex iterations of this solve (HiGHS only; a warm re-solve shows its few pivots here). */
  iterations?: number;
  /**
   * True when a kept model's answer came from its own warm simplex (services/optimize/
   * warm-simplex.ts) rather than from a HiGHS run; see {@link HighsLpOptions.warmSimplex}.
   */
  warmSimplex?: boolean;
}

const isMilp = (p: LpProblem) => p.variables.some((v) => v.integer === true);
const lbOf = (v: LpVariable) => v.lb ?? 0;
const ubOf = (v: LpVariable) => v.ub ?? Number.POSITIVE_INFINITY;

function emptyResult(
  solver: LpResult["solver"],
  status: LpStatus,
  code: OptimizeErrorCode,
  message: string,
): LpResult {
  return {
    status,
    code,
    message,
    objective: Number.NaN,
    values: {},
    duals: {},
    reducedCosts: {},
    columnValues: new Float64Array(0),
    rowDuals: new Float64Array(0),
    columnDuals: new Float64Array(0),
    solver,
  };
}

/** Checks names and bounds; returns a message or undefined. */
function validate(p: LpProblem): string | undefined {
  const names = new Set<string>();
  for (const v of p.variables) {
    if (names.has(v.name)) return `variable "${v.name}" is declared twice`;
    names.add(v.name);
    if (!Number.isFinite(v.cost)) return `cost of "${v.name}" is not finite`;
    if (Number.isNaN(lbOf(v)) || Number.isNaN(ubOf(v)) || lbOf(v) > ubOf(v))
      return `bounds of "${v.name}" are inconsistent: [${lbOf(v)}, ${ubOf(v)}]`;
  }
  const rows = new Set<string>();
  for (const c of p.constraints) {
    if (rows.has(c.name)) return `constraint "${c.name}" is declared twice`;
    rows.add(c.name);
    for (const name in c.coeffs) {
      const a = c.coeffs[name];
      if (!names.has(name)) return `constraint "${c.name}" uses undeclared variable "${name}"`;
      if (!Number.isFinite(a)) return `constraint "${c.name}" has a non-finite coefficient for "${name}"`;
    }
    const lo = c.lb ?? Number.NEGATIVE_INFINITY;
    const hi = c.ub ?? Number.POSITIVE_INFINITY;
    if (Number.isNaN(lo) || Number.isNaN(hi) || lo > hi)
      return `limits of "${c.name}" are inconsistent: [${lo}, ${hi}]`;
  }
  return undefined;
}

// Both packages declare CommonJS types but load as ES modules here; take `.default` when the
// runtime hands over a namespace, the value itself otherwise.
const unwrapDefault = <T>(m: unknown): T => ((m as { default?: T }).default ?? m) as T;
const highsLoader = unwrapDefault<(options?: object) => Promise<Highs>>(highsImport);
const jsLpSolver = unwrapDefault<{ Solve(model: object): unknown }>(jsLpImport);

// ---------------------------------------------------------------------------------------------
// HiGHS

let highsPromise: Promise<Highs> | undefined;

/**
 * Loads the HiGHS WebAssembly module once per process and caches it (the loader is asynchronous;
 * every solve after it is synchronous).
 */
export function loadHighs(): Promise<Highs> {
  highsPromise ??= highsLoader();
  return highsPromise;
}

/** A kept HiGHS model for repeated solves: change costs or limits, re-solve warm, dispose at the end. */
export interface HighsLp {
  /**
   * Solves (warm after the first call: HiGHS keeps its basis) and reports by index and, on first read
   * of a record, by the problem's names.
   */
  solve(): LpResult;
  /** Changes objective coefficients by variable name; names not in the problem are ignored. */
  setCosts(costs: Readonly<Record<string, number>>): void;
  /**
   * Changes every objective coefficient at once, by index in the order of the problem's `variables`.
   * Only entries that differ from the model's current cost are sent to HiGHS, so re-stating an
   * unchanged vector costs one comparison per entry. The vector is read during the call, not kept.
   * @throws OptimizeError `OPTIMIZE_INVALID_PROBLEM` when `costs.length` is not the number of variables.
   */
  setCostVector(costs: ArrayLike<number>): void;
  /** Changes a variable's bounds. */
  setVariableBounds(name: string, lb: number, ub: number): void;
  /** Changes a constraint's limits. */
  setConstraintLimits(name: string, lb: number, ub: number): void;
  /** Releases the WebAssembly memory; the object is unusable afterwards. */
  dispose(): void;
}

/**
 * HiGHS model data of `p` as typed arrays (CSR rows), with the name → index maps. One pass over the
 * constraints' coefficient records: at 2,000 variables, building the data with per-row entry arrays and
 * sorts cost as much as HiGHS's whole solve (LIBRARY-NOTES: "fed CSR arrays").
 */
function toModelData(highs: Highs, p: LpProblem, col: ReadonlyMap<string, number>) {
  const inf = highs.infinity;
  const clampInf = (v: number) =>
    v === Number.POSITIVE_INFINITY ? inf : v === Number.NEGATIVE_INFINITY ? -inf : v;
  const numCols = p.variables.length;
  const numRows = p.constraints.length;
  let nnz = 0;
  for (const c of p.constraints) for (const _ in c.coeffs) nnz++;
  const starts = new Int32Array(numRows + 1);
  const indices = new Int32Array(nnz);
  const values = new Float64Array(nnz);
  const rowLower = new Float64Array(numRows);
  const rowUpper = new Float64Array(numRows);
  let k = 0;
  for (let i = 0; i < numRows; i++) {
    const c = p.constraints[i]!;
    const first = k;
    for (const name in c.coeffs) {
      const a = c.coeffs[name]!;
      if (a === 0) continue;
      // Insertion into the sorted tail: rows are short (a handful of entries) and usually in order.
      const j = col.get(name)!;
      let q = k++;
      while (q > first && indices[q - 1]! > j) {
        indices[q] = indices[q - 1]!;
        values[q] = values[q - 1]!;
        q--;
      }
      indices[q] = j;
      values[q] = a;
    }
    starts[i + 1] = k;
    rowLower[i] = clampInf(c.lb ?? Number.NEGATIVE_INFINITY);
    rowUpper[i] = clampInf(c.ub ?? Number.POSITIVE_INFINITY);
  }
  const colCost = new Float64Array(numCols);
  const colLower = new Float64Array(numCols);
  const colUpper = new Float64Array(numCols);
  for (let j = 0; j < numCols; j++) {
    const v = p.variables[j]!;
    colCost[j] = v.cost;
    colLower[j] = clampInf(lbOf(v));
    colUpper[j] = clampInf(ubOf(v));
  }
  return {
    numCols,
    numRows,
    sense:
      p.sense === "max" ? highs.constants.objectiveSense.maximize : highs.constants.objectiveSense.minimize,
    colCost,
    colLower,
    colUpper,
    rowLower,
    rowUpper,
    matrix: {
      format: "csr" as const,
      numRows,
      numCols,
      starts,
      indices: k === nnz ? indices : indices.slice(0, k),
      values: k === nnz ? values : values.slice(0, k),
    },
    ...(isMilp(p)
      ? {
          integrality: p.variables.map((v) =>
            v.integer ? highs.constants.variableType.integer : highs.constants.variableType.continuous,
          ),
        }
      : {}),
  };
}

/** { name: value } for parallel arrays; empty when `values` is (no answer of that kind). */
function namedRecord(items: readonly { name: string }[], values: ArrayLike<number>): Record<string, number> {
  const record: Record<string, number> = {};
  if (values.length === 0) return record;
  for (let k = 0; k < items.length; k++) record[items[k]!.name] = values[k] ?? 0;
  return record;
}

/**
 * An optimal HiGHS result over the given arrays. Its by-name records are built from them on first
 * read (each record separately), or stay empty when the caller asked for arrays only
 * (`HighsLpOptions.records: false`).
 */
function optimalHighsResult(
  p: LpProblem,
  objective: number,
  columnValues: Float64Array,
  rowDuals: Float64Array,
  columnDuals: Float64Array,
  records: boolean,
): LpResult {
  const result = {
    status: "optimal",
    message: "optimal",
    objective,
    columnValues,
    rowDuals,
    columnDuals,
    solver: "highs",
  } as LpResult;
  lazyRecord(result, "values", () => (records ? namedRecord(p.variables, columnValues) : {}));
  lazyRecord(result, "duals", () => (records ? namedRecord(p.constraints, rowDuals) : {}));
  lazyRecord(result, "reducedCosts", () => (records ? namedRecord(p.variables, columnDuals) : {}));
  return result;
}

/**
 * Defines `target[key]` as an enumerable property computed by `build` on its first read, then kept as a
 * plain value (so spreading, comparing and serializing the result see an ordinary record).
 */
function lazyRecord(
  target: LpResult,
  key: "values" | "duals" | "reducedCosts",
  build: () => Record<string, number>,
): void {
  Object.defineProperty(target, key, {
    enumerable: true,
    configurable: true,
    get() {
      const value = build();
      Object.defineProperty(target, key, { value, enumerable: true, writable: true, configurable: true });
      return value;
    },
    set(value: Record<string, number>) {
      Object.defineProperty(target, key, { value, enumerable: true, writable: true, configurable: true });
    },
  });
}

function readHighs(
  highs: Highs,
  model: HighsModel,
  p: LpProblem,
  costs: Float64Array,
  records: boolean,
): LpResult {
  const ms = model.getModelStatus();
  const st = highs.constants.modelStatus;
  if (ms === st.infeasible)
    return emptyResult("highs", "infeasible", "OPTIMIZE_INFEASIBLE", "HiGHS proved the problem infeasible");
  if (ms === st.unbounded || ms === st.unboundedOrInfeasible)
    return emptyResult("highs", "unbounded", "OPTIMIZE_UNBOUNDED", `HiGHS model status ${ms} (unbounded)`);
  if (ms === st.timeLimit || ms === st.iterationLimit)
    return emptyResult(
      "highs",
      "limit",
      "OPTIMIZE_ITERATION_LIMIT",
      `HiGHS stopped at a limit (model status ${ms})`,
    );
  if (ms !== st.optimal && ms !== st.empty)
    return emptyResult("highs", "error", "OPTIMIZE_SOLVER_FAILED", `HiGHS model status ${ms}`);
  // getSolution's arrays are JavaScript-owned copies (highs types.d.ts, `Solution`): kept as they are.
  const sol = model.getSolution();
  const x = sol.colValue;
  let objective = 0;
  for (let j = 0; j < p.variables.length; j++) objective += costs[j]! * (x[j] ?? 0);
  // HiGHS reports row duals y with c − Aᵀy = reduced cost, which is ∂obj* / ∂(row limit) in both senses.
  // A MILP's duals are not meaningful in HiGHS; the caller fills them from the integer-fixed LP.
  const none = new Float64Array(0);
  return isMilp(p)
    ? optimalHighsResult(p, objective, x, none, none, records)
    : optimalHighsResult(p, objective, x, sol.rowDual, sol.colDual, records);
}

/** Options of {@link createHighsLp}. */
export interface HighsLpOptions {
  /**
   * HiGHS options set on the model (names as in HiGHS, e.g. `{ presolve: "off" }`). Default: only
   * `output_flag: false`. A warm re-solve skips presolve by itself (HiGHS keeps the basis). Setting
   * `simplex_strategy` here turns off the automatic choice described at {@link createHighsLp}.
   */
  highsOptions?: Readonly<Record<string, boolean | number | string>>;
  /**
   * Fill the by-name records (`values`, `duals`, `reducedCosts`) of every result. Default true; false
   * for a caller that reads the typed arrays only (large LPs re-solved every cycle).
   */
  records?: boolean;
  /**
   * Re-solve after changes of costs, bounds or limits with our own warm simplex on HiGHS's last optimal
   * basis (a primal phase for the costs, then a dual phase for the bounds), instead of a HiGHS run.
   * Default true for an LP, ignored for a MILP. The answer is the same optimum (checked against HiGHS
   * in warm-simplex.unit.test.ts); the point is time: a HiGHS run costs 0.6–0.8 ms at 2,000 variables
   * before its first pivot, the whole budget of a warm cycle. Whenever the warm simplex declines
   * (unbounded ray, infeasible, singular or large basis, a nonbasic bound removed, more than 100
   * pivots), HiGHS solves as before.
   */
  warmSimplex?: boolean;
}

/** `data`'s matrix by columns, for the warm simplex; the bounds are fresh arrays. */
function columnLpOf(data: ReturnType<typeof toModelData>): ColumnLp {
  const { numCols, numRows } = data;
  const { starts, indices, values } = data.matrix;
  const byColumn = transposeCompressed(numCols, starts, indices, values);
  return {
    nCols: numCols,
    nRows: numRows,
    colStart: byColumn.start,
    rowIndex: byColumn.index,
    value: byColumn.value,
    colLower: Float64Array.from(data.colLower),
    colUpper: Float64Array.from(data.colUpper),
    rowLower: Float64Array.from(data.rowLower),
    rowUpper: Float64Array.from(data.rowUpper),
  };
}

/**
 * Builds a persistent HiGHS model of `p` (CSR arrays, no LP text) for warm re-solves. A malformed
 * problem gives a model whose `solve()` returns status "error"; HiGHS's own input validation may
 * throw here (use `solveLpHighs` for a call that never throws). Call `dispose()` when done.
 *
 * Changes of costs, bounds and limits are recorded and sent to HiGHS in one batch per kind at the next
 * `solve()`, and only where a value really changed: a cycle that re-states every bound (as the optimize
 * stage does) then costs a comparison per bound instead of a WebAssembly call each.
 *
 * Simplex variant: the first solve uses HiGHS's default (dual simplex); a re-solve after changes of costs
 * only uses the primal simplex, because the kept basis is still primal feasible (only optimality is lost),
 * while after a change of bounds or limits the basis stays dual feasible and the dual simplex is the
 * natural restart (Chvátal 1983, "Linear Programming", ch. 10, sensitivity analysis; common practice).
 * Measured here at 2,000 variables: 3–5 pivots instead of 4–8 and 15–20 % less time per re-solve.
 * The primal edge weights stay HiGHS's automatic choice: forcing devex (`simplex_primal_edge_weight_strategy`
 * 1) gave the same pivots and a devex/default time ratio of 0.985–1.021 (median 1.001) at 500 variables and
 * 0.950–1.030 (median 0.988) at 2,000, over 5 random LPs × 2 cost changes each, while two identical default
 * models differed by 0.977–1.014 and 0.956–1.040: no effect beyond noise. Steepest edge was 2–3.5× slower.
 *
 * For a caller that holds costs and answers by index, `setCostVector` and the result's typed arrays skip
 * the name look-ups and the records (see {@link LpResult}).
 */
export function createHighsLp(highs: Highs, p: LpProblem, options: HighsLpOptions = {}): HighsLp {
  return createChecked(highs, p, validate(p), options);
}

function createChecked(
  highs: Highs,
  p: LpProblem,
  problemError: string | undefined,
  options: HighsLpOptions,
): HighsLp {
  const nCols = p.variables.length;
  const nRows = p.constraints.length;
  const col = new Map<string, number>();
  for (let j = 0; j < nCols; j++) col.set(p.variables[j]!.name, j);
  const row = new Map<string, number>();
  for (let i = 0; i < nRows; i++) row.set(p.constraints[i]!.name, i);
  let model: HighsModel | undefined;
  let data: ReturnType<typeof toModelData> | undefined;
  if (problemError === undefined) {
    data = toModelData(highs, p, col);
    model = highs.createModel(data);
    model.options.set({ output_flag: false, ...options.highsOptions });
  }
  // Current values as HiGHS holds them, and masks of the entries changed since the last solve.
  const costs = data ? Float64Array.from(data.colCost) : new Float64Array(nCols);
  const colLower = data ? Float64Array.from(data.colLower) : new Float64Array(nCols);
  const colUpper = data ? Float64Array.from(data.colUpper) : new Float64Array(nCols);
  const rowLower = data ? Float64Array.from(data.rowLower) : new Float64Array(nRows);
  const rowUpper = data ? Float64Array.from(data.rowUpper) : new Float64Array(nRows);
  const costMask = new Uint8Array(nCols);
  const colMask = new Uint8Array(nCols);
  const rowMask = new Uint8Array(nRows);
  let costChanged = false;
  let colChanged = false;
  let rowChanged = false;
  let solved = false;
  const records = options.records ?? true;
  const autoStrategy = options.highsOptions?.simplex_strategy === undefined;
  // HiGHS's simplex_strategy values: 1 serial dual, 4 primal.
  let strategy = 1;
  const chooseStrategy = (m: HighsModel) => {
    const wanted = solved && costChanged && !colChanged && !rowChanged ? 4 : 1;
    if (wanted !== strategy) {
      m.options.set("simplex_strategy", wanted);
      strategy = wanted;
    }
  };
  const inf = highs.infinity;
  const clampInf = (v: number) =>
    v === Number.POSITIVE_INFINITY ? inf : v === Number.NEGATIVE_INFINITY ? -inf : v;
  const flush = (m: HighsModel) => {
    if (costChanged) m.changeColsCost({ kind: "mask", mask: costMask }, costs);
    if (colChanged) m.changeColsBounds({ kind: "mask", mask: colMask }, colLower, colUpper);
    if (rowChanged) m.changeRowsBounds({ kind: "mask", mask: rowMask }, rowLower, rowUpper);
    if (costChanged) costMask.fill(0);
    if (colChanged) colMask.fill(0);
    if (rowChanged) rowMask.fill(0);
    costChanged = colChanged = rowChanged = false;
  };
  // The warm simplex (see HighsLpOptions.warmSimplex): created at its first use, loaded with
  // HiGHS's last optimal basis at the first cost-only re-solve after a HiGHS run, and "current" while
  // its basis is newer than HiGHS's. Cost changes it has solved stay pending in `costMask`, so a later
  // HiGHS run still receives them. A model whose bases it refused three times in a row (a bump too
  // large to factor, say) stops asking: each refusal had cost a factorization attempt on top of the
  // HiGHS run that answered instead.
  let warmAllowed = (options.warmSimplex ?? true) && data !== undefined && !isMilp(p);
  let warm: { simplex: WarmSimplex; lp: ColumnLp; cost: Float64Array } | undefined;
  let highsOptimal = false;
  let warmCurrent = false;
  let refusals = 0;
  // A bound or limit changed since the warm simplex (or HiGHS) last took them. Not `colChanged ||
  // rowChanged`: those stay set until HiGHS's next run, and every warm cycle after one real change would
  // re-apply the same bounds (a pass over all variables and an FTRAN) again.
  let boundsMoved = false;
  const sign = p.sense === "max" ? -1 : 1;
  // The bounds and limits of HiGHS's last run (its basis is optimal for those), kept for a warm load.
  const highsBounds = {
    colLower: Float64Array.from(colLower),
    colUpper: Float64Array.from(colUpper),
    rowLower: Float64Array.from(rowLower),
    rowUpper: Float64Array.from(rowUpper),
  };
  const current = { colLower, colUpper, rowLower, rowUpper };
  const solveWarm = (m: HighsModel): LpResult | undefined => {
    if (!warmAllowed || !(warmCurrent || highsOptimal)) return undefined;
    if (!warm) {
      const lp = columnLpOf(data!);
      warm = { simplex: new WarmSimplex(lp), lp, cost: new Float64Array(nCols) };
    }
    const { simplex, lp, cost } = warm;
    if (!warmCurrent) {
      // HiGHS's last basis, with the bounds it was optimal for (load reads them from `lp`).
      lp.colLower.set(highsBounds.colLower);
      lp.colUpper.set(highsBounds.colUpper);
      lp.rowLower.set(highsBounds.rowLower);
      lp.rowUpper.set(highsBounds.rowUpper);
      const basis = m.getBasis();
      if (simplex.load(basis.colStatus, basis.rowStatus) !== undefined) {
        warmAllowed = ++refusals < 3;
        return undefined;
      }
      refusals = 0;
    }
    for (let j = 0; j < nCols; j++) cost[j] = sign * costs[j]!;
    // Bounds or limits changed since it last took them: the warm simplex moves to them (its dual
    // phase); they stay pending for HiGHS as well.
    const outcome = simplex.solve(cost, boundsMoved ? current : undefined);
    warmCurrent = outcome.status === "optimal";
    if (warmCurrent) boundsMoved = false;
    if (outcome.status !== "optimal") return undefined;
    const x = simplex.x.slice(0, nCols);
    const rowDuals = new Float64Array(nRows);
    const columnDuals = new Float64Array(nCols);
    for (let i = 0; i < nRows; i++) rowDuals[i] = sign * simplex.y[i]!;
    for (let j = 0; j < nCols; j++) columnDuals[j] = sign * simplex.d[j]!;
    let objective = 0;
    for (let j = 0; j < nCols; j++) objective += costs[j]! * x[j]!;
    const r = optimalHighsResult(p, objective, x, rowDuals, columnDuals, records);
    r.iterations = outcome.pivots;
    r.warmSimplex = true;
    // The record says who answered: the proposal carries this message as its solver's account.
    const { primal, dual, primalAfterDual } = outcome.phases;
    r.message = `optimal (warm simplex from HiGHS's last basis: ${primal + primalAfterDual} primal, ${dual} dual pivots)`;
    return r;
  };
  return {
    solve(): LpResult {
      if (!model)
        return emptyResult("highs", "error", "OPTIMIZE_INVALID_PROBLEM", problemError ?? "model disposed");
      try {
        const fromWarm = solveWarm(model);
        if (fromWarm) return fromWarm;
        if (autoStrategy) chooseStrategy(model);
        flush(model);
        model.run();
        solved = true;
        warmCurrent = false;
        boundsMoved = false;
        highsBounds.colLower.set(colLower);
        highsBounds.colUpper.set(colUpper);
        highsBounds.rowLower.set(rowLower);
        highsBounds.rowUpper.set(rowUpper);
        let r = readHighs(highs, model, p, costs, records);
        highsOptimal = r.status === "optimal";
        const iterations = Number(model.info.get("simplex_iteration_count"));
        if (r.status === "optimal" && isMilp(p)) {
          // Duals of a MILP: those of the LP with the integers fixed at their optimal values.
          const x = r.columnValues;
          const fixed: LpProblem = {
            ...p,
            variables: p.variables.map((v, j) =>
              v.integer
                ? { ...v, integer: false, lb: x[j]!, ub: x[j]!, cost: costs[j]! }
                : { ...v, cost: costs[j]! },
            ),
          };
          const lp = createHighsLp(highs, fixed);
          try {
            const f = lp.solve();
            r = optimalHighsResult(p, r.objective, x, f.rowDuals, f.columnDuals, records);
          } finally {
            lp.dispose();
          }
        }
        r.iterations = iterations;
        return r;
      } catch (err) {
        return emptyResult("highs", "error", "OPTIMIZE_SOLVER_FAILED", `HiGHS threw: ${String(err)}`);
      }
    },
    setCosts(newCosts) {
      if (!model) return;
      for (const name in newCosts) {
        const j = col.get(name);
        const c = newCosts[name]!;
        if (j === undefined || costs[j] === c) continue;
        costs[j] = c;
        costMask[j] = 1;
        costChanged = true;
      }
    },
    setCostVector(newCosts) {
      if (newCosts.length !== nCols)
        throw new OptimizeError(
          "OPTIMIZE_INVALID_PROBLEM",
          `setCostVector: ${newCosts.length} costs for ${nCols} variables`,
        );
      if (!model) return;
      for (let j = 0; j < nCols; j++) {
        const c = newCosts[j]!;
        if (costs[j] === c) continue;
        costs[j] = c;
        costMask[j] = 1;
        costChanged = true;
      }
    },
    setVariableBounds(name, lb, ub) {
      const j = col.get(name);
      if (!model || j === undefined) return;
      const lo = clampInf(lb);
      const hi = clampInf(ub);
      if (colLower[j] === lo && colUpper[j] === hi) return;
      colLower[j] = lo;
      colUpper[j] = hi;
      colMask[j] = 1;
      colChanged = true;
      boundsMoved = true;
    },
    setConstraintLimits(name, lb, ub) {
      const i = row.get(name);
      if (!model || i === undefined) return;
      const lo = clampInf(lb);
      const hi = clampInf(ub);
      if (rowLower[i] === lo && rowUpper[i] === hi) return;
      rowLower[i] = lo;
      rowUpper[i] = hi;
      rowMask[i] = 1;
      rowChanged = true;
      boundsMoved = true;
    },
    dispose() {
      model?.dispose();
      model = undefined;
    },
  };
}

/** Solves `p` once with HiGHS (builds, solves and disposes a model). Never throws. */
export function solveLpHighs(highs: Highs, p: LpProblem, options: HighsLpOptions = {}): LpResult {
  const problemError = validate(p);
  if (problemError) return emptyResult("highs", "error", "OPTIMIZE_INVALID_PROBLEM", problemError);
  let lp: HighsLp | undefined;
  try {
    lp = createChecked(highs, p, undefined, options);
    return lp.solve();
  } catch (err) {
    return emptyResult("highs", "error", "OPTIMIZE_SOLVER_FAILED", `HiGHS threw: ${String(err)}`);
  } finally {
    lp?.dispose();
  }
}

// ---------------------------------------------------------------------------------------------
// javascript-lp-solver

/**
 * Shadow prices recovered from a primal solution: with B the variables strictly inside their bounds
 * and R the constraints at a limit, stationarity c_B = A_RBᵀ·y_R gives y (least squares, by
 * pseudo-inverse, when degenerate); y_i = ∂obj* / ∂b_i in both senses. Exact at a non-degenerate
 * vertex. `fixed` lists variables to treat as non-basic (the integers of a MILP).
 */
export function activeSetDuals(
  p: LpProblem,
  values: Readonly<Record<string, number>>,
  options: { tolerance?: number; fixed?: ReadonlySet<string> } = {},
): { duals: Record<string, number>; reducedCosts: Record<string, number> } {
  const tol = options.tolerance ?? 1e-7;
  const activity = (c: LpConstraint) =>
    Object.entries(c.coeffs).reduce((s, [v, a]) => s + a * (values[v] ?? 0), 0);
  const binding = p.constraints.filter((c) => {
    const ax = activity(c);
    const scale = 1 + Math.abs(ax);
    return (
      (c.lb !== undefined && Math.abs(ax - c.lb) <= tol * scale) ||
      (c.ub !== undefined && Math.abs(ax - c.ub) <= tol * scale)
    );
  });
  const basic = p.variables.filter((v) => {
    if (options.fixed?.has(v.name)) return false;
    const x = values[v.name] ?? 0;
    return x > lbOf(v) + tol * (1 + Math.abs(x)) && x < ubOf(v) - tol * (1 + Math.abs(x));
  });
  const duals: Record<string, number> = {};
  for (const c of p.constraints) duals[c.name] = 0;
  if (binding.length > 0 && basic.length > 0) {
    const a = new Matrix(basic.length, binding.length);
    basic.forEach((v, j) => {
      binding.forEach((c, i) => {
        a.set(j, i, c.coeffs[v.name] ?? 0);
      });
    });
    const cB = Matrix.columnVector(basic.map((v) => v.cost));
    const y = pseudoInverse(a).mmul(cB);
    binding.forEach((c, i) => {
      duals[c.name] = y.get(i, 0);
    });
  }
  const reducedCosts: Record<string, number> = {};
  for (const v of p.variables) {
    let rc = v.cost;
    for (const c of p.constraints) rc -= (c.coeffs[v.name] ?? 0) * duals[c.name]!;
    reducedCosts[v.name] = Math.abs(rc) <= tol * (1 + Math.abs(v.cost)) ? 0 : rc;
  }
  return { duals, reducedCosts };
}

interface JsLpResult {
  feasible: boolean;
  bounded?: boolean;
  result: number;
  [name: string]: number | boolean | undefined;
}

/**
 * Solves `p` with javascript-lp-solver (meant for problems of a few dozen variables; it is hundreds of
 * times slower than HiGHS at 500). Never throws.
 */
export function solveLpJs(p: LpProblem): LpResult {
  const problemError = validate(p);
  if (problemError)
    return emptyResult("javascript-lp-solver", "error", "OPTIMIZE_INVALID_PROBLEM", problemError);
  // Attribute names are prefixed so that constraint, bound and objective names cannot collide.
  const OBJ = "\u0000objective";
  const constraints: Record<string, { min?: number; max?: number; equal?: number }> = {};
  const variables: Record<string, Record<string, number>> = {};
  const ints: Record<string, 1> = {};
  const unrestricted: Record<string, 1> = {};
  for (const v of p.variables) {
    variables[v.name] = { [OBJ]: v.cost };
    if (v.integer) ints[v.name] = 1;
    const lo = lbOf(v);
    const hi = ubOf(v);
    if (lo !== 0) unrestricted[v.name] = 1;
    const key = `\u0000bound ${v.name}`;
    const bound: { min?: number; max?: number } = {};
    if (lo !== 0 && Number.isFinite(lo)) bound.min = lo;
    if (Number.isFinite(hi)) bound.max = hi;
    if (bound.min !== undefined || bound.max !== undefined) {
      constraints[key] = bound;
      variables[v.name]![key] = 1;
    }
  }
  for (const c of p.constraints) {
    const key = `\u0000row ${c.name}`;
    const lo = c.lb ?? Number.NEGATIVE_INFINITY;
    const hi = c.ub ?? Number.POSITIVE_INFINITY;
    const spec: { min?: number; max?: number; equal?: number } = {};
    if (lo === hi) spec.equal = lo;
    else {
      if (Number.isFinite(lo)) spec.min = lo;
      if (Number.isFinite(hi)) spec.max = hi;
    }
    constraints[key] = spec;
    for (const [name, a] of Object.entries(c.coeffs)) variables[name]![key] = a;
  }
  let raw: JsLpResult;
  try {
    raw = jsLpSolver.Solve({
      optimize: OBJ,
      opType: p.sense,
      constraints,
      variables,
      ints,
      unrestricted,
    }) as JsLpResult;
  } catch (err) {
    return emptyResult(
      "javascript-lp-solver",
      "error",
      "OPTIMIZE_SOLVER_FAILED",
      `solver threw: ${String(err)}`,
    );
  }
  if (!raw.feasible)
    return emptyResult(
      "javascript-lp-solver",
      "infeasible",
      "OPTIMIZE_INFEASIBLE",
      "javascript-lp-solver found no feasible point",
    );
  if (raw.bounded === false || !Number.isFinite(raw.result))
    return emptyResult(
      "javascript-lp-solver",
      "unbounded",
      "OPTIMIZE_UNBOUNDED",
      "javascript-lp-solver reports unbounded",
    );
  const values: Record<string, number> = {};
  let objective = 0;
  for (const v of p.variables) {
    const x = raw[v.name];
    values[v.name] = typeof x === "number" ? x : 0;
    objective += v.cost * values[v.name]!;
  }
  const fixed = new Set(p.variables.filter((v) => v.integer).map((v) => v.name));
  const { duals, reducedCosts } = activeSetDuals(p, values, { fixed });
  return {
    status: "optimal",
    message: "optimal",
    objective,
    values,
    duals,
    reducedCosts,
    columnValues: Float64Array.from(p.variables, (v) => values[v.name] ?? 0),
    rowDuals: Float64Array.from(p.constraints, (c) => duals[c.name] ?? 0),
    columnDuals: Float64Array.from(p.variables, (v) => reducedCosts[v.name] ?? 0),
    solver: "javascript-lp-solver",
  };
}
