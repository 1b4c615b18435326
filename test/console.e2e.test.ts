/**
 * The console in a real browser (Chromium from the machine's packages, driven by playwright-core):
 * a console started here, fed by events this test publishes on a real MQTT broker. A proposal
 * appears; an operator logs in with the demo users file, approves it, and sees the approval
 * recorded (after its round trip over the broker); then a command and its readback appear.
 * Leaves a screenshot in test-artifacts/console.png.
 */
import { existsSync, mkdirSync, mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import type { Page } from "playwright-core";
import { afterAll, describe, expect, it } from "vitest";
import { type ConsoleConfig, consoleConfigSchema } from "../services/console/config.js";
import { type ConsoleService, readUsersFile, start } from "../services/console/index.js";
import {
  awaitingApproval,
  commandData,
  cycleData,
  modelData,
  proposalData,
  readbackData,
} from "../services/console/test-events.js";
import type { Bus } from "../services/kit/bus.js";
import { systemClock } from "../services/kit/clock.js";
import { loadConfig } from "../services/kit/config.js";
import { createEvent, decodeEvent, type EventOptions, encodeEvent } from "../services/kit/envelope.js";
import type { EventDataMap, EventType, TagValue } from "../services/kit/generated/messages.js";
import { silentLogger } from "../services/kit/log.js";
import { connectMqtt } from "../services/kit/mqtt.js";
import { schemaRegistry } from "../services/kit/schemas.js";
import { subject } from "../services/kit/subjects.js";
import { mqttUrl, stopOwnBrokers, testSite, waitFor } from "./support/brokers.js";
import { launchChromium } from "./support/browser.js";

const ARTIFACTS = join(import.meta.dirname, "..", "test-artifacts");
const USERS_FILE = join(import.meta.dirname, "..", "infra", "sites", "kestrel-r1", "users.example.yaml");

/** A deterministic wiggle for invented trend data (demo only). */
function wiggle(i: number, seed: number): number {
  return Math.sin(i * 0.37 + seed) * 0.6 + Math.sin(i * 0.11 + 2 * seed) * 0.4;
}

describe("the operator console in a browser", () => {
  const cleanup: Array<() => Promise<void> | void> = [];
  afterAll(async () => {
    for (const c of cleanup.splice(0).reverse()) await c();
    await stopOwnBrokers();
  });

  it("shows a waiting proposal, records an operator's approval, then shows the command and its readback", async () => {
    const site = testSite("console-e2e");
    const url = await mqttUrl();
    const registry = schemaRegistry();
    const bus: Bus = await connectMqtt({ url });
    cleanup.push(() => bus.close());
    const approvals: string[] = [];
    await bus.subscribe(subject(site, "operator.approval"), (m) => {
      const d = decodeEvent(registry, m.payload, 1 << 20);
      if (d.ok && d.event.type === "rto.operator-approval.v1") approvals.push(d.event.data.user);
    });
    const publish = async <T extends EventType>(
      service: string,
      stream: string,
      type: T,
      data: EventDataMap[T],
      options: EventOptions & { retain?: boolean } = {},
    ) => {
      const e = createEvent(
        { site, service, instance: "0", clock: systemClock, registry },
        type,
        data,
        options,
      );
      await bus.publish(subject(site, stream), encodeEvent(e), { retain: options.retain ?? false });
      return e;
    };

    const config = loadConfig<ConsoleConfig>(consoleConfigSchema, {
      site,
      bus: { transport: "mqtt", url },
      http: { enabled: false },
      logLevel: "silent",
      console: { port: 0, pushIntervalMs: 100, trendStepS: 10 },
    });
    const service: ConsoleService = await start(config, {
      log: silentLogger(),
      users: readUsersFile(USERS_FILE),
    });
    cleanup.push(() => service.stop());

    // ---- the plant's recent past, as the pipeline would have published it ----
    const now = Date.now();
    const startMs = now - 40 * 60_000;
    for (const svc of ["ingest", "steady", "reconcile", "estimate", "optimize", "validate", "market"]) {
      await publish(svc, `heartbeat.${svc}`, "rto.heartbeat.v1", {
        service: svc,
        instance: "0",
        status: "running",
        intervalS: 5,
        uptimeS: 2400,
        seq: 480,
      });
    }
    await publish("validate", "state.mode", "rto.operator-mode.v1", {
      mode: "advisory",
      user: "validate",
      reason: "advisory by default at start-up",
      at: startMs,
      accepted: true,
    });
    await publish("market", "prices", "rto.prices.v1", {
      effectiveFrom: now - 3_600_000,
      nextChangeAt: now + 3_600_000,
      source: "market-schedule",
      prices: [
        { symbol: "pA", value: 0.55, unit: "USD/kg" },
        { symbol: "pB", value: 0.9, unit: "USD/kg" },
        { symbol: "pP", value: 2.4, unit: "USD/kg" },
        { symbol: "pW", value: 0.3, unit: "USD/kg" },
        { symbol: "pCool", value: 0.00002, unit: "USD/kJ" },
      ],
    });
    const tags = [
      { tag: "TI-101", unit: "degC", base: 70, amp: 0.15, key: true },
      { tag: "FI-102", unit: "kg/s", base: 1.2, amp: 0.01, key: true },
      { tag: "FI-101", unit: "kg/s", base: 2.0, amp: 0.012, key: true },
      { tag: "TI-202", unit: "degC", base: 38.5, amp: 0.2, key: true },
    ];
    await publish("steady", "snapshot", "rto.snapshot.v1", {
      startMs: now - 120_000,
      endMs: now - 60_000,
      spanS: 60,
      lastCommandMs: null,
      excluded: [],
      tags: tags.map((t) => ({
        tag: t.tag,
        variable: t.tag,
        key: t.key,
        count: 12,
        unit: t.unit,
        mean: t.base,
        std: t.amp,
        sigma: t.amp,
        modelUnit: t.unit,
        modelMean: t.base,
        modelStd: t.amp,
      })),
    });
    const values: TagValue[] = [];
    for (let i = 0; i < 240; i++) {
      for (const [k, t] of tags.entries()) {
        values.push({
          tag: t.tag,
          unit: t.unit,
          value: t.base + t.amp * wiggle(i, k + 1),
          quality: "good" as const,
          status: "good" as const,
          time: startMs + i * 10_000,
        });
      }
    }
    await publish("ingest", "measurements", "rto.measurements.v1", {
      source: "sim-r1",
      values: values as [TagValue, ...TagValue[]],
    });
    await publish("ingest", "tag-health", "rto.tag-health.v1", {
      timeMs: now,
      sinceMs: now - 60_000,
      intervalS: 60,
      totals: { good: 9500, spike: 2 },
      window: { good: 236, spike: 1 },
      unknown: [],
      tags: [
        ...tags.map((t) => ({
          tag: t.tag,
          unit: t.unit,
          healthy: true,
          status: "good" as const,
          lastStatus: "good" as const,
          lastTimeMs: now - 1000,
          lastGoodTimeMs: now - 1000,
          counts: { good: 2400 },
          window: { good: 60 },
        })),
        {
          tag: "AI-101",
          unit: "1",
          healthy: false,
          status: "spike" as const,
          lastStatus: "spike" as const,
          lastTimeMs: now - 2000,
          lastGoodTimeMs: now - 12_000,
          counts: { good: 2398, spike: 2 },
          window: { good: 56, spike: 1 },
          lastRejection: {
            status: "spike" as const,
            value: 0.41,
            timeMs: now - 2000,
            detail: "jump of 0.31 exceeds 6 sigma (0.03)",
          },
        },
      ],
    });
    await publish("steady", "steady", "rto.steady.v1", {
      state: "steady",
      steady: true,
      timeMs: now - 1000,
      steadySinceMs: now - 180_000,
      settleUntilMs: null,
      blockedBy: [],
      notSteady: [],
    });
    for (let i = 0; i < 6; i++) {
      await publish(
        "estimate",
        "model",
        "rto.model.v1",
        modelData(44 - i * 0.55, 0.9 - i * 0.05, true, startMs + i * 6 * 60_000),
      );
    }
    await publish("reconcile", "reconciled", "rto.reconciled.v1", {
      method: "linear",
      passThrough: null,
      startMs: now - 120_000,
      endMs: now - 60_000,
      sigmaSource: "model",
      tags: [
        {
          tag: "FI-101",
          variable: "FA",
          unit: "kg/s",
          status: "reconciled",
          measured: 2.004,
          sigma: 0.01,
          value: 1.998,
          sd: 0.006,
          adjustment: 0.006,
        },
        {
          tag: "FI-102",
          variable: "FB",
          unit: "kg/s",
          status: "reconciled",
          measured: 1.195,
          sigma: 0.01,
          value: 1.199,
          sd: 0.006,
          adjustment: -0.004,
        },
        {
          tag: "FI-103",
          variable: "F",
          unit: "kg/s",
          status: "reconciled",
          measured: 3.21,
          sigma: 0.02,
          value: 3.197,
          sd: 0.008,
          adjustment: 0.013,
        },
      ],
      globalTest: { statistic: 0.61, dof: 1, critical: 3.84, pValue: 0.43, alpha: 0.05, passed: true },
      initialGlobalTest: { statistic: 0.61, dof: 1, critical: 3.84, pValue: 0.43, alpha: 0.05, passed: true },
      measurementTests: [],
      nodalTests: [],
      grossErrors: [],
      eliminated: [],
      warnings: [],
    });
    // Earlier cycles: their snapshots set the plant time of each profit point.
    const profits = [1.62, 1.66, 1.71, 1.74, 1.78];
    for (const [i, p] of profits.entries()) {
      const cycleid = `cyc-${i}`;
      const endMs = startMs + (i + 1) * 7 * 60_000;
      await publish(
        "steady",
        "snapshot",
        "rto.snapshot.v1",
        { startMs: endMs - 60_000, endMs, spanS: 60, lastCommandMs: null, tags: [], excluded: [] },
        { cycleid },
      );
      await publish("steady", "cycle", "rto.cycle.v1", cycleData("opened", "steady", "steady"), { cycleid });
      await publish(
        "reconcile",
        "cycle",
        "rto.cycle.v1",
        cycleData("stage-done", "reconcile", "reconciled"),
        { cycleid },
      );
      await publish("estimate", "cycle", "rto.cycle.v1", cycleData("stage-done", "estimate", "accepted"), {
        cycleid,
      });
      await publish("optimize", "proposal", "rto.proposal.v1", proposalData(p, 0.04), { cycleid });
      await publish("optimize", "cycle", "rto.cycle.v1", cycleData("stage-done", "optimize", "proposed"), {
        cycleid,
      });
      if (i === 2) {
        await publish(
          "validate",
          "cycle",
          "rto.cycle.v1",
          cycleData("aborted", "validate", "failed", [
            { code: "VALIDATE_DATA_STALE", message: "the snapshot is 912 s old; the site allows 600 s" },
          ]),
          { cycleid },
        );
      } else if (i < profits.length - 1) {
        await publish("validate", "cycle", "rto.cycle.v1", cycleData("closed", "readback", "accepted"), {
          cycleid,
        });
      }
    }
    const lastCycle = `cyc-${profits.length - 1}`;
    const proposal = await publish("optimize", "proposal", "rto.proposal.v1", proposalData(1.8, 0.05), {
      cycleid: lastCycle,
    });
    await publish(
      "validate",
      "validation",
      "rto.validation.v1",
      awaitingApproval(proposal.id, now + 15 * 60_000),
      { cycleid: lastCycle },
    );
    await publish(
      "validate",
      "cycle",
      "rto.cycle.v1",
      cycleData("stage-done", "validate", "awaiting-approval"),
      { cycleid: lastCycle },
    );
    expect(await waitFor(() => service.view.isPending(proposal.id, Date.now()), 10_000)).toBe(true);

    // ---- the browser ----
    const browser = await launchChromium();
    cleanup.push(() => browser.close());
    const context = browser.context;
    const page: Page = context.pages()[0] ?? (await context.newPage());
    const consoleErrors: string[] = [];
    page.on("pageerror", (err) => consoleErrors.push(err.message));
    page.on("console", (msg) => {
      if (msg.type() === "error") consoleErrors.push(msg.text());
    });
    await page.goto(service.url);

    // The cautions are on the page before anyone logs in.
    await expect.poll(() => page.locator(".cautions").textContent()).toMatch(/not a safety system/);
    const card = page.locator(`[data-proposal="${proposal.id}"]`);
    await card.waitFor({ state: "visible", timeout: 10_000 });
    expect(await card.textContent()).toMatch(/FI-102/);
    expect(await card.textContent()).toMatch(/Log in as an operator/);
    await page.locator("#trend-grid .chart canvas").first().waitFor({ state: "visible", timeout: 10_000 });
    expect(await page.locator("#trend-grid .chart-box").count()).toBe(4);
    expect(await page.locator("#parameters-body .chart canvas").count()).toBe(1);

    // Log in as the demo operator and approve with a reason.
    await page.fill("#login-user", "operator");
    await page.fill("#login-password", "demo-operator");
    await page.click("#login-form button[type=submit]");
    await page.locator("#who-name", { hasText: "operator" }).waitFor({ timeout: 10_000 });
    await card.locator("input.reason").fill("cooling margin checked on the panel");
    mkdirSync(ARTIFACTS, { recursive: true });
    await page.screenshot({ path: join(ARTIFACTS, "console-pending.png"), fullPage: false });
    await card.locator("button.approve").click();
    await page.locator("#decisions-body tr.decision", { hasText: "operator" }).waitFor({ timeout: 10_000 });
    const decision = await page.locator("#decisions-body tr.decision").first().textContent();
    expect(decision).toMatch(/approve/);
    expect(decision).toMatch(/cooling margin checked/);
    expect(approvals).toEqual(["operator"]);
    await page.locator(`[data-proposal="${proposal.id}"]`).waitFor({ state: "detached", timeout: 10_000 });

    // validate would now send the command, and the control side answer it.
    await publish(
      "validate",
      "validation",
      "rto.validation.v1",
      { ...awaitingApproval(proposal.id, now + 15 * 60_000), next: "dispatch" },
      { cycleid: lastCycle },
    );
    await publish(
      "validate",
      "command",
      "rto.command.v1",
      commandData(site, 7, proposal.id, lastCycle, "operator", Date.now()),
      { cycleid: lastCycle },
    );
    await publish("validate", "cycle", "rto.cycle.v1", cycleData("stage-done", "dispatch", "dispatched"), {
      cycleid: lastCycle,
    });
    await publish(
      "plant-sim",
      "readback",
      "rto.readback.v1",
      readbackData(site, 7, proposal.id, Date.now()),
      { cycleid: lastCycle },
    );
    await publish("validate", "cycle", "rto.cycle.v1", cycleData("stage-done", "readback", "accepted"), {
      cycleid: lastCycle,
    });
    const command = page.locator("#control-body tr.command").first();
    await command.waitFor({ timeout: 10_000 });
    expect(await command.textContent()).toMatch(/^7.*advisory-approved.*FI-102 → 1\.35 kg\/s.*operator/s);
    const readback = page.locator("#control-body tr.readback").first();
    await readback.waitFor({ timeout: 10_000 });
    expect(await readback.textContent()).toMatch(/command 7.*accepted.*remote/s);

    // Let the charts settle, then keep a picture of the page.
    await page.waitForTimeout(400);
    await page.screenshot({ path: join(ARTIFACTS, "console.png"), fullPage: true });
    expect(consoleErrors).toEqual([]);
  });
});
