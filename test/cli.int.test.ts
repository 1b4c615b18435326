/**
 * The command-line tool on real input: site models (good and broken), the demo site's what-if, a
 * simulated day written and replayed into a report, tail and status against a real MQTT broker,
 * and explain on an audit database made here. Commands are called in-process through `run()` with
 * captured output, exactly as the executable calls them.
 */
import { existsSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { afterAll, beforeAll, describe, expect, test } from "vitest";
import { parseBusUrl } from "../cli/args.js";
import { captureIo } from "../cli/io.js";
import { run } from "../cli/steadfast.js";
import type { Bus } from "../services/kit/bus.js";
import { ManualClock } from "../services/kit/clock.js";
import { connectBus } from "../services/kit/connect.js";
import { createEvent, type Emitter, encodeEvent } from "../services/kit/envelope.js";
import { schemaRegistry } from "../services/kit/schemas.js";
import { optimizeOffline } from "../services/optimize/stage.js";
import { EventStore } from "../services/recorder/store.js";
import { mqttUrl, testSite, waitFor } from "./support/brokers.js";
import { DEMO_SITE_DIR, loadDemoSite, optimizeModel } from "./support/demo-site.js";

const SITE_YAML = join(DEMO_SITE_DIR, "site.yaml");
const PLANT_SIM_CONFIG = "services/plant-sim/kestrel-r1.config.yaml";
let dir: string;

async function cli(argv: string[], signal = new AbortController().signal) {
  const io = captureIo();
  const code = await run(argv, { io, signal });
  return { code, out: io.text(), err: io.stderr.join("\n") };
}

beforeAll(() => {
  dir = mkdtempSync(join(tmpdir(), "steadfast-cli-"));
});
afterAll(() => {
  rmSync(dir, { recursive: true, force: true });
});

describe("check", () => {
  test("says OK with a summary for the demo site", async () => {
    const r = await cli(["check", SITE_YAML]);
    expect(r.code).toBe(0);
    expect(r.out).toContain("OK");
    expect(r.out).toContain("site kestrel-r1");
    expect(r.out).toMatch(/decisions 2, parameters 2/);
  });

  test("refuses a broken model with file:line, JSON path, reason and code, and exit code 1", async () => {
    const file = "test/fixtures/sites/broken/units-mismatch.yaml";
    const r = await cli(["check", file]);
    expect(r.code).toBe(1);
    expect(r.err).toMatch(
      /units-mismatch\.yaml:\d+: \/model\/equations\/0\/expression: .*\[MODEL_UNITS_MISMATCH\]/,
    );
  });

  test("a missing argument is a usage error (exit code 2)", async () => {
    const r = await cli(["check"]);
    expect(r.code).toBe(2);
    expect(r.err).toContain("usage:");
  });
});

describe("whatif", () => {
  test("finds the optimum the reference sequential NLP finds on the demo site", async () => {
    // given the demo site's model at its defaults
    const model = await loadDemoSite();
    const reference = optimizeModel(model);
    // when the CLI asks for the offline optimum
    const r = await cli(["whatif", "--site", SITE_YAML, "--json"]);
    expect(r.code).toBe(0);
    const proposal = JSON.parse(r.out) as {
      setpoints: Array<{ decision: string; proposed: number }>;
      objective: { proposed: number };
    };
    // then decisions and profit agree with test/support/demo-site.ts (README: FB 2.176 kg/s, T_R 73.83 °C)
    for (const s of proposal.setpoints)
      expect(s.proposed).toBeCloseTo(reference.decisions[s.decision] as number, 3);
    expect(proposal.objective.proposed).toBeCloseTo(reference.objective, 5);
  });

  test("a dearer product raises the optimal feed-B rate, and the text names the active set", async () => {
    const model = await loadDemoSite();
    const reference = optimizeModel(model, { prices: { pP: 3.6 } });
    const r = await cli(["whatif", "--site", SITE_YAML, "--price", "pP=3.6"]);
    expect(r.code).toBe(0);
    const fb = Number(/FB\s+([\d.]+) kg\/s/.exec(r.out)?.[1]);
    expect(fb).toBeCloseTo(reference.decisions.FB as number, 3);
    expect(r.out).toMatch(/active constraints/);
  });

  test("a price symbol the site does not declare is a usage error", async () => {
    const r = await cli(["whatif", "--site", SITE_YAML, "--price", "pZ=1"]);
    expect(r.code).toBe(2);
    expect(r.err).toContain("pZ");
  });
});

describe("simulate, then replay", () => {
  test("a simulated day with setpoint moves replays into snapshots and an HTML report", async () => {
    // given a day of simulated plant data with a move every 6 h
    const csv = join(dir, "day.csv");
    const sim = await cli([
      "simulate",
      "--config",
      PLANT_SIM_CONFIG,
      "--days",
      "1",
      "--out",
      csv,
      "--moves-every-h",
      "6",
    ]);
    expect(sim.code).toBe(0);
    const lines = readFileSync(csv, "utf8").trim().split("\n");
    // 86,400 s at 10 s per batch, plus the header
    expect(lines).toHaveLength(8641);
    expect(lines[0]).toMatch(/^time,FI-101,/);
    // when it is replayed with a report
    const html = join(dir, "report.html");
    const r = await cli(["replay", csv, "--site", SITE_YAML, "--format", "wide", "--report", html]);
    expect(r.code).toBe(0);
    // then every batch was read, steady snapshots were found, and the report holds charts
    expect(r.out).toMatch(/batches\s+8640/);
    const snapshots = Number(/steady snapshots\s+(\d+)/.exec(r.out)?.[1]);
    expect(snapshots).toBeGreaterThan(0);
    const page = readFileSync(html, "utf8");
    expect(page).toContain("<svg");
    expect(page.match(/<svg/g)?.length).toBeGreaterThanOrEqual(6);
  });
});

describe("on a real MQTT broker", () => {
  let url: string;
  let bus: Bus;
  let site: string;
  let emitter: Emitter;
  beforeAll(async () => {
    url = await mqttUrl();
    site = testSite("cli");
    bus = await connectBus({ site, bus: parseBusUrl(url) }, { name: `${site}-publisher` });
    emitter = {
      site,
      service: "tester",
      instance: "0",
      clock: new ManualClock(Date.UTC(2026, 0, 5, 8)),
      registry: schemaRegistry(),
    };
  });
  afterAll(async () => {
    await bus.close();
  });

  test("tail prints one readable line per event and stops after --count", async () => {
    const ctl = new AbortController();
    const io = captureIo();
    const tail = run(["tail", "prices", "--site", site, "--bus", url, "--count", "2", "--for", "20"], {
      io,
      signal: ctl.signal,
    });
    await waitFor(() => io.stderr.some((l) => l.startsWith("following")), 10_000);
    for (const pP of [3.2, 3.6]) {
      const e = createEvent(emitter, "rto.prices.v1", {
        effectiveFrom: Date.UTC(2026, 0, 5, 8),
        prices: [{ symbol: "pP", value: pP, unit: "USD/kg" }],
        source: "test",
      });
      await bus.publish(`rto.${site}.prices`, encodeEvent(e));
    }
    expect(await tail).toBe(0);
    expect(io.stdout).toHaveLength(2);
    expect(io.stdout[0]).toMatch(/^08:00:00 prices\s+prices from 08:00:00: pP=3\.2 USD\/kg$/);
    expect(io.stdout[1]).toContain("pP=3.6");
  });

  test("tail --json prints the envelopes as they came", async () => {
    const io = captureIo();
    const tail = run(
      ["tail", "cycle", "--json", "--site", site, "--bus", url, "--count", "1", "--for", "20"],
      {
        io,
        signal: new AbortController().signal,
      },
    );
    await waitFor(() => io.stderr.length > 0, 10_000);
    const e = createEvent(emitter, "rto.cycle.v1", { status: "opened", stage: "steady" }, { cycleid: "c-1" });
    await bus.publish(`rto.${site}.cycle`, encodeEvent(e));
    expect(await tail).toBe(0);
    expect(JSON.parse(io.stdout[0] ?? "{}")).toMatchObject({
      id: e.id,
      type: "rto.cycle.v1",
      cycleid: "c-1",
    });
  });

  test("status lists every service heard with its counts and marks the one that said it was lost", async () => {
    const io = captureIo();
    const status = run(["status", "--site", site, "--bus", url, "--wait", "2", "--all"], {
      io,
      signal: new AbortController().signal,
    });
    await waitFor(() => io.stderr.length > 0, 10_000);
    for (const [service, st] of [
      ["ingest", "running"],
      ["optimize", "lost"],
    ] as const) {
      const e = createEvent(emitter, "rto.heartbeat.v1", {
        service,
        instance: "0",
        status: st,
        intervalS: 5,
        counts: { in: 7, out: 9, deadLettered: 1 },
      });
      await bus.publish(`rto.${site}.heartbeat.${service}`, encodeEvent(e));
    }
    const code = await status;
    const rows = io.stdout.join("\n");
    expect(rows).toMatch(/ingest\s+0\s+running .* in 7 out 9 dead-lettered 1/);
    expect(rows).toMatch(/optimize\s+0\s+lost .*STALE/);
    expect(code).toBe(1);
  });
});

describe("explain", () => {
  test("lays out a recorded cycle from snapshot to proposal, and says what is missing", async () => {
    // given an audit store holding one cycle with a real proposal of the demo site
    const db = join(dir, "audit.sqlite");
    const model = await loadDemoSite();
    const result = await optimizeOffline({ model }, { moveLimits: false });
    if (result.status !== "proposed") throw new Error("the demo site must have an optimum");
    const store = new EventStore({ path: db });
    const base = { site: "kestrel-r1", source: "/steadfast/kestrel-r1/test/0", cycleid: "cyc-1" };
    store.add(
      {
        ...base,
        id: "e1",
        type: "rto.cycle.v1",
        time: "2026-01-05T08:00:00.000Z",
        data: { status: "opened", stage: "steady" },
      },
      "rto.kestrel-r1.cycle",
    );
    store.add(
      { ...base, id: "e2", type: "rto.proposal.v1", time: "2026-01-05T08:00:02.000Z", data: result.proposal },
      "rto.kestrel-r1.proposal",
    );
    store.flush();
    store.close();
    // when explain reads it by id, and as "latest"
    const byId = await cli(["explain", "cyc-1", "--db", db]);
    const latest = await cli(["explain", "latest", "--db", db]);
    // then the chain names the proposal's moves and the stages not reached
    expect(byId.code).toBe(0);
    expect(byId.out).toContain("cyc-1");
    // the demo site's model optimum: FB 2.176 kg/s (infra/sites/kestrel-r1/README.md)
    expect(byId.out).toMatch(/proposal .*FB 1\.8 → 2\.17\d* kg\/s/);
    expect(byId.out).toMatch(/Not reached.*command/);
    expect(latest.out).toBe(byId.out);
  });

  test("an unknown cycle is exit code 1 and a missing database a clear error", async () => {
    const db = join(dir, "audit.sqlite");
    expect(existsSync(db)).toBe(true);
    expect((await cli(["explain", "nope", "--db", db])).code).toBe(1);
    const missing = await cli(["explain", "x", "--db", join(dir, "none.sqlite")]);
    expect(missing.code).toBe(1);
    expect(missing.err).toContain("CLI_DB_MISSING");
  });
});

describe("start and demo", () => {
  test("start runs one service from a config file against a real broker until aborted", async () => {
    const url = await mqttUrl();
    const site = testSite("cli-start");
    const file = join(dir, "ingest.json");
    writeFileSync(
      file,
      JSON.stringify({
        site,
        http: { enabled: false },
        logLevel: "silent",
        ingest: { siteModelFile: SITE_YAML },
      }),
    );
    const ctl = new AbortController();
    const io = captureIo();
    const running = run(["start", "ingest", "--config", file, "--bus", url], { io, signal: ctl.signal });
    expect(await waitFor(() => io.stderr.some((l) => l.startsWith("ingest started")), 20_000)).toBe(true);
    ctl.abort();
    expect(await running).toBe(0);
  });

  test("the demo starts every service on its own broker, says where to look, and stops cleanly", async () => {
    const io = captureIo();
    const code = await run(
      ["demo", "--port", "0", "--console-port", "0", "--data-dir", join(dir, "demo"), "--for", "4"],
      { io, signal: new AbortController().signal },
    );
    const out = io.text();
    expect(code).toBe(0);
    expect(out).toMatch(/broker\s+mqtt:\/\/127\.0\.0\.1:\d+ \(embedded\)/);
    expect(out).toContain(
      "services recorder, console, validate, plant-sim, market, ingest, steady, reconcile, estimate, optimize",
    );
    expect(out).toMatch(/console\s+http:\/\/127\.0\.0\.1:\d+\s+login: demo \/ \S+/);
    expect(out).toContain("NOT a safety system");
    expect(out.trim().split("\n").at(-1)).toBe("stopped.");
    expect(existsSync(join(dir, "demo", "demo.sqlite"))).toBe(true);
  });
});
