/**
 * Compiles a schema-valid site-model document into a frozen `SiteModel`: semantic checks (declared
 * symbols, tags, bounds, units, squareness, structure), then residuals, outputs, objective and
 * constraints with their symbolic derivatives compiled once to closures over one Float64Array.
 */

import {
  type SiteModelDocument,
  STEADY_STATE_DEFAULTS,
  type SteadyStatePolicy,
  VALIDATION_DEFAULTS,
  type ValidationPolicy,
} from "./document.js";
import { SiteModelError, type SourceSpot } from "./errors.js";
import {
  checkDim,
  compileMatrix,
  compileScalar,
  compileVector,
  type Dim,
  differentiate,
  ExprIssue,
  inferDim,
  parseConstraint,
  parseEquation,
  parseExpression,
  RESERVED_SYMBOLS,
  type ScalarFn,
  substitute,
  symbolsOf,
  type VectorFn,
} from "./expr.js";
import type { MathNode } from "./mathjs.js";
import { affineConversion, newMath, parseUnit, sameDims, sameScale, type UnitInfo } from "./units.js";

/** Blocks of the symbol-value vector, in slot order. */
export const BLOCKS = ["unknowns", "decisions", "parameters", "disturbances", "prices", "constants"] as const;
/** A block of the symbol-value vector. */
export type Block = (typeof BLOCKS)[number];
/** Blocks that derivatives are taken with respect to. */
export const WRT_BLOCKS = ["unknowns", "decisions", "parameters"] as const;
/** A block that derivatives are taken with respect to. */
export type WrtBlock = (typeof WRT_BLOCKS)[number];

/** Where each block sits in the symbol-value vector ("point"). */
export interface BlockLayout {
  readonly offset: number;
  readonly symbols: readonly string[];
  /** Symbol → index within the block. */
  readonly index: ReadonlyMap<string, number>;
}

/** The symbol-value vector's layout: `point[offset + index]` holds a block's symbol. */
export interface Layout {
  readonly size: number;
  readonly blocks: { readonly [B in Block]: BlockLayout };
  /** Symbol → slot in the point, for every non-output symbol. */
  readonly slots: ReadonlyMap<string, number>;
  /** Output symbol → index in `evalOutputs`' result. */
  readonly outputIndex: ReadonlyMap<string, number>;
  /** Symbol (any, outputs included) → its unit string. */
  readonly units: ReadonlyMap<string, string>;
}

/** An affine unit conversion: `to = scale * from + offset`. */
export interface Affine {
  readonly scale: number;
  readonly offset: number;
}

/** A measured tag, ready for ingest: conversions from source to tag unit and from tag to model unit. */
export interface SiteTag {
  readonly id: string;
  readonly description: string | undefined;
  readonly variable: string;
  /** Kind of symbol the tag measures. */
  readonly variableKind: Block | "outputs";
  readonly unit: string;
  readonly sigma: number;
  readonly range: { readonly min: number; readonly max: number };
  readonly maxRatePerS: number | undefined;
  readonly frozenAfterS: number | undefined;
  readonly staleAfterS: number | undefined;
  readonly key: boolean;
  readonly source:
    | { readonly topic: string | undefined; readonly name: string; readonly toTag: Affine }
    | undefined;
  /** Tag unit → the model symbol's unit. */
  readonly toModel: Affine;
}

/** A decision variable with its bounds and move limits, in its own unit. */
export interface SiteDecision {
  readonly symbol: string;
  readonly unit: string;
  readonly setpointTag: string;
  readonly min: number;
  readonly max: number;
  readonly initial: number;
  readonly maxMovePerCycle: number | undefined;
  readonly rampPerS: number | undefined;
  readonly deadband: number;
}

/** An adjustable parameter. */
export interface SiteParameter {
  readonly symbol: string;
  readonly unit: string;
  readonly initial: number;
  readonly min: number;
  readonly max: number;
  readonly maxChangePerCycle: number | undefined;
}

/** An unknown of the steady-state equations. */
export interface SiteUnknown {
  readonly symbol: string;
  readonly unit: string;
  readonly initial: number;
  readonly min: number;
  readonly max: number;
  readonly scale: number;
}

/** A constraint in the form g ≤ 0 (or g = 0 for `eq`): g = lhs − rhs, or rhs − lhs for ">=". */
export interface SiteConstraint {
  readonly name: string;
  readonly expression: string;
  readonly kind: "hard" | "soft";
  readonly sense: "le" | "eq";
  readonly penalty: number | undefined;
}

/** A reconciliation balance: Σ coeff · tag (· times) = 0, each tag taken in its model variable's unit (`toModel`). */
export interface SiteBalance {
  readonly name: string;
  readonly bilinear: boolean;
  readonly terms: readonly {
    readonly tag: string;
    readonly times: string | undefined;
    readonly coeff: number;
  }[];
}

/** A note from the compiler (e.g. a derivative that fell back to finite differences). */
export interface ModelLogEntry {
  readonly level: "warn" | "info";
  readonly code: "MODEL_DERIVATIVE_NUMERIC";
  readonly message: string;
  readonly at: SourceSpot;
}

/** Receives compiler notes; inject a pino child's method or a test spy. */
export type ModelLogger = (entry: ModelLogEntry) => void;

/** Options of the compiler. */
export interface CompileOptions {
  /** Receives notes such as numeric-derivative fallbacks. Default: none (silent). */
  readonly logger?: ModelLogger;
  /** Run mathjs simplify() on symbolic derivatives (about 0.1 s per entry); the compiler folds 0 and 1 anyway. Default: false. */
  readonly simplifyDerivatives?: boolean;
}

/**
 * A loaded, compiled site model. All numeric functions take a `point` (Float64Array of
 * `layout.size`, see `newPoint`) and write into `out` when given, else allocate.
 * Matrices are dense row-major: rows × (count of the `wrt` block).
 */
export interface SiteModel {
  readonly file: string;
  readonly site: { readonly id: string; readonly name: string; readonly description: string | undefined };
  readonly document: Readonly<SiteModelDocument>;
  readonly layout: Layout;
  readonly tags: readonly SiteTag[];
  readonly tagById: ReadonlyMap<string, SiteTag>;
  readonly decisions: readonly SiteDecision[];
  readonly parameters: readonly SiteParameter[];
  readonly disturbances: readonly {
    readonly symbol: string;
    readonly unit: string;
    readonly tag: string | undefined;
    readonly default: number | undefined;
  }[];
  readonly prices: readonly { readonly symbol: string; readonly unit: string; readonly default: number }[];
  readonly constants: readonly { readonly symbol: string; readonly unit: string; readonly value: number }[];
  readonly unknowns: readonly SiteUnknown[];
  readonly equations: readonly { readonly name: string; readonly expression: string }[];
  readonly outputs: readonly {
    readonly symbol: string;
    readonly unit: string;
    readonly expression: string;
  }[];
  readonly objective: { readonly sense: "max" | "min"; readonly expression: string; readonly unit: string };
  readonly constraints: readonly SiteConstraint[];
  readonly balances: readonly SiteBalance[];
  readonly steadyState: Readonly<SteadyStatePolicy>;
  readonly validation: Readonly<ValidationPolicy>;
  /** Derivative entries computed by central differences, as "expression name / d symbol". */
  readonly numericDerivatives: readonly string[];

  /** A new point filled with defaults: unknown initials, decision initials, parameter initials, disturbance and price defaults (NaN when none), constants. */
  newPoint(): Float64Array;
  /** Writes values by symbol into a block of a point; throws MODEL_INPUT_INVALID on an unknown symbol or a non-finite value. */
  setBlock(point: Float64Array, block: Block, values: Readonly<Record<string, number>>): void;
  /** Reads a block of a point by symbol. */
  getBlock(point: Float64Array, block: Block): Record<string, number>;
  /** Equation residuals (lhs − rhs), one per equation, in equation units. */
  residuals(point: Float64Array, out?: Float64Array): Float64Array;
  /** ∂residuals/∂wrt: equations × count(wrt). */
  jacobian(point: Float64Array, wrt: WrtBlock, out?: Float64Array): Float64Array;
  /** Output values, in `outputs` order. */
  evalOutputs(point: Float64Array, out?: Float64Array): Float64Array;
  /** ∂outputs/∂wrt at fixed unknowns (explicit dependence only): outputs × count(wrt). */
  outputJacobian(point: Float64Array, wrt: WrtBlock, out?: Float64Array): Float64Array;
  /** Objective value as written (maximise or minimise per `objective.sense`). */
  evalObjective(point: Float64Array): number;
  /** ∂objective/∂wrt at fixed unknowns. */
  objectiveGradient(point: Float64Array, wrt: WrtBlock, out?: Float64Array): Float64Array;
  /** Constraint values g (feasible when g ≤ 0, or g = 0 for `eq`), in `constraints` order. */
  evalConstraints(point: Float64Array, out?: Float64Array): Float64Array;
  /** ∂g/∂wrt at fixed unknowns: constraints × count(wrt). */
  constraintJacobian(point: Float64Array, wrt: WrtBlock, out?: Float64Array): Float64Array;
}

/** Maps a JSON path to a file spot; built by the loader from the YAML node ranges. */
export type SpotFinder = (path: string) => SourceSpot;

function fail(spot: SourceSpot, code: SiteModelError["code"], reason: string, cause?: unknown): never {
  throw new SiteModelError(
    code,
    spot,
    `${spot.file}:${spot.line}: ${spot.path}: ${reason}`,
    cause === undefined ? undefined : { cause },
  );
}

function closest(name: string, candidates: Iterable<string>): string | undefined {
  let best: string | undefined;
  let bestDistance = 3;
  for (const c of candidates) {
    const d = editDistance(name.toLowerCase(), c.toLowerCase());
    if (d < bestDistance) {
      best = c;
      bestDistance = d;
    }
  }
  return best;
}

function editDistance(a: string, b: string): number {
  const row = Array.from({ length: b.length + 1 }, (_, j) => j);
  for (let i = 1; i <= a.length; i += 1) {
    let prev = row[0] as number;
    row[0] = i;
    for (let j = 1; j <= b.length; j += 1) {
      const tmp = row[j] as number;
      row[j] = Math.min(
        (row[j] as number) + 1,
        (row[j - 1] as number) + 1,
        prev + (a[i - 1] === b[j - 1] ? 0 : 1),
      );
      prev = tmp;
    }
  }
  return row[b.length] as number;
}

/** Freezes objects and arrays recursively; maps become read-only; typed arrays are left alone. */
function deepFreeze<T>(value: T, seen = new WeakSet<object>()): T {
  if (value === null || typeof value !== "object" || seen.has(value as object)) return value;
  if (ArrayBuffer.isView(value)) return value;
  seen.add(value as object);
  if (value instanceof Map) {
    for (const v of value.values()) deepFreeze(v, seen);
    const refuse = (): never => {
      throw new TypeError("a SiteModel map is read-only");
    };
    Object.assign(value, { set: refuse, delete: refuse, clear: refuse });
  } else {
    for (const key of Object.keys(value as object)) deepFreeze((value as Record<string, unknown>)[key], seen);
  }
  return Object.freeze(value);
}

/**
 * Checks and compiles a schema-valid document. Throws `SiteModelError` on the first problem, naming
 * file, line and JSON path; never returns a half-built model.
 */
export function compileSiteModel(
  doc: SiteModelDocument,
  file: string,
  spot: SpotFinder,
  options: CompileOptions = {},
): SiteModel {
  const math = newMath();
  const simplify = options.simplifyDerivatives ?? false;

  // --- units of every declared symbol
  const unitOf = new Map<string, UnitInfo>();
  const unitAt = (text: string, path: string): UnitInfo => {
    const u = parseUnit(math, text);
    if (typeof u === "string")
      fail(spot(path), "MODEL_UNITS_UNKNOWN", `unit "${text}" is not understood: ${u}`);
    return u;
  };

  // --- symbols: unique, not reserved, one block each
  const kindOf = new Map<string, Block | "outputs">();
  const pathOf = new Map<string, string>();
  const declare = (symbol: string, kind: Block | "outputs", unit: string, path: string): void => {
    if (RESERVED_SYMBOLS.has(symbol)) {
      fail(
        spot(`${path}/symbol`),
        "MODEL_SYMBOL_RESERVED",
        `symbol "${symbol}" is a built-in name; rename it`,
      );
    }
    const earlier = pathOf.get(symbol);
    if (earlier !== undefined) {
      fail(
        spot(`${path}/symbol`),
        "MODEL_DUPLICATE_NAME",
        `symbol "${symbol}" is already declared at ${earlier} (line ${spot(earlier).line})`,
      );
    }
    kindOf.set(symbol, kind);
    pathOf.set(symbol, path);
    unitOf.set(symbol, unitAt(unit, `${path}/unit`));
  };
  const constantsDoc = doc.constants ?? [];
  const decisionsDoc = doc.decisions ?? [];
  const parametersDoc = doc.parameters ?? [];
  const disturbancesDoc = doc.disturbances ?? [];
  const pricesDoc = doc.prices ?? [];
  const outputsDoc = doc.model.outputs ?? [];
  const unknownsDoc = doc.model.unknowns;
  doc.model.unknowns.forEach((s, i) => {
    declare(s.symbol, "unknowns", s.unit, `/model/unknowns/${i}`);
  });
  decisionsDoc.forEach((s, i) => {
    declare(s.symbol, "decisions", s.unit, `/decisions/${i}`);
  });
  parametersDoc.forEach((s, i) => {
    declare(s.symbol, "parameters", s.unit, `/parameters/${i}`);
  });
  disturbancesDoc.forEach((s, i) => {
    declare(s.symbol, "disturbances", s.unit, `/disturbances/${i}`);
  });
  pricesDoc.forEach((s, i) => {
    declare(s.symbol, "prices", s.unit, `/prices/${i}`);
  });
  constantsDoc.forEach((s, i) => {
    declare(s.symbol, "constants", s.unit, `/constants/${i}`);
  });
  outputsDoc.forEach((s, i) => {
    declare(s.symbol, "outputs", s.unit, `/model/outputs/${i}`);
  });

  const uniqueNames = (items: readonly { name: string }[], base: string, what: string): void => {
    const seen = new Map<string, number>();
    items.forEach((item, i) => {
      const j = seen.get(item.name);
      if (j !== undefined) {
        fail(
          spot(`${base}/${i}/name`),
          "MODEL_DUPLICATE_NAME",
          `${what} "${item.name}" is already used at ${base}/${j} (line ${spot(`${base}/${j}`).line})`,
        );
      }
      seen.set(item.name, i);
    });
  };
  uniqueNames(doc.model.equations, "/model/equations", "equation name");
  uniqueNames(doc.constraints ?? [], "/constraints", "constraint name");
  uniqueNames(doc.balances ?? [], "/balances", "balance name");

  // --- bounds
  const checkRange = (
    min: number | undefined,
    max: number | undefined,
    initial: number | undefined,
    path: string,
  ) => {
    if (min !== undefined && max !== undefined && !(min < max)) {
      fail(spot(`${path}/min`), "MODEL_BOUNDS_INVALID", `min ${min} is not below max ${max}`);
    }
    if (
      initial !== undefined &&
      ((min !== undefined && initial < min) || (max !== undefined && initial > max))
    ) {
      fail(
        spot(`${path}/initial`),
        "MODEL_BOUNDS_INVALID",
        `initial ${initial} lies outside [${min}, ${max}]`,
      );
    }
  };

  // --- tags
  const tagIds = new Map<string, number>();
  const tags: SiteTag[] = (doc.tags ?? []).map((t, i) => {
    const path = `/tags/${i}`;
    const j = tagIds.get(t.id);
    if (j !== undefined) {
      fail(spot(`${path}/id`), "MODEL_DUPLICATE_NAME", `tag "${t.id}" is already declared at /tags/${j}`);
    }
    tagIds.set(t.id, i);
    const kind = kindOf.get(t.variable);
    const variableUnit = unitOf.get(t.variable);
    if (kind === undefined || variableUnit === undefined) {
      const hint = closest(t.variable, kindOf.keys());
      fail(
        spot(`${path}/variable`),
        "MODEL_SYMBOL_UNDECLARED",
        `tag ${t.id} measures "${t.variable}", which no section declares${hint ? ` (did you mean "${hint}"?)` : ""}`,
      );
    }
    const tagUnit = unitAt(t.unit, `${path}/unit`);
    if (!sameDims(tagUnit.dims, variableUnit.dims)) {
      fail(
        spot(`${path}/unit`),
        "MODEL_UNITS_MISMATCH",
        `tag ${t.id} is in "${t.unit}" but ${t.variable} is in "${variableUnit.text}" (different dimensions)`,
      );
    }
    checkRange(t.range.min, t.range.max, undefined, `${path}/range`);
    let source: SiteTag["source"];
    if (t.source !== undefined) {
      let toTag: Affine = { scale: t.source.scale ?? 1, offset: t.source.offset ?? 0 };
      if (t.source.unit !== undefined) {
        const from = unitAt(t.source.unit, `${path}/source/unit`);
        if (!sameDims(from.dims, tagUnit.dims)) {
          fail(
            spot(`${path}/source/unit`),
            "MODEL_UNITS_MISMATCH",
            `source unit "${t.source.unit}" cannot be converted to the tag unit "${t.unit}"`,
          );
        }
        toTag = affineConversion(from, tagUnit);
      }
      source = { topic: t.source.topic, name: t.source.name, toTag };
    }
    return {
      id: t.id,
      description: t.description,
      variable: t.variable,
      variableKind: kind,
      unit: t.unit,
      sigma: t.sigma,
      range: { min: t.range.min, max: t.range.max },
      maxRatePerS: t.maxRatePerS,
      frozenAfterS: t.frozenAfterS,
      staleAfterS: t.staleAfterS,
      key: t.key ?? false,
      source,
      toModel: affineConversion(tagUnit, variableUnit),
    };
  });
  const needTag = (id: string, path: string, who: string): void => {
    if (!tagIds.has(id)) {
      const hint = closest(id, tagIds.keys());
      fail(
        spot(path),
        "MODEL_TAG_UNKNOWN",
        `${who} names tag "${id}", which /tags does not declare${hint ? ` (did you mean "${hint}"?)` : ""}`,
      );
    }
  };

  // --- decisions, parameters, disturbances, prices, unknowns
  const decisions: SiteDecision[] = decisionsDoc.map((d, i) => {
    const path = `/decisions/${i}`;
    needTag(d.setpointTag, `${path}/setpointTag`, `decision ${d.symbol}`);
    if (d.min === undefined || d.max === undefined) {
      fail(
        spot(path),
        "MODEL_DECISION_UNBOUNDED",
        `decision ${d.symbol} needs both min and max (an optimizer must never send an unbounded setpoint)`,
      );
    }
    checkRange(d.min, d.max, d.initial, path);
    return {
      symbol: d.symbol,
      unit: d.unit,
      setpointTag: d.setpointTag,
      min: d.min,
      max: d.max,
      initial: d.initial ?? (d.min + d.max) / 2,
      maxMovePerCycle: d.maxMovePerCycle,
      rampPerS: d.rampPerS,
      deadband: d.deadband ?? 0,
    };
  });
  const parameters: SiteParameter[] = parametersDoc.map((p, i) => {
    checkRange(p.min, p.max, p.initial, `/parameters/${i}`);
    return {
      symbol: p.symbol,
      unit: p.unit,
      initial: p.initial,
      min: p.min,
      max: p.max,
      maxChangePerCycle: p.maxChangePerCycle,
    };
  });
  const disturbances = disturbancesDoc.map((d, i) => {
    if (d.tag !== undefined) needTag(d.tag, `/disturbances/${i}/tag`, `disturbance ${d.symbol}`);
    return { symbol: d.symbol, unit: d.unit, tag: d.tag, default: d.default };
  });
  const prices = pricesDoc.map((p) => ({ symbol: p.symbol, unit: p.unit, default: p.default }));
  const constants = constantsDoc.map((c) => ({ symbol: c.symbol, unit: c.unit, value: c.value }));
  const unknowns: SiteUnknown[] = unknownsDoc.map((u, i) => {
    checkRange(u.min, u.max, u.initial, `/model/unknowns/${i}`);
    return {
      symbol: u.symbol,
      unit: u.unit,
      initial: u.initial,
      min: u.min ?? Number.NEGATIVE_INFINITY,
      max: u.max ?? Number.POSITIVE_INFINITY,
      scale: u.scale ?? Math.max(Math.abs(u.initial), 1e-3),
    };
  });

  // --- layout
  const blockSymbols: Record<Block, string[]> = {
    unknowns: unknowns.map((u) => u.symbol),
    decisions: decisions.map((d) => d.symbol),
    parameters: parameters.map((p) => p.symbol),
    disturbances: disturbances.map((d) => d.symbol),
    prices: prices.map((p) => p.symbol),
    constants: constants.map((c) => c.symbol),
  };
  const slots = new Map<string, number>();
  let size = 0;
  const blocks = {} as Record<Block, BlockLayout>;
  for (const b of BLOCKS) {
    const index = new Map<string, number>();
    blockSymbols[b].forEach((s, i) => {
      index.set(s, i);
      slots.set(s, size + i);
    });
    blocks[b] = { offset: size, symbols: blockSymbols[b], index };
    size += blockSymbols[b].length;
  }

  // --- expressions
  const guard = <T>(path: string, work: () => T): T => {
    try {
      return work();
    } catch (err) {
      if (err instanceof ExprIssue) fail(spot(path), err.code, err.message, err);
      throw err;
    }
  };
  const declaredCheck = (nodes: readonly MathNode[], path: string): void => {
    for (const node of nodes) {
      for (const s of symbolsOf(node)) {
        if (kindOf.has(s)) continue;
        const hint = closest(s, kindOf.keys());
        fail(
          spot(path),
          "MODEL_SYMBOL_UNDECLARED",
          `symbol "${s}" is not declared in any section${hint ? ` (did you mean "${hint}"?)` : ""}`,
        );
      }
    }
  };

  // Outputs: parse, order so each output follows the outputs it uses, expand, check units.
  const outputAst = outputsDoc.map((o, i) => {
    const path = `/model/outputs/${i}/expression`;
    const node = guard(path, () => parseExpression(math, o.expression));
    declaredCheck([node], path);
    return node;
  });
  const outputIndex = new Map(outputsDoc.map((o, i) => [o.symbol, i] as const));
  const expanded = new Map<string, MathNode>();
  const state = new Map<string, "visiting" | "done">();
  const expand = (i: number, chain: string[]): void => {
    const o = outputsDoc[i];
    const node = outputAst[i];
    if (o === undefined || node === undefined) return;
    if (state.get(o.symbol) === "done") return;
    if (state.get(o.symbol) === "visiting") {
      fail(
        spot(`/model/outputs/${i}/expression`),
        "MODEL_OUTPUT_CYCLE",
        `outputs refer to each other in a cycle: ${[...chain, o.symbol].join(" -> ")}`,
      );
    }
    state.set(o.symbol, "visiting");
    for (const s of symbolsOf(node)) {
      const j = outputIndex.get(s);
      if (j !== undefined) expand(j, [...chain, o.symbol]);
    }
    expanded.set(o.symbol, substitute(node, expanded, math));
    state.set(o.symbol, "done");
  };
  outputsDoc.forEach((o, i) => {
    expand(i, []);
    if ((o.units ?? "check") === "check") {
      guard(`/model/outputs/${i}/expression`, () =>
        checkDim(
          math,
          inferDim(math, outputAst[i] as MathNode, unitOf),
          unitOf.get(o.symbol) as UnitInfo,
          `output ${o.symbol}`,
        ),
      );
    }
  });
  const expandedOutputs = outputsDoc.map((o) => expanded.get(o.symbol) as MathNode);

  // Equations: residual = lhs − rhs; units of both sides must agree, and match the declared unit.
  const residualAst = doc.model.equations.map((eq, i) => {
    const path = `/model/equations/${i}/expression`;
    const rel = guard(path, () => parseEquation(math, eq.expression));
    declaredCheck(rel.rhs ? [rel.lhs, rel.rhs] : [rel.lhs], path);
    if ((eq.units ?? "check") === "check") {
      guard(path, () => {
        const l = inferDim(math, rel.lhs, unitOf);
        const r: Dim = rel.rhs ? inferDim(math, rel.rhs, unitOf) : { free: true };
        if (!l.free && !r.free)
          checkDim(math, r, { text: "", dims: l.dims, scale: l.scale, offset: 0 }, "the right-hand side");
        const declared = eq.unit === undefined ? undefined : unitAt(eq.unit, `/model/equations/${i}/unit`);
        if (declared) checkDim(math, l.free ? r : l, declared, `equation ${eq.name}`);
      });
    }
    const residual = rel.rhs
      ? new math.OperatorNode("-", "subtract", [rel.lhs, new math.ParenthesisNode(rel.rhs)])
      : rel.lhs;
    return substitute(residual, expanded, math);
  });

  // Squareness and structure: Kuhn's augmenting paths pair each equation with an unknown it contains.
  if (residualAst.length !== unknowns.length) {
    fail(
      spot("/model/equations"),
      "MODEL_SQUARE",
      `${residualAst.length} equation(s) for ${unknowns.length} unknown(s); a steady-state model must be square`,
    );
  }
  const incidence = residualAst.map((r) =>
    symbolsOf(r)
      .map((s) => blocks.unknowns.index.get(s))
      .filter((j): j is number => j !== undefined),
  );
  const matchOfUnknown = new Int32Array(unknowns.length).fill(-1);
  const augment = (row: number, seen: Uint8Array): boolean => {
    for (const col of incidence[row] ?? []) {
      if (seen[col]) continue;
      seen[col] = 1;
      const other = matchOfUnknown[col] as number;
      if (other < 0 || augment(other, seen)) {
        matchOfUnknown[col] = row;
        return true;
      }
    }
    return false;
  };
  residualAst.forEach((_, row) => {
    if (!augment(row, new Uint8Array(unknowns.length))) {
      fail(
        spot(`/model/equations/${row}`),
        "MODEL_STRUCTURALLY_SINGULAR",
        `equation ${doc.model.equations[row]?.name} cannot be paired with an unknown of its own: some unknowns appear in too few equations`,
      );
    }
  });

  // Objective and constraints.
  const objectivePath = "/objective/expression";
  const objectiveNode = guard(objectivePath, () => parseExpression(math, doc.objective.expression));
  declaredCheck([objectiveNode], objectivePath);
  const objectiveUnit = unitAt(doc.objective.unit, "/objective/unit");
  if ((doc.objective.units ?? "check") === "check") {
    guard(objectivePath, () =>
      checkDim(math, inferDim(math, objectiveNode, unitOf), objectiveUnit, "the objective"),
    );
  }
  const objectiveAst = substitute(objectiveNode, expanded, math);

  const constraints: SiteConstraint[] = [];
  const constraintAst = (doc.constraints ?? []).map((c, i) => {
    const path = `/constraints/${i}/expression`;
    const rel = guard(path, () => parseConstraint(math, c.expression));
    declaredCheck([rel.lhs, rel.rhs as MathNode], path);
    if ((c.units ?? "check") === "check") {
      guard(path, () => {
        const l = inferDim(math, rel.lhs, unitOf);
        const r = inferDim(math, rel.rhs as MathNode, unitOf);
        if (!l.free && !r.free)
          checkDim(math, r, { text: "", dims: l.dims, scale: l.scale, offset: 0 }, "the right-hand side");
      });
    }
    constraints.push({
      name: c.name,
      expression: c.expression,
      kind: c.kind,
      sense: rel.op === "==" ? "eq" : "le",
      penalty: c.penalty,
    });
    const [a, b] = rel.op === ">=" ? [rel.rhs as MathNode, rel.lhs] : [rel.lhs, rel.rhs as MathNode];
    return substitute(
      new math.OperatorNode("-", "subtract", [a, new math.ParenthesisNode(b)]),
      expanded,
      math,
    );
  });

  // Balances: tags declared; every term in the same unit (coefficients are dimensionless).
  // Balances are written in model units (each tag converted with its toModel first), so a flow logged in
  // t/h and one in kg/s can share a balance with plain coefficients.
  const tagUnits = new Map(tags.map((t) => [t.id, unitOf.get(t.variable) as UnitInfo] as const));
  const balances: SiteBalance[] = (doc.balances ?? []).map((b, i) => {
    let first: { dims: readonly number[]; scale: number; text: string } | undefined;
    b.terms.forEach((term, k) => {
      const path = `/balances/${i}/terms/${k}`;
      needTag(term.tag, `${path}/tag`, `balance ${b.name}`);
      if (term.times !== undefined) needTag(term.times, `${path}/times`, `balance ${b.name}`);
      const u = tagUnits.get(term.tag) as UnitInfo;
      const v = term.times === undefined ? undefined : (tagUnits.get(term.times) as UnitInfo);
      const dims = v ? u.dims.map((d, j) => d + (v.dims[j] ?? 0)) : u.dims;
      const scale = v ? u.scale * v.scale : u.scale;
      const text = v ? `${u.text}·${v.text}` : u.text;
      if (first === undefined) first = { dims, scale, text };
      else if (!sameDims(first.dims, dims) || !sameScale(first.scale, scale)) {
        fail(spot(path), "MODEL_UNITS_MISMATCH", `balance ${b.name} adds ${first.text} and ${text}`);
      }
    });
    return {
      name: b.name,
      bilinear: b.terms.some((t) => t.times !== undefined),
      terms: b.terms.map((t) => ({ tag: t.tag, times: t.times, coeff: t.coeff })),
    };
  });

  // --- compile values and derivatives
  const numericDerivatives: string[] = [];
  const compileGroup = (rows: readonly MathNode[], names: readonly string[], paths: readonly string[]) => {
    const rowFns: ScalarFn[] = rows.map((r) => compileScalar(r, slots));
    const value = compileVector(rows, slots);
    const matrices = {} as Record<WrtBlock, VectorFn>;
    for (const wrt of WRT_BLOCKS) {
      const cols = blocks[wrt].symbols;
      const entries = differentiate(
        math,
        rows,
        cols,
        slots,
        (row, symbol, reason) => {
          const label = `${names[row]} / d ${symbol}`;
          numericDerivatives.push(label);
          options.logger?.({
            level: "warn",
            code: "MODEL_DERIVATIVE_NUMERIC",
            message: `no symbolic derivative for ${label} (${reason}); using central differences`,
            at: spot(paths[row] ?? ""),
          });
        },
        simplify,
      );
      matrices[wrt] = compileMatrix(
        entries,
        cols.length,
        cols.map((s) => slots.get(s) as number),
        rowFns,
        slots,
      );
    }
    return { value, matrices, rows: rows.length };
  };
  const eqGroup = compileGroup(
    residualAst,
    doc.model.equations.map((e) => `equation ${e.name}`),
    doc.model.equations.map((_, i) => `/model/equations/${i}/expression`),
  );
  const outGroup = compileGroup(
    expandedOutputs,
    outputsDoc.map((o) => `output ${o.symbol}`),
    outputsDoc.map((_, i) => `/model/outputs/${i}/expression`),
  );
  const objGroup = compileGroup([objectiveAst], ["objective"], [objectivePath]);
  const conGroup = compileGroup(
    constraintAst,
    constraints.map((c) => `constraint ${c.name}`),
    constraints.map((_, i) => `/constraints/${i}/expression`),
  );

  const defaults = new Float64Array(size);
  const fill = (block: Block, values: readonly number[]) => {
    values.forEach((v, i) => {
      defaults[blocks[block].offset + i] = v;
    });
  };
  fill(
    "unknowns",
    unknowns.map((u) => u.initial),
  );
  fill(
    "decisions",
    decisions.map((d) => d.initial),
  );
  fill(
    "parameters",
    parameters.map((p) => p.initial),
  );
  fill(
    "disturbances",
    disturbances.map((d) => d.default ?? Number.NaN),
  );
  fill(
    "prices",
    prices.map((p) => p.default),
  );
  fill(
    "constants",
    constants.map((c) => c.value),
  );

  const count = (wrt: Block): number => blocks[wrt].symbols.length;
  const buffer = (out: Float64Array | undefined, n: number): Float64Array => {
    if (out === undefined) return new Float64Array(n);
    if (out.length !== n) {
      throw new SiteModelError(
        "MODEL_INPUT_INVALID",
        { file, line: 0, path: "" },
        `output buffer has length ${out.length}, expected ${n}`,
      );
    }
    return out;
  };
  const checked = (point: Float64Array): Float64Array => {
    checkPoint(point);
    return point;
  };
  const checkPoint = (point: Float64Array): void => {
    if (point.length !== size) {
      throw new SiteModelError(
        "MODEL_INPUT_INVALID",
        { file, line: 0, path: "" },
        `point has length ${point.length}, expected ${size} (use model.newPoint())`,
      );
    }
  };
  const objectiveOut = new Float64Array(1);
  const unitsBySymbol = new Map<string, string>();
  for (const [s, u] of unitOf) unitsBySymbol.set(s, u.text);

  const model: SiteModel = {
    file,
    site: { id: doc.site.id, name: doc.site.name, description: doc.site.description },
    document: doc,
    layout: { size, blocks, slots, outputIndex, units: unitsBySymbol },
    tags,
    tagById: new Map(tags.map((t) => [t.id, t])),
    decisions,
    parameters,
    disturbances,
    prices,
    constants,
    unknowns,
    equations: doc.model.equations.map((e) => ({ name: e.name, expression: e.expression })),
    outputs: outputsDoc.map((o) => ({ symbol: o.symbol, unit: o.unit, expression: o.expression })),
    objective: { sense: doc.objective.sense, expression: doc.objective.expression, unit: doc.objective.unit },
    constraints,
    balances,
    steadyState: { ...STEADY_STATE_DEFAULTS, ...doc.steadyState },
    validation: { ...VALIDATION_DEFAULTS, ...doc.validation },
    numericDerivatives,
    newPoint: () => defaults.slice(),
    setBlock(point, block, values) {
      checkPoint(point);
      const layout = blocks[block];
      for (const [symbol, value] of Object.entries(values)) {
        const i = layout.index.get(symbol);
        if (i === undefined || !Number.isFinite(value)) {
          throw new SiteModelError(
            "MODEL_INPUT_INVALID",
            { file, line: 0, path: `/${block}` },
            i === undefined
              ? `"${symbol}" is not one of the ${block} of site ${doc.site.id} (${layout.symbols.join(", ") || "none"})`
              : `${block} value ${symbol} = ${value} is not a finite number`,
          );
        }
        point[layout.offset + i] = value;
      }
    },
    getBlock(point, block) {
      checkPoint(point);
      const layout = blocks[block];
      const result: Record<string, number> = {};
      layout.symbols.forEach((s, i) => {
        result[s] = point[layout.offset + i] as number;
      });
      return result;
    },
    residuals: (point, out) => eqGroup.value(checked(point), buffer(out, eqGroup.rows)),
    jacobian: (point, wrt, out) =>
      eqGroup.matrices[wrt](checked(point), buffer(out, eqGroup.rows * count(wrt))),
    evalOutputs: (point, out) => outGroup.value(checked(point), buffer(out, outGroup.rows)),
    outputJacobian: (point, wrt, out) =>
      outGroup.matrices[wrt](checked(point), buffer(out, outGroup.rows * count(wrt))),
    evalObjective: (point) => objGroup.value(checked(point), objectiveOut)[0] as number,
    objectiveGradient: (point, wrt, out) => objGroup.matrices[wrt](checked(point), buffer(out, count(wrt))),
    evalConstraints: (point, out) => conGroup.value(checked(point), buffer(out, conGroup.rows)),
    constraintJacobian: (point, wrt, out) =>
      conGroup.matrices[wrt](checked(point), buffer(out, conGroup.rows * count(wrt))),
  };
  return deepFreeze(model);
}
