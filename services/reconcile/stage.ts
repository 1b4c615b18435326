/**
 * The reconcile stage: a steady-state snapshot and the site model in, a reconciled snapshot (or the
 * reason there is none) out. Pure: no bus, no clock; the service (index.ts) publishes what this returns.
 *
 * Choice of the measurement standard deviation: by default each tag's `sigma` from the site model, not
 * the window's standard error std/√n. A window mean of n samples averages out the meter's noise but not
 * its calibration and installation error, which is what a balance exposes; std/√n shrinks with every
 * sample (and is too small again because plant samples are serially correlated), so it would make every
 * honest calibration offset a "gross error" and fail the global test every cycle. The site model's sigma
 * is the engineer's statement of the meter's total uncertainty at steady state. `sigmaSource:
 * "model+window"` adds the window's standard error in quadrature, for sites whose windows are short or
 * noisy enough that it matters.
 */
import type { Reconciled, ReconciledTag, Snapshot } from "../kit/generated/messages.js";
import type { SiteModel, SiteTag } from "../model/index.js";
import { type BilinearBalance, type BilinearResult, reconcileBilinear } from "./bilinear.js";
import { ReconcileError } from "./errors.js";
import type { GlobalTest } from "./gross-errors.js";
import { type ReconcileResult, reconcileLinear } from "./reconcile.js";

/** Why a snapshot could not be reconciled (codes of the `aborted` cycle event), with their meaning. */
export const RECONCILE_ABORT_CODES = {
  RECONCILE_RANK_DEFICIENT: "the site's balances are linearly dependent: remove the dependent ones",
  RECONCILE_TOO_FEW_VALUES:
    "too few balance tags have good values in the snapshot for the balances to check anything",
  RECONCILE_NOT_CONVERGED: "successive linearization of the bilinear balances did not converge",
  RECONCILE_INPUT_INVALID: "the reconciliation problem built from the snapshot is malformed",
  RECONCILE_FAILED: "an unexpected error in the reconciliation numerics (a bug: the message says where)",
} as const;

/** Code of an abort reason. */
export type ReconcileAbortCode = keyof typeof RECONCILE_ABORT_CODES;

/** Options of {@link reconcileSnapshot}. */
export interface ReconcileStageOptions {
  /** Family-wise significance level of the global, measurement and nodal tests. Default 0.05. */
  readonly alpha?: number;
  /** Most measurements serial elimination may remove per snapshot. Default 5. */
  readonly maxEliminations?: number;
  /** "model" (site-model sigma) or "model+window" (√(σ² + s²/n)). Default "model" (see the module comment). */
  readonly sigmaSource?: "model" | "model+window";
  /** Smallest fraction of the balance tags that must be in the snapshot, in [0, 1]. Default 0.5. */
  readonly minMeasuredFraction?: number;
  /** Smallest number of independent balances left to test (global-test dof) before elimination. Default 1. */
  readonly minRedundancy?: number;
}

/** A stage outcome: the reconciled data, or the reasons the cycle must stop here. */
export type ReconcileOutcome =
  | { readonly ok: true; readonly data: Reconciled }
  | { readonly ok: false; readonly reasons: { code: ReconcileAbortCode; message: string }[] };

interface Variable {
  readonly tag: SiteTag;
  /** Window mean in the model unit, or undefined when the snapshot lacks the tag. */
  readonly measured: number | undefined;
  readonly sigma: number | undefined;
}

function fail(code: ReconcileAbortCode, message: string): ReconcileOutcome {
  return { ok: false, reasons: [{ code, message: message.slice(0, 1000) }] };
}

function globalTestOut(t: GlobalTest): Reconciled["globalTest"] {
  return {
    statistic: t.statistic,
    dof: t.dof,
    critical: t.critical,
    pValue: Math.min(1, Math.max(0, t.pValue)),
    alpha: t.alpha,
    passed: t.passed,
  };
}

/** A starting value in the model unit for an unmeasured bilinear variable: its model default, else mid-range. */
function guess(model: SiteModel, tag: SiteTag): number {
  const slot = model.layout.slots.get(tag.variable);
  const point = model.newPoint();
  const v = slot === undefined ? Number.NaN : point[slot];
  if (v !== undefined && Number.isFinite(v)) return v;
  const mid = (tag.range.min + tag.range.max) / 2;
  return tag.toModel.scale * mid + tag.toModel.offset;
}

/**
 * Reconciles one snapshot against the site model's balances (in model units). Never throws: numerical
 * trouble and unusable snapshots come back as `{ ok: false, reasons }`.
 */
export function reconcileSnapshot(
  snapshot: Snapshot,
  model: SiteModel,
  options: ReconcileStageOptions = {},
): ReconcileOutcome {
  try {
    return reconcileUnsafe(snapshot, model, options);
  } catch (err) {
    if (err instanceof ReconcileError) return fail(err.code, err.message);
    const e = err as { message?: string };
    return fail("RECONCILE_FAILED", e.message ?? String(err));
  }
}

function reconcileUnsafe(
  snapshot: Snapshot,
  model: SiteModel,
  options: ReconcileStageOptions,
): ReconcileOutcome {
  const sigmaSource = options.sigmaSource ?? "model";
  const alpha = options.alpha ?? 0.05;
  const warnings: { code: string; message: string }[] = [];
  const byTag = new Map<string, Variable>();
  for (const s of snapshot.tags) {
    const tag = model.tagById.get(s.tag);
    if (!tag) {
      if (warnings.length < 200)
        warnings.push({
          code: "RECONCILE_TAG_UNKNOWN",
          message: `snapshot tag ${s.tag} is not in the site model: ignored`,
        });
      continue;
    }
    const scale = Math.abs(tag.toModel.scale);
    const sigmaModel = tag.sigma * scale;
    const sigma =
      sigmaSource === "model"
        ? sigmaModel
        : Math.sqrt(sigmaModel ** 2 + s.modelStd ** 2 / Math.max(1, s.count));
    byTag.set(s.tag, { tag, measured: s.modelMean, sigma });
  }
  const excludedWhy = new Map(snapshot.excluded.map((e) => [e.tag, e.reason] as const));

  const base = {
    startMs: snapshot.startMs,
    endMs: snapshot.endMs,
    sigmaSource,
    measurementTests: [] as Reconciled["measurementTests"],
    nodalTests: [] as Reconciled["nodalTests"],
    grossErrors: [] as Reconciled["grossErrors"],
    eliminated: [] as string[],
  };
  const passEntry = (v: Variable): ReconciledTag => ({
    tag: v.tag.id,
    variable: v.tag.variable,
    unit: model.layout.units.get(v.tag.variable) ?? v.tag.unit,
    status: "passed-through",
    measured: v.measured ?? null,
    sigma: v.sigma ?? null,
    value: v.measured ?? null,
    sd: v.sigma ?? null,
    adjustment: v.measured === undefined ? null : 0,
  });

  if (model.balances.length === 0) {
    return {
      ok: true,
      data: {
        ...base,
        method: "pass-through",
        passThrough: "the site model declares no balances",
        tags: [...byTag.values()].map(passEntry),
        globalTest: null,
        initialGlobalTest: null,
        warnings,
      },
    };
  }

  // Variables of the problem: every tag named by a balance, in site-model order.
  const inBalance = new Set<string>();
  for (const b of model.balances)
    for (const t of b.terms) {
      inBalance.add(t.tag);
      if (t.times !== undefined) inBalance.add(t.times);
    }
  const vars: Variable[] = model.tags
    .filter((t) => inBalance.has(t.id))
    .map((t) => byTag.get(t.id) ?? { tag: t, measured: undefined, sigma: undefined });
  const index = new Map(vars.map((v, j) => [v.tag.id, j] as const));
  const missing = vars.filter((v) => v.measured === undefined);
  const minFraction = options.minMeasuredFraction ?? 0.5;
  const measuredCount = vars.length - missing.length;
  const why = (v: Variable) => `${v.tag.id} (${excludedWhy.get(v.tag.id) ?? "not in the snapshot"})`;
  if (measuredCount === 0 || measuredCount < minFraction * vars.length) {
    return fail(
      "RECONCILE_TOO_FEW_VALUES",
      `${measuredCount} of ${vars.length} balance tags have good values (need ${Math.ceil(minFraction * vars.length)}); missing: ${missing.map(why).join(", ")}`,
    );
  }

  const names = vars.map((v) => v.tag.id);
  const y = vars.map((v) => v.measured ?? 0);
  const sigma = vars.map((v) => v.sigma ?? 1);
  const measured = vars.map((v) => v.measured !== undefined);
  const bilinear = model.balances.some((b) => b.bilinear);
  const common = { alpha, maxEliminations: options.maxEliminations ?? 5 };
  let result: ReconcileResult | BilinearResult;
  if (bilinear) {
    const balances: BilinearBalance[] = model.balances.map((b) => ({
      name: b.name,
      terms: b.terms.map((t) => ({
        coef: t.coeff,
        vars: t.times === undefined ? [index.get(t.tag)!] : [index.get(t.tag)!, index.get(t.times)!],
      })),
    }));
    const initial = vars.map((v) => (v.measured === undefined ? guess(model, v.tag) : null));
    result = reconcileBilinear({ balances, y, sigma, measured, names, initial }, common);
  } else {
    const A = model.balances.map((b) => {
      const row = new Array<number>(vars.length).fill(0);
      for (const t of b.terms) row[index.get(t.tag)!]! += t.coeff;
      return row;
    });
    result = reconcileLinear(
      { A, y, sigma, measured, names, balanceNames: model.balances.map((b) => b.name) },
      common,
    );
  }

  const minRedundancy = options.minRedundancy ?? 1;
  if (result.initialGlobalTest.dof < minRedundancy) {
    return fail(
      "RECONCILE_TOO_FEW_VALUES",
      `the balances check ${result.initialGlobalTest.dof} independent combinations of the measured tags (need ${minRedundancy})${missing.length ? `; missing: ${missing.map(why).join(", ")}` : ""}`,
    );
  }

  const redundant = new Set(result.redundancy.redundant);
  const eliminated = new Set(result.eliminated);
  const observable = new Set(result.observability.observable);
  const tags: ReconciledTag[] = vars.map((v, j) => {
    const status: ReconciledTag["status"] = eliminated.has(v.tag.id)
      ? "eliminated"
      : v.measured !== undefined
        ? redundant.has(v.tag.id)
          ? "reconciled"
          : "non-redundant"
        : observable.has(v.tag.id)
          ? "estimated"
          : "unobservable";
    return {
      tag: v.tag.id,
      variable: v.tag.variable,
      unit: model.layout.units.get(v.tag.variable) ?? v.tag.unit,
      status,
      measured: v.measured ?? null,
      sigma: v.sigma ?? null,
      value: result.values[j] ?? null,
      sd: result.sds[j] ?? null,
      adjustment: result.adjustments[j] ?? null,
    };
  });
  for (const v of byTag.values()) if (!inBalance.has(v.tag.id)) tags.push(passEntry(v));

  const unitOf = (tag: string) => tags.find((t) => t.tag === tag)?.unit ?? "1";
  const data: Reconciled = {
    ...base,
    method: bilinear ? "bilinear" : "linear",
    passThrough: null,
    tags,
    globalTest: globalTestOut(result.globalTest),
    initialGlobalTest: globalTestOut(result.initialGlobalTest),
    measurementTests: result.measurementTests.map((t) => ({
      tag: t.name,
      statistic: t.statistic,
      critical: t.critical,
      passed: t.passed,
    })),
    nodalTests: result.nodalTests.map((t) => ({
      balance: t.name.slice(0, 1000),
      statistic: t.statistic,
      critical: t.critical,
      passed: t.passed,
    })),
    grossErrors: result.grossErrors.map((g) => ({
      tag: g.name,
      unit: unitOf(g.name),
      estimatedSize: g.estimatedSize,
      estimatedSizeSd: g.estimatedSizeSd,
      statistic: g.statistic,
      tiedWith: [...g.tiedWith],
    })),
    eliminated: [...result.eliminated],
    warnings,
  };
  if (!result.globalTest.passed) {
    warnings.push({
      code: "RECONCILE_GLOBAL_TEST_FAILED",
      message: `the global test still fails after ${result.eliminated.length} elimination(s) (γ = ${result.globalTest.statistic.toPrecision(4)} > ${result.globalTest.critical.toPrecision(4)})`,
    });
  }
  if ("iterations" in result) {
    data.iterations = result.iterations;
    data.maxBalanceResidual = result.maxBalanceResidual;
  }
  return { ok: true, data };
}
