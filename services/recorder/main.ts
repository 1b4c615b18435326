/** Process entry of the recorder: reads STEADFAST_CONFIG (JSON or YAML) and STEADFAST_* overrides, then starts. */
import { envOverrides, loadConfig, readConfigFile } from "../kit/config.js";
import { runMain } from "../kit/service.js";
import { type RecorderConfig, recorderConfigSchema } from "./config.js";
import { start } from "./index.js";

await runMain(() => {
  const file = process.env.STEADFAST_CONFIG;
  const config = loadConfig<RecorderConfig>(
    recorderConfigSchema,
    file ? readConfigFile(file) : {},
    envOverrides(process.env),
  );
  return start(config);
});
