/**
 * The optimize service: wiring only. Prices (rto.<site>.prices) and snapshots (rto.<site>.snapshot)
 * update its state; a model event (rto.<site>.model, the estimate stage done for a cycle) triggers
 * one optimization for that cycle with the parameters in force, the latest prices, and the snapshot
 * of that cycle (current decisions from the setpoint tags, disturbances from their tags). The result
 * is an rto.proposal.v1 on rto.<site>.proposal and "stage-done" on rto.<site>.cycle, or — when the
 * problem is infeasible or the solve fails — "aborted" on rto.<site>.cycle with coded reasons naming
 * the conflicting constraints, and no proposal (the last good setpoints stay where they are).
 */
import type { Highs } from "highs";
import type { Event } from "../kit/envelope.js";
import type { CycleStatus, ModelUpdate, Prices, Snapshot } from "../kit/generated/messages.js";
import { type Deps, type Service, startRuntime } from "../kit/service.js";
import { loadSiteModelFile, type SiteModel } from "../model/index.js";
import { affineConversion, newMath, parseUnit, sameDims } from "../model/units.js";
import type { OptimizeConfig } from "./config.js";
import { loadHighs } from "./lp.js";
import { initialMismatchState, type Measured, type MismatchState } from "./mismatch.js";
import { isLinearSite, type OperatingContext } from "./problem.js";
import { disposeLpCache, type LpCache, runOptimization, type StageOptions } from "./stage.js";

/** What optimize may be given besides the kit's dependencies. */
export interface OptimizeDeps extends Deps {
  /** An already loaded site model (tests, the demo); default: loaded from `optimize.siteModelFile`. */
  model?: SiteModel;
}

/** Converts values given in `from` into `to`; undefined when the units are not of one dimension. */
function converter(
  math: ReturnType<typeof newMath>,
  from: string,
  to: string,
): ((v: number) => number) | undefined {
  if (from === to) return (v) => v;
  const a = parseUnit(math, from);
  const b = parseUnit(math, to);
  if (typeof a === "string" || typeof b === "string" || !sameDims(a.dims, b.dims)) return undefined;
  const c = affineConversion(a, b);
  return (v) => c.scale * v + c.offset;
}

/** What a snapshot gives the optimizer: the operating point, or which inputs are missing. */
export function operatingPointOf(
  model: SiteModel,
  snapshot: Snapshot,
):
  | { ok: true; current: Record<string, number>; disturbances: Record<string, number>; measured: Measured }
  | { ok: false; missing: string[] } {
  const byTag = new Map(snapshot.tags.map((t) => [t.tag, t]));
  const excluded = new Map(snapshot.excluded.map((e) => [e.tag, e.reason]));
  const missing: string[] = [];
  const current: Record<string, number> = {};
  for (const d of model.decisions) {
    const t = byTag.get(d.setpointTag);
    if (t) current[d.symbol] = t.modelMean;
    else
      missing.push(
        `decision ${d.symbol}: setpoint tag ${d.setpointTag} not in the snapshot${excluded.has(d.setpointTag) ? ` (${excluded.get(d.setpointTag)})` : ""}`,
      );
  }
  const disturbances: Record<string, number> = {};
  for (const d of model.disturbances) {
    const t = d.tag === undefined ? undefined : byTag.get(d.tag);
    if (t) disturbances[d.symbol] = t.modelMean;
    else if (d.default !== undefined) disturbances[d.symbol] = d.default;
    else missing.push(`disturbance ${d.symbol}: tag ${d.tag ?? "(none)"} not in the snapshot and no default`);
  }
  const measured: Record<string, number> = {};
  for (const t of snapshot.tags) measured[t.variable] = t.modelMean;
  return missing.length > 0 ? { ok: false, missing } : { ok: true, current, disturbances, measured };
}

/** Starts optimize. Throws on a bad site model or when the broker cannot be reached. */
export async function start(config: Readonly<OptimizeConfig>, deps: OptimizeDeps = {}): Promise<Service> {
  const o = config.optimize;
  const model = deps.model ?? (await loadSiteModelFile(o.siteModelFile));
  const math = newMath();
  const options: StageOptions = {
    formulation: o.formulation,
    moveLimits: o.moveLimits,
    lp: o.lp,
    lpSolver: o.lpSolver,
    tinyLpMaxVariables: o.tinyLpMaxVariables,
    sqp: { maxIterations: o.maxIterations, tolerance: o.tolerance },
    mismatch: {
      gain: o.gain,
      maxConditionNumber: o.maxConditionNumber,
      minSpread: o.minSpread,
      excitation: o.excitation,
      maxSamplesPerPoint: o.maxSamplesPerPoint,
      maxPoints: o.maxPoints,
    },
  };
  // HiGHS is loaded only for a linear site (its WebAssembly costs start-up time and memory).
  let highs: Highs | undefined;
  if (o.lp !== "never" && o.lpSolver !== "javascript-lp-solver" && isLinearSite(model, {}))
    highs = await loadHighs();
  const lpCache: LpCache = {};

  const rt = await startRuntime("optimize", config, deps);
  rt.onStop(() => disposeLpCache(lpCache));
  const prices: Record<string, number> = {};
  const parameters: Record<string, number> = {};
  const snapshots = new Map<string, Event<"rto.snapshot.v1">>();
  let latestSnapshot: Event<"rto.snapshot.v1"> | undefined;
  let mismatch: MismatchState = initialMismatchState(model, o.mismatch);
  const modelUnits = model.layout.units;

  const takePrices = (data: Prices) => {
    for (const p of data.prices) {
      const unit = modelUnits.get(p.symbol);
      if (!model.layout.blocks.prices.index.has(p.symbol) || unit === undefined) {
        rt.log.warn({ symbol: p.symbol }, "price for a symbol the site model does not declare: ignored");
        continue;
      }
      const conv = converter(math, p.unit, unit);
      if (!conv) {
        rt.log.warn(
          { symbol: p.symbol, unit: p.unit, modelUnit: unit },
          "price unit not convertible: ignored",
        );
        continue;
      }
      prices[p.symbol] = conv(p.value);
    }
  };
  const takeParameters = (data: ModelUpdate) => {
    for (const p of data.parameters) {
      const unit = modelUnits.get(p.symbol);
      if (!model.layout.blocks.parameters.index.has(p.symbol) || unit === undefined) continue;
      const conv = converter(math, p.unit, unit);
      if (conv && Number.isFinite(p.inForce)) parameters[p.symbol] = conv(p.inForce);
    }
  };

  const publishCycle = async (data: CycleStatus, causedBy: Event): Promise<void> => {
    await rt.events.publish("cycle", "rto.cycle.v1", data, { causedBy });
  };

  rt.track(
    await rt.events.on(rt.events.subject("prices"), ["rto.prices.v1"], (event) => {
      takePrices(event.data);
    }),
  );
  // The setpoints the control side holds, by decision symbol in model units. The move box and the
  // operating points of modifier adaptation are centred on them rather than on the measured means:
  // validate checks moves against the same setpoints, and a noisy PV must not make two identical
  // operating points look like two different ones to the plant-gradient estimate.
  const inForce = new Map<string, number>();
  const bySetpointTag = new Map(model.decisions.map((d) => [d.setpointTag, d]));
  rt.track(
    await rt.events.on(rt.events.subject("readback"), ["rto.readback.v1"], (event) => {
      for (const sp of event.data.setpoints) {
        const d = bySetpointTag.get(sp.tag) ?? bySetpointTag.get(sp.tag.replace(/\.SP$/, ""));
        const unit = d ? modelUnits.get(d.symbol) : undefined;
        if (!d || unit === undefined) continue;
        const conv = converter(math, sp.unit, unit);
        if (conv && Number.isFinite(sp.target)) inForce.set(d.symbol, conv(sp.target));
      }
    }),
  );
  rt.track(
    await rt.events.on(rt.events.subject("snapshot"), ["rto.snapshot.v1"], (event) => {
      latestSnapshot = event;
      if (event.cycleid) {
        snapshots.set(event.cycleid, event);
        while (snapshots.size > o.snapshotsKept) {
          const oldest = snapshots.keys().next().value;
          if (oldest === undefined) break;
          snapshots.delete(oldest);
        }
      }
    }),
  );
  rt.track(
    await rt.events.on(rt.events.subject("model"), ["rto.model.v1"], async (event) => {
      takeParameters(event.data);
      if (event.data.status === "rejected" || event.data.status === "failed") {
        // The estimate stage owns that cycle's verdict; optimizing on it would second-guess it.
        rt.log.info(
          { cycleid: event.cycleid, status: event.data.status },
          "model event without an accepted estimate: no optimization",
        );
        return;
      }
      const snap = (event.cycleid ? snapshots.get(event.cycleid) : undefined) ?? latestSnapshot;
      if (!snap) {
        await publishCycle(
          {
            status: "aborted",
            stage: "optimize",
            reasons: [
              {
                code: "OPTIMIZE_INPUT_MISSING",
                message: "no snapshot received yet: the current operating point is unknown",
              },
            ],
          },
          event,
        );
        return;
      }
      const op = operatingPointOf(model, snap.data);
      if (!op.ok) {
        await publishCycle(
          {
            status: "aborted",
            stage: "optimize",
            reasons: op.missing
              .slice(0, 50)
              .map((m) => ({ code: "OPTIMIZE_INPUT_MISSING", message: m.slice(0, 1000) })),
          },
          event,
        );
        return;
      }
      const current = { ...op.current };
      for (const [symbol, value] of inForce) current[symbol] = value;
      const context: OperatingContext = {
        parameters: { ...parameters },
        prices: { ...prices },
        disturbances: op.disturbances,
        current,
      };
      const result = runOptimization(
        {
          model,
          context,
          mismatch,
          measured: op.measured,
          ...(event.cycleid ? { cycleid: event.cycleid } : {}),
          ...(highs ? { highs } : {}),
          lpCache,
          timerMs: () => performance.now(),
        },
        options,
      );
      mismatch = result.mismatch;
      if (result.status === "aborted") {
        const reasons = [...result.reasons];
        if (
          result.conflicting.length > 0 &&
          !reasons.some((r) => r.message.includes(result.conflicting[0]!))
        ) {
          reasons.push({
            code: "OPTIMIZE_INFEASIBLE",
            message: `conflicting: ${result.conflicting.join(", ")}`,
          });
        }
        rt.log.warn({ cycleid: event.cycleid, reasons }, "optimization aborted");
        await publishCycle(
          {
            status: "aborted",
            stage: "optimize",
            outcome: "no-proposal",
            reasons: reasons.slice(0, 50).map((r) => ({ code: r.code, message: r.message.slice(0, 1000) })),
          },
          event,
        );
        return;
      }
      const proposal = await rt.events.publish("proposal", "rto.proposal.v1", result.proposal, {
        causedBy: event,
      });
      rt.log.info(
        {
          cycleid: event.cycleid,
          change: result.proposal.objective.change,
          solver: result.proposal.solver.name,
          iterations: result.proposal.solver.iterations,
        },
        "proposal published",
      );
      await publishCycle(
        { status: "stage-done", stage: "optimize", outcome: "proposed", eventIds: [proposal.id] },
        event,
      );
    }),
  );
  return rt.ready();
}
