import type { SiteModel } from "../../services/model/index.js";
import { optimizeOffline } from "../../services/optimize/stage.js";
import type { OptimizeFn } from "../../services/recorder/recompute.js";

/**
 * The recorder's injected optimizer, wired to services/optimize's offline entry point (the
 * recorder may not import the optimizer itself): disturbances from the recorded snapshot.
 */
export function offlineOptimizer(model: SiteModel): OptimizeFn {
  return async (inp) => {
    const disturbances = Object.fromEntries(
      model.disturbances
        .filter((d) => inp.measured[d.symbol] !== undefined)
        .map((d) => [d.symbol, inp.measured[d.symbol] as number]),
    );
    const r = await optimizeOffline({
      model,
      parameters: inp.parameters,
      prices: inp.prices,
      current: inp.current,
      disturbances,
    });
    return r.status === "proposed" ? r.proposal : undefined;
  };
}
