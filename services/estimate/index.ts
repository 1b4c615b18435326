/**
 * The estimate service: subscribes to the site's reconciled snapshots, fits the site model's adjustable
 * parameters to the latest `window` of them (stage.ts), and publishes the outcome on `model` and, retained,
 * on `state.model` (the parameter set in force survives a restart), with a stage-done on `cycle`. A
 * rejected or failed fit keeps the previous parameters and says why. Wiring only.
 */
import { type Deps, decodeEvent, type Event, type Service, startRuntime } from "../kit/index.js";
import { loadSiteModelFile, type SiteModel } from "../model/index.js";
import type { EstimateConfig } from "./config.js";
import { ParameterHistory } from "./history.js";
import { type EstimateStageOptions, estimateParameters, type ReconciledSnapshot } from "./stage.js";

export { type EstimateConfig, estimateConfigSchema } from "./config.js";
export { type HistoryQuery, ParameterHistory, type ParameterPoint } from "./history.js";
export {
  ESTIMATE_STAGE_CODES,
  type EstimateOutcome,
  type EstimateStageOptions,
  estimateParameters,
  type ReconciledSnapshot,
} from "./stage.js";

/** What start() may be given besides the kit's deps: an already loaded site model (tests, the demo). */
export interface EstimateDeps extends Deps {
  model?: SiteModel;
}

/** The running estimate service: the kit's handle plus the parameter history and the set in force. */
export interface EstimateService extends Service {
  /** The last `historySize` estimates (the console's trends). */
  readonly history: ParameterHistory;
  /** The parameter values in force now, by symbol. */
  inForce(): Record<string, number>;
}

/** Starts the estimate service for `config.site`. Throws at start on a bad site model or no broker. */
export async function start(
  config: Readonly<EstimateConfig>,
  deps: EstimateDeps = {},
): Promise<EstimateService> {
  const model = deps.model ?? (await loadSiteModelFile(config.siteModel));
  const rt = await startRuntime("estimate", config, deps);
  const o = config.estimate;
  const options: EstimateStageOptions = {
    ...(o.parameters.length ? { parameters: o.parameters } : {}),
    weights: o.weights,
    confidence: o.confidence,
    fitConfidence: o.fitConfidence,
    checkFit: o.checkFit,
    maxRelativeHalfWidth: o.maxRelativeHalfWidth,
    rejectOnWarnings: o.rejectOnWarnings,
    maxIterations: o.maxIterations,
  };
  const history = new ParameterHistory(o.historySize);
  let inForce: Record<string, number> = Object.fromEntries(
    model.parameters.map((p) => [p.symbol, p.initial]),
  );

  // The parameter set in force outlives the process as the retained model event.
  if (o.restoreTimeoutMs > 0) {
    const payload = await rt.bus.readState(rt.events.subject("state.model"), {
      timeoutMs: o.restoreTimeoutMs,
    });
    if (payload) {
      const decoded = decodeEvent(rt.emitter.registry, payload, config.maxMessageBytes);
      if (decoded.ok && decoded.event.type === "rto.model.v1") {
        for (const p of decoded.event.data.parameters)
          if (p.symbol in inForce && Number.isFinite(p.inForce)) inForce[p.symbol] = p.inForce;
        history.record(decoded.event);
        rt.log.info({ inForce }, "parameters in force restored from state.model");
      } else {
        rt.log.warn(
          { detail: decoded.ok ? decoded.event.type : decoded.detail },
          "state.model unusable: starting from the site model's initial values",
        );
      }
    }
  }

  const window: ReconciledSnapshot[] = [];
  rt.track(
    await rt.events.on(rt.events.subject("reconciled"), ["rto.reconciled.v1"], async (event) => {
      window.push({ id: event.id, data: event.data });
      if (window.length > o.window) window.splice(0, window.length - o.window);
      const outcome = estimateParameters(model, window, inForce, options);
      inForce = outcome.inForce;
      const data = outcome.data;
      const out: Event<"rto.model.v1"> = await rt.events.publish("model", "rto.model.v1", data, {
        causedBy: event,
      });
      await rt.events.publishEvent(rt.events.subject("state.model"), out, true);
      history.record(out);
      const reasons = [...data.reasons, ...data.parameters.flatMap((p) => p.reasons)].slice(0, 50);
      await rt.events.publish(
        "cycle",
        "rto.cycle.v1",
        {
          status: "stage-done",
          stage: "estimate",
          outcome: data.status,
          eventIds: [out.id],
          ...(reasons.length ? { reasons } : {}),
        },
        { causedBy: event },
      );
      if (data.fit?.jacobian === "finite-difference")
        rt.log.warn({ cycleid: event.cycleid }, "estimate used finite differences");
      const log = data.accepted ? rt.log.info.bind(rt.log) : rt.log.warn.bind(rt.log);
      log(
        {
          cycleid: event.cycleid,
          status: data.status,
          parameters: data.parameters.map((p) => ({
            symbol: p.symbol,
            value: p.value,
            sd: p.sd,
            inForce: p.inForce,
          })),
          reasons,
        },
        "estimate",
      );
    }),
  );
  const service = rt.ready();
  return { ...service, history, inForce: () => ({ ...inForce }) };
}
