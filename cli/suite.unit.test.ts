import { resolve } from "node:path";
import { describe, expect, test } from "vitest";
import { statusRows } from "./commands/status.js";
import { readDemoConfig, suiteConfigs } from "./demo.js";
import { ROOT } from "./paths.js";

const demoFile = resolve(ROOT, "infra/sites/kestrel-r1/demo.yaml");
const extras = {
  keyId: "demo-x",
  secret: "base64:AAAA",
  dataDir: "/tmp/x",
  consolePort: 0,
  startIso: "2026-01-05T00:00:00.000Z",
};

describe("the demo's per-service configs", () => {
  test("plant-sim follows the shared scaled clock one to one and trusts the run's key only", () => {
    // given the demo file at its own time scale
    const c = readDemoConfig(demoFile);
    // when the suite's configs are derived
    const cfg = suiteConfigs(c, { transport: "embedded", url: "mqtt://127.0.0.1:1" }, extras);
    const ps = cfg["plant-sim"]?.plantSim as Record<string, unknown>;
    const gw = ps.gateway as Record<string, unknown>;
    // then the simulation runs at timeScale 1 on the scaled clock, and the gateway holds only this run's key
    expect(ps.timeScale).toBe(1);
    expect(gw.keys).toEqual({ "demo-x": "base64:AAAA" });
    // and its watchdog, in scaled seconds, is the wall allowance times the scale
    expect(gw.watchdogS).toBe(c.wall.watchdogWallS * c.timeScale);
  });

  test("validate signs with the same key id and waits wall-clock allowances scaled to the demo's clock", () => {
    const c = readDemoConfig(demoFile);
    const v = suiteConfigs(c, { transport: "embedded", url: "mqtt://127.0.0.1:1" }, extras).validate
      ?.validate as Record<string, unknown>;
    expect((v.dispatch as Record<string, unknown>).keyId).toBe("demo-x");
    expect(v.approvalTimeoutS).toBe(c.wall.approvalWallS * c.timeScale);
    expect(v.initialMode).toBe("advisory");
  });

  test("closed-loop mode lifts the site's approval requirement, which validate would otherwise refuse", () => {
    const c = { ...readDemoConfig(demoFile), mode: "closed-loop" as const };
    const v = suiteConfigs(c, { transport: "embedded", url: "mqtt://127.0.0.1:1" }, extras).validate
      ?.validate as Record<string, unknown>;
    expect(v.initialMode).toBe("closed-loop");
    expect((v.policy as Record<string, unknown>).requireApproval).toBe(false);
  });

  test("the market keeps the wall clock but runs the demo's time scale from the scaled clock's start", () => {
    const c = readDemoConfig(demoFile);
    const m = suiteConfigs(c, { transport: "embedded", url: "mqtt://127.0.0.1:1" }, extras).market
      ?.market as Record<string, unknown>;
    expect(m.timeScale).toBe(c.timeScale);
    expect(m.startAt).toBe(extras.startIso);
  });
});

describe("service status from heartbeats", () => {
  const hb = (service: string, status: "running" | "lost", intervalS: number) => ({
    service,
    instance: "0",
    status,
    intervalS,
    counts: { in: 3, out: 4, deadLettered: 0 },
  });

  test("marks overdue, lost and unheard services stale and the fresh one not", () => {
    // given three heartbeats heard at different times, and one expected service never heard
    const now = 100_000;
    const heard = new Map([
      ["ingest/0", { data: hb("ingest", "running", 5), receivedMs: now - 4_000 }],
      ["steady/0", { data: hb("steady", "running", 5), receivedMs: now - 11_000 }],
      ["optimize/0", { data: hb("optimize", "lost", 5), receivedMs: now - 1_000 }],
    ]);
    // when the table is built
    const rows = statusRows(heard, now, ["ingest", "steady", "optimize", "validate"]);
    const by = new Map(rows.map((r) => [r.service, r]));
    // then 4 s of a 5 s interval is fresh; 11 s is overdue (more than two intervals); lost and unheard are stale
    expect(by.get("ingest")?.stale).toBe(false);
    expect(by.get("steady")?.stale).toBe(true);
    expect(by.get("steady")?.note).toContain("overdue");
    expect(by.get("optimize")?.stale).toBe(true);
    expect(by.get("validate")?.status).toBe("not heard");
    expect(by.get("ingest")?.ageS).toBeCloseTo(4, 6);
  });
});
