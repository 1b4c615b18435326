/**
 * Process entry of validate: reads STEADFAST_CONFIG (JSON or YAML) and STEADFAST_* overrides, the
 * command-signing secret from STEADFAST_COMMAND_KEY_FILE (a file holding the secret, e.g. a mounted
 * container secret) or STEADFAST_COMMAND_KEY, then starts. The key id comes from the config
 * (validate.dispatch.keyId). There is no built-in key: without one, start-up fails.
 */
import { readFileSync } from "node:fs";
import { envOverrides, loadConfig, readConfigFile } from "../kit/config.js";
import { runMain } from "../kit/service.js";
import { type ValidateConfig, validateConfigSchema } from "./config.js";
import { ValidateError } from "./errors.js";
import { start } from "./index.js";

await runMain(() => {
  const file = process.env.STEADFAST_CONFIG;
  // STEADFAST_COMMAND_KEY* are read here, not as config overrides: keep them out of the config object.
  const env = Object.fromEntries(
    Object.entries(process.env).filter(([k]) => !k.startsWith("STEADFAST_COMMAND_KEY")),
  );
  const config = loadConfig<ValidateConfig>(
    validateConfigSchema,
    file ? readConfigFile(file) : {},
    envOverrides(env),
  );
  const keyFile = process.env.STEADFAST_COMMAND_KEY_FILE;
  const secret = keyFile ? readFileSync(keyFile, "utf8").trim() : process.env.STEADFAST_COMMAND_KEY;
  if (!secret) {
    throw new ValidateError(
      "VALIDATE_KEY_MISSING",
      "no command-signing key: set STEADFAST_COMMAND_KEY_FILE (preferred) or STEADFAST_COMMAND_KEY",
    );
  }
  return start(config, { signingKey: { id: config.validate.dispatch.keyId, secret } });
});
