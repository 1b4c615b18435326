/** Process entry of the optimize service: reads env + config file, starts, stops on SIGTERM. */
import { envOverrides, loadConfig, readConfigFile, runMain } from "../kit/index.js";
import { type OptimizeConfig, optimizeConfigSchema } from "./config.js";
import { start } from "./index.js";

await runMain(() => {
  const file = process.env.STEADFAST_CONFIG;
  const config = loadConfig<OptimizeConfig>(
    optimizeConfigSchema,
    file ? readConfigFile(file) : {},
    envOverrides(process.env),
  );
  return start(config);
});
