/**
 * The reconcile service: subscribes to the site's snapshots, reconciles each against the site model's
 * balances (stage.ts) and publishes the result on `reconciled` with a stage-done on `cycle`, or an
 * `aborted` cycle event with the reasons. Wiring only.
 */
import { type Deps, type Service, startRuntime } from "../kit/index.js";
import { loadSiteModelFile, type SiteModel } from "../model/index.js";
import type { ReconcileConfig } from "./config.js";
import { reconcileSnapshot } from "./stage.js";

export { type ReconcileConfig, reconcileConfigSchema } from "./config.js";
export {
  RECONCILE_ABORT_CODES,
  type ReconcileOutcome,
  type ReconcileStageOptions,
  reconcileSnapshot,
} from "./stage.js";

/** What start() may be given besides the kit's deps: an already loaded site model (tests, the demo). */
export interface ReconcileDeps extends Deps {
  model?: SiteModel;
}

/** Starts the reconcile service for `config.site`. Throws at start on a bad site model or no broker. */
export async function start(config: Readonly<ReconcileConfig>, deps: ReconcileDeps = {}): Promise<Service> {
  const model = deps.model ?? (await loadSiteModelFile(config.siteModel));
  const rt = await startRuntime("reconcile", config, deps);
  const options = config.reconcile;
  rt.track(
    await rt.events.on(rt.events.subject("snapshot"), ["rto.snapshot.v1"], async (event) => {
      const outcome = reconcileSnapshot(event.data, model, options);
      if (!outcome.ok) {
        rt.log.warn({ cycleid: event.cycleid, reasons: outcome.reasons }, "reconciliation aborted");
        await rt.events.publish(
          "cycle",
          "rto.cycle.v1",
          { status: "aborted", stage: "reconcile", reasons: outcome.reasons.slice(0, 50) },
          { causedBy: event },
        );
        return;
      }
      const data = outcome.data;
      const out = await rt.events.publish("reconciled", "rto.reconciled.v1", data, { causedBy: event });
      const outcomeText =
        data.method === "pass-through"
          ? "pass-through"
          : data.grossErrors.length
            ? "gross-errors-removed"
            : "reconciled";
      const reasons = data.grossErrors.slice(0, 50).map((g) => ({
        code: "RECONCILE_GROSS_ERROR",
        message:
          `${g.tag}: measured − reconciled = ${g.estimatedSize.toPrecision(4)} ± ${g.estimatedSizeSd.toPrecision(2)} ${g.unit} (|z| = ${g.statistic.toFixed(2)})${g.tiedWith.length ? `, indistinguishable from ${g.tiedWith.join(", ")}` : ""}`.slice(
            0,
            1000,
          ),
      }));
      await rt.events.publish(
        "cycle",
        "rto.cycle.v1",
        {
          status: "stage-done",
          stage: "reconcile",
          outcome: outcomeText,
          eventIds: [out.id],
          ...(reasons.length ? { reasons } : {}),
        },
        { causedBy: event },
      );
      rt.log.info(
        {
          cycleid: event.cycleid,
          method: data.method,
          grossErrors: data.eliminated,
          gamma: data.globalTest?.statistic,
        },
        "reconciled",
      );
    }),
  );
  return rt.ready();
}
