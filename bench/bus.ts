/**
 * Messages per second through each transport, with validation on (Events.on: size check, parse,
 * envelope + data schema, de-duplication) and off (a raw subscriber that only parses JSON),
 * measured in the same run on the same broker, for 200 B readings and 50-tag batches.
 * Also the idle RSS of a started service (compiled, on plain node). Run: npx tsx bench/bus.ts [messages]
 */
import { execFileSync, spawn } from "node:child_process";
import type { Bus } from "../services/kit/bus.js";
import { ManualClock } from "../services/kit/clock.js";
import { startEmbeddedBroker } from "../services/kit/embedded.js";
import { createEvent, type Emitter, encodeEvent } from "../services/kit/envelope.js";
import { Events } from "../services/kit/events.js";
import { silentLogger } from "../services/kit/log.js";
import { connectMqtt } from "../services/kit/mqtt.js";
import { connectNats } from "../services/kit/nats.js";
import { schemaRegistry } from "../services/kit/schemas.js";
import { mqttUrl, natsUrl, startMosquitto, testSite } from "../test/support/brokers.js";

const N = Number(process.argv[2] ?? 20_000);

function payloads(site: string, tags: number, n: number): Buffer[] {
  const emitter: Emitter = {
    site,
    service: "bench",
    instance: "0",
    clock: new ManualClock(1_796_000_000_000),
    registry: schemaRegistry(),
  };
  const out: Buffer[] = [];
  for (let i = 0; i < n; i++) {
    const values = Array.from({ length: tags }, (_, k) => ({
      tag: `TI-${100 + k}`,
      value: 80 + Math.sin(i + k),
      quality: "good" as const,
      time: 1_796_000_000_000 + i * 1000,
    }));
    const [first, ...rest] = values;
    if (!first) throw new Error("a batch needs at least one tag");
    out.push(
      encodeEvent(createEvent(emitter, "rto.measurements.v1", { source: "bench", values: [first, ...rest] })),
    );
  }
  return out;
}

async function run(pub: Bus, sub: Bus, site: string, msgs: Buffer[], validate: boolean): Promise<number> {
  const subj = `rto.${site}.raw.bench${validate ? "v" : "r"}`;
  let got = 0;
  let done!: () => void;
  const finished = new Promise<void>((r) => (done = r));
  let s: { unsubscribe(): Promise<void> };
  if (validate) {
    const emitter: Emitter = {
      site,
      service: "bench",
      instance: "0",
      clock: new ManualClock(0),
      registry: schemaRegistry(),
    };
    const events = new Events({ bus: sub, emitter, log: silentLogger() });
    s = await events.on(subj, ["rto.measurements.v1"], () => {
      if (++got === msgs.length) done();
    });
  } else {
    s = await sub.subscribe(subj, (m) => {
      JSON.parse(Buffer.from(m.payload.buffer, m.payload.byteOffset, m.payload.byteLength).toString("utf8"));
      if (++got === msgs.length) done();
    });
  }
  const t0 = performance.now();
  // Keep a window of publishes in flight, as a busy gateway would.
  const window = 500;
  let inflight: Promise<void>[] = [];
  for (const m of msgs) {
    inflight.push(pub.publish(subj, m));
    if (inflight.length >= window) {
      await Promise.all(inflight);
      inflight = [];
    }
  }
  await Promise.all(inflight);
  const timeout = setTimeout(() => done(), 60_000);
  await finished;
  clearTimeout(timeout);
  const seconds = (performance.now() - t0) / 1000;
  await s.unsubscribe();
  if (got < msgs.length) console.error(`  ! only ${got} of ${msgs.length} arrived`);
  return got / seconds;
}

/**
 * RSS of an idle started service, run as production runs it: compiled JavaScript on plain node.
 * `kind` "kit" is the shared runtime alone; "steady" is a pipeline stage with the demo site model
 * loaded (mathjs and the compiled model included).
 */
async function idleRssMb(kind: "kit" | "steady", nodeFlags: string[] = []): Promise<number> {
  const root = new URL("..", import.meta.url).pathname;
  const script =
    kind === "kit"
      ? `
    import { startRuntime, loadConfig, serviceConfigSchema, silentLogger } from "./dist/kit/index.js";
    const config = loadConfig(serviceConfigSchema(), { site: "bench-idle", bus: { url: process.argv[1] }, logLevel: "silent" });
    const rt = await startRuntime("idle", config, { log: silentLogger() });
    const svc = rt.ready();
    setTimeout(async () => { process.stdout.write(String(process.memoryUsage().rss)); await svc.stop(); process.exit(0); }, 3000);
  `
      : `
    import { start } from "./dist/steady/index.js";
    import { steadyConfigSchema } from "./dist/steady/config.js";
    import { loadConfig, silentLogger } from "./dist/kit/index.js";
    const config = loadConfig(steadyConfigSchema, { site: "bench-idle", bus: { url: process.argv[1] }, logLevel: "silent",
      steady: { siteModelFile: "infra/sites/kestrel-r1/site.yaml" } });
    const svc = await start(config, { log: silentLogger() });
    setTimeout(async () => { process.stdout.write(String(process.memoryUsage().rss)); await svc.stop(); process.exit(0); }, 3000);
  `;
  return new Promise((resolve, reject) => {
    const p = spawn(process.execPath, [...nodeFlags, "--input-type=module", "-e", script, mqtt], {
      cwd: root,
    });
    let out = "";
    p.stdout.on("data", (d) => (out += d));
    p.on("exit", (code) =>
      code === 0 ? resolve(Number(out) / 1024 / 1024) : reject(new Error(`idle service exited ${code}`)),
    );
  });
}

const transports: Array<{ name: string; open: () => Promise<Bus>; close?: () => Promise<void> }> = [];
const mqtt = await mqttUrl();
// An own Mosquitto with unlimited queues: the machine's default config drops QoS 1 messages past
// 1000 queued for a lagging subscriber, which would count as "slow" here.
const ownMosquitto = await startMosquitto();
transports.push({ name: "MQTT 5 / Mosquitto", open: () => connectMqtt({ url: ownMosquitto.url }) });
const nats = await natsUrl();
transports.push({ name: "NATS core", open: () => connectNats({ servers: nats }) });
const embedded = await startEmbeddedBroker();
transports.push({
  name: "embedded (aedes)",
  open: () => connectMqtt({ url: embedded.url, protocolVersion: 4, transportLabel: "embedded" }),
});

console.log(`bus throughput, ${N} messages per case (messages/s; ratio = validated / unvalidated, same run)`);
console.log("transport            | payload        | unvalidated | validated | ratio");
for (const t of transports) {
  for (const [label, tags] of [
    ["1 reading ~200 B", 1],
    ["50-tag batch", 50],
  ] as const) {
    const site = testSite("bench");
    const msgs = payloads(site, tags, tags === 1 ? N : Math.max(2000, Math.floor(N / 4)));
    const pub = await t.open();
    const sub = await t.open();
    await run(pub, sub, site, msgs.slice(0, 500), false); // warm-up
    await run(pub, sub, site, msgs.slice(0, 500), true);
    // Interleaved and best of three each, so that a burst of load elsewhere on the machine does not
    // land on one side only.
    let raw = 0;
    let val = 0;
    for (let r = 0; r < 3; r++) {
      raw = Math.max(raw, await run(pub, sub, site, msgs, false));
      val = Math.max(val, await run(pub, sub, site, msgs, true));
    }
    console.log(
      `${t.name.padEnd(20)} | ${label.padEnd(14)} | ${raw.toFixed(0).padStart(11)} | ${val.toFixed(0).padStart(9)} | ${(val / raw).toFixed(2)}`,
    );
    await pub.close();
    await sub.close();
  }
}
await embedded.close();
await ownMosquitto.stop();
{
  const root = new URL("..", import.meta.url).pathname;
  execFileSync(process.execPath, [`${root}node_modules/typescript/bin/tsc`, "-p", "tsconfig.build.json"], {
    cwd: root,
  });
  console.log("idle RSS (compiled, plain node; target < 100 MB):");
  console.log(`  kit runtime only          ${(await idleRssMb("kit")).toFixed(1)} MB`);
  console.log(`  steady + demo site model  ${(await idleRssMb("steady")).toFixed(1)} MB`);
  console.log(
    `  same, --optimize-for-size ${(await idleRssMb("steady", ["--optimize-for-size"])).toFixed(1)} MB (the container image's setting)`,
  );
}
console.log(
  "note: NATS core is at-most-once; a count short of the total there is a slow-consumer drop, not a bug.",
);
process.exit(0);
