/**
 * `steadfast start <service> [--config file] [--bus url]`: runs one service until Ctrl-C, configured
 * as its main.ts would be (config file, then STEADFAST_* environment overrides, then flags).
 * `steadfast start all [--config demo.yaml] [--bus url]`: the whole suite in one process against an
 * external broker (the demo without the embedded broker).
 */
import { readFileSync } from "node:fs";
import { resolve } from "node:path";
import type { SigningKey } from "../../services/kit/command-signing.js";
import { envOverrides, loadConfig, readConfigFile } from "../../services/kit/config.js";
import { loadSiteModelFile } from "../../services/model/index.js";
import { numberFlag, parseBusUrl, parseCommandArgs, str } from "../args.js";
import { readDemoConfig, siteSchedule, startSuite } from "../demo.js";
import { CliError } from "../errors.js";
import type { CommandContext } from "../io.js";
import { ROOT, resolvePath } from "../paths.js";
import { loadService, type RawConfig, type SuiteDeps } from "../services.js";

const USAGE =
  "steadfast start <service|all> [--config file] [--bus mqtt://host:1883|nats://host:4222] [--site-model site.yaml (market)] [--time-scale N (all)]";

/** validate's key, as its main.ts reads it: a key file (preferred) or the variable itself. */
export function commandKeyFromEnv(
  env: Record<string, string | undefined>,
  keyId: string,
): SigningKey | undefined {
  const file = env.STEADFAST_COMMAND_KEY_FILE;
  const secret = file ? readFileSync(file, "utf8").trim() : env.STEADFAST_COMMAND_KEY;
  return secret ? { id: keyId, secret } : undefined;
}

function waitForAbort(signal: AbortSignal): Promise<void> {
  return new Promise((done) => {
    if (signal.aborted) return done();
    signal.addEventListener("abort", () => done(), { once: true });
  });
}

/** Runs `start`. */
export async function startCommand(argv: string[], ctx: CommandContext): Promise<number> {
  const p = parseCommandArgs(
    argv,
    {
      config: { type: "string" },
      bus: { type: "string" },
      "site-model": { type: "string" },
      "time-scale": { type: "string" },
    },
    USAGE,
  );
  const name = p.positionals[0];
  if (!name || p.positionals.length > 1)
    throw new CliError("CLI_USAGE", `give one service or 'all'\nusage: ${USAGE}`);
  const env = process.env;
  const busText = str(p, "bus") ?? env.STEADFAST_BUS__URL;

  if (name === "all") {
    const file = str(p, "config") ?? resolve(ROOT, "infra/sites/kestrel-r1/demo.yaml");
    const config = { ...readDemoConfig(file) };
    const scale = numberFlag(str(p, "time-scale"), "time-scale", { exclusiveMin: 0, max: 10000 });
    if (scale !== undefined) config.timeScale = scale;
    const target = parseBusUrl(busText ?? "mqtt://127.0.0.1:1883");
    const key = commandKeyFromEnv(env, "k1");
    if (!key)
      ctx.io.out(
        "no STEADFAST_COMMAND_KEY(_FILE): using a random key made now, shared in memory by validate and plant-sim",
      );
    const suite = await startSuite({
      config,
      bus: { kind: "external", target },
      io: ctx.io,
      ...(key ? { signingKey: key } : {}),
    });
    ctx.io.out(
      `suite up on ${suite.brokerUrl} (${suite.transport}): ${suite.services.map((s) => s.name).join(", ")}`,
    );
    if (suite.consoleUrl)
      ctx.io.out(
        `console ${suite.consoleUrl}   login: ${suite.consoleUser?.username} / ${suite.consoleUser?.password}`,
      );
    await waitForAbort(ctx.signal);
    await suite.stop();
    return 0;
  }

  const entry = await loadService(name);
  // STEADFAST_COMMAND_KEY* are secrets, not config: keep them out of the config object (as validate's main.ts does).
  const overrides = envOverrides(
    Object.fromEntries(Object.entries(env).filter(([k]) => !k.startsWith("STEADFAST_COMMAND_KEY"))),
  );
  const configFile = str(p, "config") ?? env.STEADFAST_CONFIG;
  const fromFlags: RawConfig = busText ? { bus: parseBusUrl(busText) } : {};
  const config = loadConfig<RawConfig>(
    entry.schema,
    configFile ? readConfigFile(resolvePath(configFile)) : {},
    overrides,
    fromFlags,
  );
  const deps: SuiteDeps = {};
  if (name === "validate") {
    const dispatch = (config.validate as { dispatch?: { keyId?: string } } | undefined)?.dispatch;
    const key = commandKeyFromEnv(env, dispatch?.keyId ?? "k1");
    if (!key) {
      throw new CliError(
        "CLI_KEY_MISSING",
        "validate needs STEADFAST_COMMAND_KEY_FILE (preferred) or STEADFAST_COMMAND_KEY",
      );
    }
    deps.signingKey = key;
  }
  const siteModel = str(p, "site-model");
  if (name === "market" && siteModel) {
    // A site's prices file carries no units: they come from the site model.
    const market = config.market as { scheduleFile: string };
    deps.schedule = siteSchedule(
      await loadSiteModelFile(resolvePath(siteModel)),
      resolvePath(market.scheduleFile),
    );
  }
  const service = await entry.start(config, deps);
  ctx.io.err(`${name} started on ${(config.bus as { url?: string }).url ?? "?"} (Ctrl-C to stop)`);
  await Promise.race([waitForAbort(ctx.signal), service.stopped]);
  await service.stop();
  return 0;
}
