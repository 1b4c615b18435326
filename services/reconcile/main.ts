/** Process entry of the reconcile service: config from STEADFAST_CONFIG (file) and STEADFAST_* variables. */
import { envOverrides, loadConfig, readConfigFile, runMain } from "../kit/index.js";
import { type ReconcileConfig, reconcileConfigSchema } from "./config.js";
import { start } from "./index.js";

await runMain(() => {
  const file = process.env.STEADFAST_CONFIG;
  const config = loadConfig<ReconcileConfig>(
    reconcileConfigSchema,
    file ? readConfigFile(file) : {},
    envOverrides(process.env),
  );
  return start(config);
});
