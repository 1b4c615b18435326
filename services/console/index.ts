/**
 * The console service, wiring only: it subscribes to the site's streams, folds each event into the
 * view (view.ts), serves the page and API (http.ts), and publishes what operators and engineers
 * decide: rto.operator-approval.v1 on operator.approval and rto.operator-mode.v1 on operator.mode.
 *
 * Streams read: heartbeat.>, cycle, steady, snapshot, measurements, tag-health, prices, reconciled,
 * model, proposal, validation, command, readback, state.mode, operator.mode, operator.approval.
 * Streams written: operator.approval, operator.mode (and its own heartbeat).
 */
import { readFileSync } from "node:fs";
import { createRequire } from "node:module";
import { dirname, join } from "node:path";
import { fileURLToPath } from "node:url";
import { parse as parseYaml } from "yaml";
import type { AnyEvent } from "../kit/envelope.js";
import type { EventType } from "../kit/generated/messages.js";
import { type Deps, type Service, startRuntime } from "../kit/service.js";
import type { ConsoleConfig } from "./config.js";
import { ConsoleError } from "./errors.js";
import { type Asset, startConsoleHttp } from "./http.js";
import {
  createLoginLimiter,
  createSessionStore,
  createUserDirectory,
  type SessionStore,
  type UserDirectory,
} from "./users.js";
import { type ConsoleView, createView } from "./view.js";

/** What the console may be given besides the kit's dependencies. */
export interface ConsoleDeps extends Deps {
  /** Users already built (tests); default: read from `console.usersFile`, or none. */
  users?: UserDirectory;
  /** A session store (tests); default: in memory with the configured lifetime. */
  sessions?: SessionStore;
}

/** The running console. */
export interface ConsoleService extends Service {
  /** Base URL of the page and API, e.g. http://127.0.0.1:8080. */
  readonly url: string;
  /** Port of the page and API. */
  readonly port: number;
  /** The in-memory view (tests, the demo). */
  readonly view: ConsoleView;
}

/** The streams the console follows and the event types each carries. */
export const CONSOLE_STREAMS: ReadonlyArray<readonly [string, readonly EventType[]]> = [
  ["heartbeat.>", ["rto.heartbeat.v1"]],
  ["cycle", ["rto.cycle.v1"]],
  ["steady", ["rto.steady.v1"]],
  ["snapshot", ["rto.snapshot.v1"]],
  ["measurements", ["rto.measurements.v1"]],
  ["tag-health", ["rto.tag-health.v1"]],
  ["prices", ["rto.prices.v1"]],
  ["reconciled", ["rto.reconciled.v1"]],
  ["model", ["rto.model.v1"]],
  ["proposal", ["rto.proposal.v1"]],
  ["validation", ["rto.validation.v1"]],
  ["command", ["rto.command.v1"]],
  ["readback", ["rto.readback.v1"]],
  ["state.mode", ["rto.operator-mode.v1"]],
  ["operator.mode", ["rto.operator-mode.v1"]],
  ["operator.approval", ["rto.operator-approval.v1"]],
];

function readAsset(path: string, type: string): Asset {
  try {
    return { type, body: readFileSync(path) };
  } catch (err) {
    throw new ConsoleError("CONSOLE_ASSET_MISSING", `cannot read ${path}: ${(err as Error).message}`, {
      cause: err,
    });
  }
}

/** Reads the page's files and uPlot's build once, at start-up. */
function loadAssets(publicDir: string): { indexHtml: string; assets: Map<string, Asset> } {
  const require = createRequire(import.meta.url);
  let uplotDist: string;
  try {
    uplotDist = dirname(require.resolve("uplot"));
  } catch (err) {
    throw new ConsoleError("CONSOLE_ASSET_MISSING", "the uplot package is not installed", { cause: err });
  }
  const assets = new Map<string, Asset>([
    ["/app.js", readAsset(join(publicDir, "app.js"), "text/javascript; charset=utf-8")],
    ["/style.css", readAsset(join(publicDir, "style.css"), "text/css; charset=utf-8")],
    [
      "/vendor/uPlot.iife.min.js",
      readAsset(join(uplotDist, "uPlot.iife.min.js"), "text/javascript; charset=utf-8"),
    ],
    ["/vendor/uPlot.min.css", readAsset(join(uplotDist, "uPlot.min.css"), "text/css; charset=utf-8")],
  ]);
  const indexHtml = readAsset(join(publicDir, "index.html"), "text/html").body.toString("utf8");
  return { indexHtml, assets };
}

/** Reads and checks a users file (YAML). Throws ConsoleError CONSOLE_USERS_INVALID naming the entry. */
export function readUsersFile(path: string): UserDirectory {
  let doc: unknown;
  try {
    doc = parseYaml(readFileSync(path, "utf8"));
  } catch (err) {
    throw new ConsoleError("CONSOLE_USERS_INVALID", `${path}: ${(err as Error).message}`, { cause: err });
  }
  return createUserDirectory(doc, path);
}

/** Starts the console. Throws on a bad users file, a missing page file, a busy port or no broker. */
export async function start(
  config: Readonly<ConsoleConfig>,
  deps: ConsoleDeps = {},
): Promise<ConsoleService> {
  const c = config.console;
  // Files first, so that a bad users file or a missing page stops start-up before the broker is touched.
  const users = deps.users ?? (c.usersFile ? readUsersFile(c.usersFile) : undefined);
  const publicDir = c.publicDir ?? join(dirname(fileURLToPath(import.meta.url)), "public");
  const { indexHtml, assets } = loadAssets(publicDir);
  const rt = await startRuntime("console", config, deps);
  if (!users) rt.log.warn("no users file: the console is read-only");
  const view = createView(config.site, {
    trendStepMs: c.trendStepS * 1000,
    trendPoints: c.trendPoints,
    trendTags: c.trendTags,
    maxTrendTags: c.maxTrendTags,
    cycles: c.cycles,
    parameterPoints: c.parameterPoints,
    profitPoints: c.profitPoints,
  });
  let http: Awaited<ReturnType<typeof startConsoleHttp>>;
  try {
    http = await startConsoleHttp({
      host: c.host,
      port: c.port,
      site: config.site,
      view,
      users,
      sessions:
        deps.sessions ?? createSessionStore({ ttlMs: c.sessionTtlS * 1000, maxSessions: c.maxSessions }),
      limiter: createLoginLimiter(c.loginFailures, c.loginWindowS * 1000),
      clock: rt.clock,
      log: rt.log,
      sessionTtlS: c.sessionTtlS,
      secureCookie: c.secureCookie,
      requireLoginToRead: c.requireLoginToRead,
      pushIntervalMs: c.pushIntervalMs,
      maxSseClients: c.maxSseClients,
      indexHtml,
      assets,
      publishApproval: async (data) => {
        await rt.events.publish("operator.approval", "rto.operator-approval.v1", data);
      },
      publishMode: async (data) => {
        await rt.events.publish("operator.mode", "rto.operator-mode.v1", data);
      },
    });
  } catch (err) {
    await rt.ready().stop();
    throw err;
  }
  rt.onStop(() => http.close());
  for (const [stream, types] of CONSOLE_STREAMS) {
    // subject() takes no wildcards: a trailing ".>" is added to the checked prefix.
    const filter = stream.endsWith(".>")
      ? `${rt.events.subject(stream.slice(0, -2))}.>`
      : rt.events.subject(stream);
    rt.track(
      await rt.events.on(filter, types, (event) => {
        http.notify(view.apply(event as AnyEvent, rt.clock.now(), stream));
      }),
    );
  }
  rt.log.info({ url: http.url }, "console up");
  const handle = rt.ready();
  return { ...handle, url: http.url, port: http.port, view };
}
