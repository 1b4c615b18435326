/** plant-sim process entry: the only place that reads process.env (STEADFAST_CONFIG and STEADFAST_* overrides). */
import { envOverrides, loadConfig, readConfigFile, runMain } from "../kit/index.js";
import { type PlantSimConfig, plantSimConfigSchema } from "./config.js";
import { start } from "./index.js";

await runMain(() => {
  const file = process.env.STEADFAST_CONFIG;
  const config = loadConfig<PlantSimConfig>(
    plantSimConfigSchema,
    file ? readConfigFile(file) : {},
    envOverrides(process.env),
  );
  return start(config);
});
