/**
 * The suite in one process: `steadfast demo` (an embedded broker, or --bus for an external one) and
 * `steadfast start all` (the same services against an external broker). One ScaledClock for every
 * service, one site model loaded once, one random command key shared by validate (signer) and
 * plant-sim (gateway), services started in order and stopped in reverse, then the broker.
 */
import { randomBytes } from "node:crypto";
import { existsSync, mkdirSync, writeFileSync } from "node:fs";
import { readFile } from "node:fs/promises";
import { createServer } from "node:net";
import { resolve } from "node:path";
import { pino } from "pino";
import { isMap, isSeq, parseDocument } from "yaml";
import type { Bus } from "../services/kit/bus.js";
import { type Clock, ScaledClock, systemClock } from "../services/kit/clock.js";
import type { SigningKey } from "../services/kit/command-signing.js";
import { loadConfig, readConfigFile } from "../services/kit/config.js";
import { connectBus } from "../services/kit/connect.js";
import { type EmbeddedBroker, startEmbeddedBroker } from "../services/kit/embedded.js";
import { type AnyEvent, decodeEvent } from "../services/kit/envelope.js";
import { KitError } from "../services/kit/errors.js";
import type { Logger } from "../services/kit/log.js";
import { schemaRegistry } from "../services/kit/schemas.js";
import type { Service } from "../services/kit/service.js";
import { type PriceSchedule, parsePriceSchedule } from "../services/market/schedule.js";
import { loadSiteModel, loadSiteModelFile, type SiteModel } from "../services/model/index.js";
import { type BusTarget, flag, numberFlag, parseBusUrl, parseCommandArgs, portFlag, str } from "./args.js";
import { CliError } from "./errors.js";
import { describe, fmt } from "./format.js";
import type { CommandContext, Io } from "./io.js";
import { ROOT, resolvePath } from "./paths.js";
import { loadService, type RawConfig, SERVICE_NAMES, type ServiceName } from "./services.js";

/** The demo file (infra/sites/kestrel-r1/demo.yaml), after defaults. */
export interface DemoConfig {
  site: string;
  siteModel: string;
  /** Simulated seconds per wall second. */
  timeScale: number;
  mode: "advisory" | "closed-loop";
  broker: { host: string; port: number };
  console: { host: string; port: number };
  dataDir: string;
  logLevel: "trace" | "debug" | "info" | "warn" | "error" | "fatal" | "silent";
  heartbeatWallS: number;
  /** Every tag's staleAfterS is raised to at least this many wall seconds × timeScale (0: off). */
  staleFloorWallS: number;
  /** Demo-only changes to the site model's steadyState policy (e.g. a shorter minSteadyS). */
  steadyState: Record<string, number>;
  wall: { approvalWallS: number; readbackWallS: number; watchdogWallS: number };
  /** Per service: its config sections (plant-sim: `file`, a plant-sim config file); absent = not run. */
  services: Partial<Record<ServiceName, RawConfig>>;
}

const pos = (dflt: number, description: string) => ({
  type: "number",
  exclusiveMinimum: 0,
  default: dflt,
  description,
});
const port = (dflt: number) => ({ type: "integer", minimum: 0, maximum: 65535, default: dflt });

/** JSON Schema of the demo file. */
export const demoConfigSchema = {
  type: "object",
  additionalProperties: false,
  required: ["site", "siteModel", "services"],
  properties: {
    site: { type: "string", pattern: "^[a-z0-9-]+$", maxLength: 40 },
    siteModel: { type: "string", minLength: 1 },
    timeScale: { type: "number", exclusiveMinimum: 0, maximum: 10000, default: 60 },
    mode: { enum: ["advisory", "closed-loop"], default: "advisory" },
    broker: {
      type: "object",
      additionalProperties: false,
      default: {},
      properties: { host: { type: "string", default: "127.0.0.1" }, port: port(1883) },
    },
    console: {
      type: "object",
      additionalProperties: false,
      default: {},
      properties: { host: { type: "string", default: "127.0.0.1" }, port: port(8080) },
    },
    dataDir: { type: "string", minLength: 1, default: ".steadfast" },
    logLevel: { enum: ["trace", "debug", "info", "warn", "error", "fatal", "silent"], default: "info" },
    heartbeatWallS: pos(1, "Wall seconds between heartbeats."),
    staleFloorWallS: { type: "number", minimum: 0, default: 5, description: "Least stale limit, wall s." },
    steadyState: { type: "object", additionalProperties: { type: "number" }, default: {} },
    wall: {
      type: "object",
      additionalProperties: false,
      default: {},
      properties: {
        approvalWallS: pos(300, "Approval wait, wall s."),
        readbackWallS: pos(5, "Readback wait, wall s."),
        watchdogWallS: pos(5, "Plant watchdog, wall s."),
      },
    },
    services: {
      type: "object",
      additionalProperties: false,
      properties: Object.fromEntries(SERVICE_NAMES.map((n) => [n, { type: "object" }])),
    },
  },
} as const;

/** Reads and checks a demo file. Throws KitError KIT_CONFIG_INVALID naming the field. */
export function readDemoConfig(file: string): Readonly<DemoConfig> {
  if (!existsSync(file)) throw new CliError("CLI_CONFIG_INVALID", `no such demo file: ${file}`);
  return loadConfig<DemoConfig>(demoConfigSchema, readConfigFile(file));
}

/** True when nothing listens on host:port (port 0 is always free). */
export async function portFree(host: string, p: number): Promise<boolean> {
  if (p === 0) return true;
  return new Promise((done) => {
    const s = createServer();
    s.once("error", () => done(false));
    s.listen(p, host, () => s.close(() => done(true)));
  });
}

/** How the suite reaches its broker. */
export type BusChoice =
  | { kind: "embedded"; host: string; port: number }
  | { kind: "external"; target: BusTarget };

/** Options of one suite run. */
export interface SuiteOptions {
  config: Readonly<DemoConfig>;
  bus: BusChoice;
  /** The command key; default a random 32-byte key made now. */
  signingKey?: SigningKey;
  /** Console password for the generated `demo` user; default random. */
  consolePassword?: string;
  /** Services to run; default every one the config lists. */
  only?: readonly ServiceName[];
  /** Where progress goes. */
  io: Io;
}

/** A running suite. */
export interface Suite {
  readonly brokerUrl: string;
  readonly transport: "embedded" | "mqtt" | "nats";
  readonly clock: ScaledClock;
  readonly consoleUrl: string | undefined;
  readonly consoleUser: { username: string; password: string } | undefined;
  readonly dbFile: string | undefined;
  readonly logFile: string;
  readonly startedAtMs: number;
  readonly services: ReadonlyArray<{ name: ServiceName; service: Service }>;
  /** Wall ms from start to the first proposal / first passing validation, once seen. */
  readonly firsts: { proposalMs?: number; validatedMs?: number; commandMs?: number };
  /** Resolves on the first passing validation. */
  readonly firstValidated: Promise<number>;
  stop(): Promise<void>;
}

/** The per-service configs of the suite (before each service's own schema fills its defaults). */
export function suiteConfigs(
  c: Readonly<DemoConfig>,
  bus: { transport: "embedded" | "mqtt" | "nats"; url: string },
  extras: {
    keyId: string;
    secret: string;
    dataDir: string;
    usersFile?: string;
    consolePort: number;
    startIso: string;
  },
): Partial<Record<ServiceName, RawConfig>> {
  const scale = c.timeScale;
  const siteModel = resolvePath(c.siteModel);
  const base = (name: string): RawConfig => ({
    site: c.site,
    instance: "demo",
    bus: { transport: bus.transport, url: bus.url, clientId: `${c.site}-${name}-demo`.slice(0, 64) },
    http: { enabled: false },
    heartbeatS: c.heartbeatWallS,
    logLevel: c.logLevel,
  });
  const own = (name: ServiceName): RawConfig => ({ ...(c.services[name] ?? {}) });
  const section = (name: ServiceName, key: string): RawConfig => ({
    ...((own(name)[key] as RawConfig) ?? {}),
  });
  const out: Partial<Record<ServiceName, RawConfig>> = {};
  const want = (n: ServiceName) => c.services[n] !== undefined;
  if (want("recorder")) {
    const r = section("recorder", "recorder");
    out.recorder = {
      ...base("recorder"),
      recorder: { ...r, dbFile: resolve(extras.dataDir, String(r.dbFile ?? "demo.sqlite")) },
    };
  }
  if (want("ingest"))
    out.ingest = {
      ...base("ingest"),
      ...own("ingest"),
      ingest: { ...section("ingest", "ingest"), siteModelFile: siteModel },
    };
  if (want("steady"))
    out.steady = {
      ...base("steady"),
      ...own("steady"),
      steady: { ...section("steady", "steady"), siteModelFile: siteModel },
    };
  if (want("reconcile")) out.reconcile = { ...base("reconcile"), ...own("reconcile"), siteModel };
  if (want("estimate")) out.estimate = { ...base("estimate"), ...own("estimate"), siteModel };
  if (want("optimize"))
    out.optimize = {
      ...base("optimize"),
      ...own("optimize"),
      optimize: { ...section("optimize", "optimize"), siteModelFile: siteModel },
    };
  if (want("validate")) {
    const v = section("validate", "validate");
    const policy = { ...((v.policy as RawConfig) ?? {}) };
    // closed-loop is refused by validate while the site's policy requires approval.
    if (c.mode === "closed-loop") policy.requireApproval = false;
    out.validate = {
      ...base("validate"),
      validate: {
        ...v,
        siteModelFile: siteModel,
        initialMode: c.mode,
        policy,
        // Scaled-clock seconds: the wall allowances times the time scale.
        approvalTimeoutS: c.wall.approvalWallS * scale,
        dispatch: {
          ...((v.dispatch as RawConfig) ?? {}),
          keyId: extras.keyId,
          readbackTimeoutS: c.wall.readbackWallS * scale,
        },
      },
    };
  }
  if (want("console")) {
    out.console = {
      ...base("console"),
      console: {
        ...section("console", "console"),
        host: c.console.host,
        port: extras.consolePort,
        ...(extras.usersFile ? { usersFile: extras.usersFile } : {}),
      },
    };
  }
  if (want("market")) {
    const m = section("market", "market");
    // The market runs on the wall clock with the demo's time scale (its timer sleeps in wall time),
    // starting where the shared scaled clock starts, so its simulated time is the loop's time.
    out.market = {
      ...base("market"),
      market: {
        ...m,
        scheduleFile: resolvePath(String(m.scheduleFile ?? "infra/sites/kestrel-r1/prices.yaml")),
        timeScale: scale,
        startAt: extras.startIso,
      },
    };
  }
  if (want("plant-sim")) {
    const ps = own("plant-sim");
    const fromFile = typeof ps.file === "string" ? readConfigFile(resolvePath(ps.file)) : {};
    const o = { ...((fromFile.plantSim as RawConfig) ?? {}), ...((ps.plantSim as RawConfig) ?? {}) };
    const gateway = (o.gateway as RawConfig) ?? {};
    out["plant-sim"] = {
      ...base("plant-sim"),
      plantSim: {
        ...o,
        plantModel: resolvePath(String(o.plantModel ?? "infra/sites/kestrel-r1/plant.yaml")),
        // The shared clock is already scaled: the simulation follows it one to one.
        timeScale: 1,
        // Status readbacks every 10 wall seconds, not every 10 scaled seconds.
        statusPeriodS: 10 * scale,
        gateway: {
          ...gateway,
          keys: { [extras.keyId]: extras.secret },
          watchdogS: c.wall.watchdogWallS * scale,
        },
      },
    };
  }
  return out;
}

/**
 * The price schedule of a site's prices file. The site's file (prices.yaml) holds `site` and
 * `schedule` but no units: the units are the site model's, so they are taken from there.
 */
export function siteSchedule(model: SiteModel, file: string): PriceSchedule {
  const doc = (readConfigFile(file) ?? {}) as RawConfig;
  if (doc.units !== undefined) return parsePriceSchedule({ units: doc.units, schedule: doc.schedule }, file);
  const units = Object.fromEntries(model.prices.map((p) => [p.symbol, p.unit]));
  return parsePriceSchedule({ units, schedule: doc.schedule }, file);
}

/**
 * The site model for an accelerated run. At 60 simulated seconds per wall second a tag limit of
 * 60 s of silence is one wall second, which a busy machine's pauses exceed: every tag's
 * staleAfterS is raised to at least `floorS` (scaled seconds), and `steadyState` fields replace the
 * model's (demo.yaml says which and why). Nothing else changes.
 */
export async function demoSiteModel(
  file: string,
  floorS: number,
  steadyState: Readonly<Record<string, number>> = {},
): Promise<SiteModel> {
  if (!(floorS > 0) && Object.keys(steadyState).length === 0) return loadSiteModelFile(file);
  const doc = parseDocument(await readFile(file, "utf8"));
  // Set field by field, so the model's own schema still judges every value.
  for (const [k, v] of Object.entries(steadyState)) doc.setIn(["steadyState", k], v);
  const tags = doc.get("tags");
  if (isSeq(tags)) {
    for (const item of tags.items) {
      if (!isMap(item)) continue;
      const stale = item.get("staleAfterS");
      if (typeof stale === "number" && stale < floorS) item.set("staleAfterS", floorS);
    }
  }
  return loadSiteModel(doc.toString(), file);
}

/** Starts the suite. On a failure, what was started is stopped again before the error is thrown. */
export async function startSuite(options: SuiteOptions): Promise<Suite> {
  const { config: c, io } = options;
  const dataDir = resolve(process.cwd(), c.dataDir);
  mkdirSync(dataDir, { recursive: true });
  const logFile = resolve(dataDir, "demo.log");
  const rootLog: Logger = pino(
    { level: c.logLevel },
    pino.destination({ dest: logFile, sync: false, mkdir: true }),
  );

  let broker: EmbeddedBroker | undefined;
  let bus: { transport: "embedded" | "mqtt" | "nats"; url: string };
  if (options.bus.kind === "embedded") {
    const { host, port: wanted } = options.bus;
    try {
      broker = await startEmbeddedBroker({ host, port: wanted });
    } catch (err) {
      const taken =
        err instanceof KitError && (err.cause as NodeJS.ErrnoException | undefined)?.code === "EADDRINUSE";
      if (!taken) throw err;
      broker = await startEmbeddedBroker({ host, port: 0 });
      io.out(
        `port ${wanted} is taken (a Mosquitto already running?): the embedded broker took port ${broker.port} instead`,
      );
    }
    bus = { transport: "embedded", url: broker.url };
  } else {
    bus = options.bus.target;
  }

  const secretBytes = randomBytes(32);
  const key: SigningKey = options.signingKey ?? {
    id: `demo-${randomBytes(3).toString("hex")}`,
    secret: `base64:${secretBytes.toString("base64")}`,
  };
  let consolePort = c.console.port;
  if (c.services.console !== undefined && !(await portFree(c.console.host, consolePort))) {
    io.out(`console port ${consolePort} is taken: the console takes a free port instead`);
    consolePort = 0;
  }
  let usersFile: string | undefined;
  let consoleUser: Suite["consoleUser"];
  if (c.services.console !== undefined) {
    const { hashPassword } = await import("../services/console/users.js");
    const password = options.consolePassword ?? randomBytes(9).toString("base64url");
    usersFile = resolve(dataDir, "demo-users.yaml");
    writeFileSync(
      usersFile,
      `# Generated by steadfast demo at every start; DEMO ONLY.\nusers:\n  - username: demo\n    role: engineer\n    displayName: Demo engineer\n    passwordHash: "${hashPassword(password, randomBytes(16))}"\n`,
      { mode: 0o600 },
    );
    consoleUser = { username: "demo", password };
  }

  const clock = new ScaledClock(c.timeScale);
  const startIso = new Date(clock.now()).toISOString();
  const configs = suiteConfigs(c, bus, {
    keyId: key.id,
    secret: String(key.secret),
    dataDir,
    consolePort,
    startIso,
    ...(usersFile ? { usersFile } : {}),
  });
  const model = await demoSiteModel(resolvePath(c.siteModel), c.staleFloorWallS * c.timeScale, c.steadyState);
  const schedule = configs.market
    ? siteSchedule(model, (configs.market.market as RawConfig).scheduleFile as string)
    : undefined;
  const names = SERVICE_NAMES.filter(
    (n) => configs[n] !== undefined && (!options.only || options.only.includes(n)),
  );

  const started: Array<{ name: ServiceName; service: Service }> = [];
  const t0 = Date.now();
  const firsts: Suite["firsts"] = {};
  let resolveValidated!: (ms: number) => void;
  const firstValidated = new Promise<number>((r) => (resolveValidated = r));
  let watcher: Bus | undefined;
  const stopAll = async () => {
    for (const s of [...started].reverse()) {
      await s.service.stop().catch((err: Error) => io.err(`stopping ${s.name}: ${err.message}`));
    }
    started.length = 0;
    await watcher?.close().catch(() => undefined);
    await broker?.close().catch(() => undefined);
    rootLog.flush();
  };
  try {
    // The demo's own window on the loop: proposals, verdicts and commands as they happen.
    watcher = await connectBus(
      { site: c.site, bus: { transport: bus.transport, url: bus.url } },
      { name: `${c.site}-cli-watch` },
    );
    const registry = schemaRegistry();
    const wallS = () => `+${((Date.now() - t0) / 1000).toFixed(0).padStart(4)} s`;
    for (const stream of ["proposal", "validation", "command", "readback", "cycle"]) {
      await watcher.subscribe(`rto.${c.site}.${stream}`, (msg) => {
        const d = decodeEvent(registry, msg.payload, 1 << 20);
        if (!d.ok) return;
        const e = d.event as AnyEvent;
        if (e.type === "rto.proposal.v1") firsts.proposalMs ??= Date.now() - t0;
        if (e.type === "rto.validation.v1" && e.data.verdict === "pass" && firsts.validatedMs === undefined) {
          firsts.validatedMs = Date.now() - t0;
          resolveValidated(firsts.validatedMs);
        }
        if (e.type === "rto.command.v1") firsts.commandMs ??= Date.now() - t0;
        const line = demoLine(e);
        if (line)
          io.out(`${wallS()} | sim ${new Date(Date.parse(e.time)).toISOString().slice(11, 16)} | ${line}`);
      });
    }
    for (const name of names) {
      const entry = await loadService(name);
      // Demo sections are frozen (loadConfig); the service schema fills defaults into a copy.
      const raw = structuredClone(configs[name] as RawConfig);
      const cfg = loadConfig<RawConfig>(entry.schema, raw);
      const service = await entry.start(cfg, {
        clock: name === "market" ? systemClock : (clock as Clock),
        log: rootLog.child({ name }),
        model,
        signingKey: key,
        ...(schedule ? { schedule } : {}),
      });
      started.push({ name, service });
      if (name === "plant-sim") await gatewayFollowing(service, c.heartbeatWallS);
    }
  } catch (err) {
    await stopAll();
    throw err;
  }
  const consoleSvc = started.find((s) => s.name === "console")?.service as
    | (Service & { url?: string })
    | undefined;
  return {
    brokerUrl: bus.url,
    transport: bus.transport,
    clock,
    consoleUrl: consoleSvc?.url,
    consoleUser,
    dbFile: (configs.recorder?.recorder as RawConfig | undefined)?.dbFile as string | undefined,
    logFile,
    startedAtMs: t0,
    services: started,
    firsts,
    firstValidated,
    stop: stopAll,
  };
}

/** Waits (a few heartbeats at most) until the plant's gateway follows validate, then one tick more. */
async function gatewayFollowing(service: Service, heartbeatWallS: number): Promise<void> {
  const gw = (service as Service & { gateway?: { state(): { shed: boolean } } }).gateway;
  if (!gw) return;
  const until = Date.now() + 5 * heartbeatWallS * 1000;
  while (gw.state().shed && Date.now() < until) await new Promise((r) => setTimeout(r, 50));
  await new Promise((r) => setTimeout(r, 300));
}

/** The demo terminal's line for an event, or undefined for the ones it does not show. */
export function demoLine(e: AnyEvent): string | undefined {
  switch (e.type) {
    case "rto.proposal.v1":
      return `proposal   ${describe(e)}`;
    case "rto.validation.v1":
      return `validation ${e.data.verdict}${e.data.next === "await-approval" ? " — waiting for approval in the console" : ` → ${e.data.next}`}${
        e.data.verdict === "fail"
          ? `: ${e.data.checks
              .filter((x) => x.outcome === "fail")
              .map((x) => x.reason)
              .join("; ")}`
          : ""
      }`;
    case "rto.command.v1":
      return `command    ${describe(e)}`;
    case "rto.readback.v1":
      return e.data.trigger === "status" ? undefined : `readback   ${describe(e)}`;
    case "rto.cycle.v1":
      if (e.data.status === "opened") return "cycle      opened: the plant is steady, snapshot taken";
      if (e.data.status === "aborted" || e.data.status === "alarm") return `cycle      ${describe(e)}`;
      if (e.data.stage === "estimate")
        return `estimate   ${e.data.outcome ?? ""}${e.data.reasons?.length ? `: ${e.data.reasons.map((r) => r.message).join("; ")}` : ""}`;
      return undefined;
    default:
      return undefined;
  }
}

const USAGE =
  "steadfast demo [--config demo.yaml] [--time-scale N] [--mode advisory|closed-loop] [--port N] [--console-port N] [--bus mqtt://…|nats://…] [--data-dir dir] [--log-level level] [--for S] [--until validated]";

/** The safety cautions printed at start. */
export const CAUTIONS = [
  "Steadfast is NOT a safety system. The plant's own protection (interlocks, trips, relief) must stay in place;",
  "  every limit Steadfast enforces sits inside those limits, never instead of them.",
  "This is a DEMO on an invented plant: the command key and the console password are made up at start and",
  "  die with this process; the embedded broker has no authentication and listens on loopback only.",
];

/** Runs `demo`: starts the suite, prints where to look, and runs until Ctrl-C (or --for / --until). */
export async function demoCommand(argv: string[], ctx: CommandContext): Promise<number> {
  const p = parseCommandArgs(
    argv,
    {
      config: { type: "string" },
      "time-scale": { type: "string" },
      mode: { type: "string" },
      port: { type: "string" },
      "console-port": { type: "string" },
      bus: { type: "string" },
      "data-dir": { type: "string" },
      "log-level": { type: "string" },
      for: { type: "string" },
      until: { type: "string" },
      "no-console": { type: "boolean" },
    },
    USAGE,
  );
  const file = str(p, "config") ?? resolve(ROOT, "infra/sites/kestrel-r1/demo.yaml");
  const fromFile = readDemoConfig(file);
  const mode = str(p, "mode");
  if (mode !== undefined && mode !== "advisory" && mode !== "closed-loop") {
    throw new CliError("CLI_USAGE", `--mode must be advisory or closed-loop, got '${mode}'`);
  }
  const until = str(p, "until");
  if (until !== undefined && until !== "validated")
    throw new CliError("CLI_USAGE", `--until takes 'validated', got '${until}'`);
  const services = { ...fromFile.services };
  if (flag(p, "no-console")) delete services.console;
  const config: DemoConfig = {
    ...fromFile,
    services,
    timeScale:
      numberFlag(str(p, "time-scale"), "time-scale", { exclusiveMin: 0, max: 10000 }) ?? fromFile.timeScale,
    mode: (mode as DemoConfig["mode"] | undefined) ?? fromFile.mode,
    broker: { ...fromFile.broker, port: portFlag(str(p, "port"), "port") ?? fromFile.broker.port },
    console: {
      ...fromFile.console,
      port: portFlag(str(p, "console-port"), "console-port") ?? fromFile.console.port,
    },
    dataDir: str(p, "data-dir") ?? fromFile.dataDir,
    logLevel: (str(p, "log-level") as DemoConfig["logLevel"] | undefined) ?? fromFile.logLevel,
  };
  const forS = numberFlag(str(p, "for"), "for", { exclusiveMin: 0 });
  const busText = str(p, "bus");
  const bus: BusChoice = busText
    ? { kind: "external", target: parseBusUrl(busText) }
    : { kind: "embedded", host: config.broker.host, port: config.broker.port };
  const { io } = ctx;
  io.out(
    `Steadfast demo — site ${config.site}, ${config.timeScale} simulated s per wall s, mode ${config.mode}`,
  );
  const suite = await startSuite({ config, bus, io });
  io.out(`broker   ${suite.brokerUrl} (${suite.transport})`);
  io.out(`services ${suite.services.map((s) => s.name).join(", ")}`);
  if (suite.consoleUrl)
    io.out(
      `console  ${suite.consoleUrl}   login: ${suite.consoleUser?.username} / ${suite.consoleUser?.password}`,
    );
  if (suite.dbFile) io.out(`audit    ${suite.dbFile}   (steadfast explain latest --db ${suite.dbFile})`);
  io.out(`logs     ${suite.logFile}`);
  for (const line of CAUTIONS) io.out(line);
  if (config.mode === "advisory")
    io.out("Advisory mode: approve each validated proposal in the console to see the loop move the plant.");
  io.out("Ctrl-C stops everything.");

  await new Promise<void>((done) => {
    if (ctx.signal.aborted) return done();
    ctx.signal.addEventListener("abort", () => done(), { once: true });
    if (forS !== undefined) setTimeout(done, forS * 1000).unref();
    if (until === "validated") void suite.firstValidated.then(() => done());
  });
  io.out("stopping services…");
  await suite.stop();
  const f = suite.firsts;
  io.out(
    `first proposal ${f.proposalMs !== undefined ? `${fmt(f.proposalMs / 1000, 3)} s` : "none"}, first validated proposal ${f.validatedMs !== undefined ? `${fmt(f.validatedMs / 1000, 3)} s` : "none"} after start (wall)`,
  );
  io.out("stopped.");
  return 0;
}
