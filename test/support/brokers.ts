/**
 * Finds brokers for the tests, in this order: MQTT_URL / NATS_URL; the machine's own on localhost;
 * local `mosquitto` / `nats-server` binaries started on free ports; testcontainers where a Docker
 * engine exists. Otherwise the tests fail with a clear message. Brokers a test starts itself are
 * configured so that they cannot drop messages silently.
 */
import { type ChildProcess, execFileSync, spawn } from "node:child_process";
import { chmodSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { createConnection, createServer } from "node:net";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { KitError } from "../../services/kit/errors.js";

/** A free TCP port on loopback (never a fixed port for a server a test starts). */
export async function freePort(): Promise<number> {
  return new Promise((resolve, reject) => {
    const s = createServer();
    s.once("error", reject);
    s.listen(0, "127.0.0.1", () => {
      const a = s.address();
      const port = typeof a === "object" && a ? a.port : 0;
      s.close(() => resolve(port));
    });
  });
}

/** True when something accepts TCP connections on host:port within `ms`. */
export function reachable(host: string, port: number, ms = 500): Promise<boolean> {
  return new Promise((resolve) => {
    const sock = createConnection({ host, port });
    const done = (ok: boolean) => {
      sock.destroy();
      resolve(ok);
    };
    sock.setTimeout(ms, () => done(false));
    sock.once("connect", () => done(true));
    sock.once("error", () => done(false));
  });
}

async function waitReachable(port: number, ms = 10_000): Promise<void> {
  const until = Date.now() + ms;
  while (Date.now() < until) {
    if (await reachable("127.0.0.1", port, 200)) return;
    await new Promise((r) => setTimeout(r, 50));
  }
  throw new KitError("KIT_BROKER_UNAVAILABLE", `broker on port ${port} did not come up within ${ms} ms`);
}

function hasBinary(name: string): boolean {
  for (const dir of ["/usr/sbin", "/usr/bin", "/usr/local/sbin", "/usr/local/bin"]) {
    try {
      execFileSync("test", ["-x", join(dir, name)]);
      return true;
    } catch {
      // keep looking
    }
  }
  return false;
}

function binaryPath(name: string): string {
  for (const dir of ["/usr/sbin", "/usr/bin", "/usr/local/sbin", "/usr/local/bin"]) {
    try {
      execFileSync("test", ["-x", join(dir, name)]);
      return join(dir, name);
    } catch {
      // keep looking
    }
  }
  return name;
}

/** A broker process a test started and owns (it may restart it; never the machine's shared one). */
export interface OwnBroker {
  url: string;
  port: number;
  /** Stops the process (SIGTERM: Mosquitto saves its store) and starts it again on the same port and store. */
  restart(): Promise<void>;
  stop(): Promise<void>;
}

function stopProcess(p: ChildProcess): Promise<void> {
  return new Promise((resolve) => {
    if (p.exitCode !== null || p.signalCode !== null) return resolve();
    p.once("exit", () => resolve());
    p.kill("SIGTERM");
  });
}

/**
 * Mosquitto on a free port with its own store. `max_queued_messages 0` (unlimited) because the
 * default of 1000 silently drops even QoS 1 messages for a lagging subscriber (LIBRARY-NOTES).
 */
export async function startMosquitto(): Promise<OwnBroker> {
  return startMosquittoWithConfig(["allow_anonymous true"]);
}

/** nats-server with JetStream on a free port and its own store directory. */
export async function startNatsServer(extraArgs: string[] = []): Promise<OwnBroker> {
  if (!hasBinary("nats-server"))
    throw new KitError("KIT_BROKER_UNAVAILABLE", "no nats-server binary on this machine");
  const dir = mkdtempSync(join(tmpdir(), "sf-nats-"));
  const port = await freePort();
  let proc: ChildProcess;
  const launch = async () => {
    proc = spawn(
      binaryPath("nats-server"),
      ["-a", "127.0.0.1", "-p", String(port), "-js", "-sd", dir, ...extraArgs],
      {
        stdio: "ignore",
      },
    );
    await waitReachable(port);
  };
  await launch();
  return {
    url: `nats://127.0.0.1:${port}`,
    port,
    restart: async () => {
      await stopProcess(proc);
      await launch();
    },
    stop: async () => {
      await stopProcess(proc);
      rmSync(dir, { recursive: true, force: true });
    },
  };
}

async function fromContainers(image: string, port: number): Promise<string | undefined> {
  try {
    execFileSync("docker", ["info"], { stdio: "ignore", timeout: 5000 });
  } catch {
    return undefined;
  }
  const name = "testcontainers";
  // Optional: only where the package is installed and a Docker engine answers.
  const mod = (await import(name).catch(() => undefined)) as
    | {
        GenericContainer: new (
          image: string,
        ) => {
          withExposedPorts(p: number): {
            start(): Promise<{ getMappedPort(p: number): number; getHost(): string }>;
          };
        };
      }
    | undefined;
  if (!mod) return undefined;
  const c = await new mod.GenericContainer(image).withExposedPorts(port).start();
  return `${c.getHost()}:${c.getMappedPort(port)}`;
}

const own: OwnBroker[] = [];
let mqttCached: Promise<string> | undefined;
let natsCached: Promise<string> | undefined;

/** The MQTT broker for tests that do not need to own it. */
export function mqttUrl(): Promise<string> {
  mqttCached ??= (async () => {
    if (process.env.MQTT_URL) return process.env.MQTT_URL;
    if (await reachable("127.0.0.1", 1883)) return "mqtt://127.0.0.1:1883";
    if (hasBinary("mosquitto")) {
      const b = await startMosquitto();
      own.push(b);
      return b.url;
    }
    const hostPort = await fromContainers("eclipse-mosquitto:2", 1883);
    if (hostPort) return `mqtt://${hostPort}`;
    throw new KitError(
      "KIT_BROKER_UNAVAILABLE",
      "no MQTT broker: set MQTT_URL, run Mosquitto on 127.0.0.1:1883, install the mosquitto package, or provide a Docker engine",
    );
  })();
  return mqttCached;
}

/** The NATS server (with JetStream) for tests that do not need to own it. */
export function natsUrl(): Promise<string> {
  natsCached ??= (async () => {
    if (process.env.NATS_URL) return process.env.NATS_URL;
    if (await reachable("127.0.0.1", 4222)) return "nats://127.0.0.1:4222";
    if (hasBinary("nats-server")) {
      const b = await startNatsServer();
      own.push(b);
      return b.url;
    }
    const hostPort = await fromContainers("nats:2.10", 4222);
    if (hostPort) return `nats://${hostPort}`;
    throw new KitError(
      "KIT_BROKER_UNAVAILABLE",
      "no NATS server: set NATS_URL, run nats-server -js on 127.0.0.1:4222, install the nats-server package, or provide a Docker engine",
    );
  })();
  return natsCached;
}

/** Stops brokers this module started for the shared URLs. */
export async function stopOwnBrokers(): Promise<void> {
  await Promise.all(own.splice(0).map((b) => b.stop()));
}

/** A site id unique to one test, so each test has its own subject prefix. */
export function testSite(label = "t"): string {
  return `${label}-${Math.random().toString(36).slice(2, 10)}`;
}

/** Waits until `cond()` is true or `ms` passes; returns the last value of cond(). */
export async function waitFor(cond: () => boolean, ms = 5000, stepMs = 10): Promise<boolean> {
  const until = Date.now() + ms;
  while (Date.now() < until) {
    if (cond()) return true;
    await new Promise((r) => setTimeout(r, stepMs));
  }
  return cond();
}

/**
 * Mosquitto on a free port with the caller's configuration lines (e.g. password_file, acl_file).
 * The listener, store and `max_queued_messages 0` are added here; `files` are written into the
 * broker's own directory first, and `{dir}` in a line stands for that directory.
 */
export async function startMosquittoWithConfig(
  lines: string[],
  files: Record<string, string> = {},
): Promise<OwnBroker & { dir: string }> {
  if (!hasBinary("mosquitto"))
    throw new KitError("KIT_BROKER_UNAVAILABLE", "no mosquitto binary on this machine");
  const dir = mkdtempSync(join(tmpdir(), "sf-mosq-"));
  chmodSync(dir, 0o777);
  for (const [name, text] of Object.entries(files)) {
    writeFileSync(join(dir, name), text);
    // Mosquitto runs as the 'mosquitto' user once started as root: it must read what we wrote.
    chmodSync(join(dir, name), 0o644);
  }
  const port = await freePort();
  const conf = join(dir, "mosquitto.conf");
  writeFileSync(
    conf,
    [
      `listener ${port} 127.0.0.1`,
      "persistence true",
      `persistence_location ${dir}/`,
      "max_queued_messages 0",
      "max_inflight_messages 100",
      "log_dest none",
      ...lines.map((l) => l.replaceAll("{dir}", dir)),
      "",
    ].join("\n"),
  );
  let proc: ChildProcess;
  const launch = async () => {
    proc = spawn(binaryPath("mosquitto"), ["-c", conf], { stdio: "ignore" });
    await waitReachable(port);
  };
  await launch();
  return {
    url: `mqtt://127.0.0.1:${port}`,
    port,
    dir,
    restart: async () => {
      await stopProcess(proc);
      await launch();
    },
    stop: async () => {
      await stopProcess(proc);
      rmSync(dir, { recursive: true, force: true });
    },
  };
}

/**
 * nats-server (JetStream on, own store) on a free port with a configuration file, and `env` added
 * to its environment (for `$VARIABLE` references such as passwords). It runs a copy of the file
 * whose `store_dir` is the broker's own directory and without its `http` monitor line; the port
 * on the command line overrides the file's `listen`.
 */
export async function startNatsServerWithConfig(
  confPath: string,
  env: Record<string, string> = {},
): Promise<OwnBroker> {
  if (!hasBinary("nats-server"))
    throw new KitError("KIT_BROKER_UNAVAILABLE", "no nats-server binary on this machine");
  const dir = mkdtempSync(join(tmpdir(), "sf-nats-"));
  const port = await freePort();
  // nats-server refuses -sd next to a store_dir in the file, so a copy points store_dir at our
  // directory and drops the fixed http monitor port; everything else is the file as shipped.
  const text = readFileSync(confPath, "utf8")
    .replace(/store_dir:\s*\S+/g, `store_dir: "${join(dir, "js")}"`)
    .replace(/^\s*http:.*$/gm, "");
  const conf = join(dir, "nats.conf");
  writeFileSync(conf, text);
  const jsArgs = /jetstream\s*[{:]/.test(text) ? [] : ["-js", "-sd", join(dir, "js")];
  let proc: ChildProcess;
  const launch = async () => {
    proc = spawn(binaryPath("nats-server"), ["-c", conf, "-a", "127.0.0.1", "-p", String(port), ...jsArgs], {
      stdio: "ignore",
      env: { ...process.env, ...env },
    });
    await waitReachable(port);
  };
  await launch();
  return {
    url: `nats://127.0.0.1:${port}`,
    port,
    restart: async () => {
      await stopProcess(proc);
      await launch();
    },
    stop: async () => {
      await stopProcess(proc);
      rmSync(dir, { recursive: true, force: true });
    },
  };
}
