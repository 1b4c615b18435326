/**
 * validate on a real MQTT broker: advisory mode holds commands until an operator approves; closed
 * loop sends signed, ramped commands that a control gateway accepts; a proposal that breaks any
 * check never produces a command; a refused or unanswered command raises a readback alarm and holds.
 */
import { afterAll, afterEach, beforeAll, describe, expect, it } from "vitest";
import type { Bus } from "../services/kit/bus.js";
import { systemClock } from "../services/kit/clock.js";
import { verifyCommandSignature } from "../services/kit/command-signing.js";
import { loadConfig } from "../services/kit/config.js";
import { createControlGateway } from "../services/kit/control-gateway.js";
import type { Event } from "../services/kit/envelope.js";
import { Events } from "../services/kit/events.js";
import type {
  CycleStatus,
  Proposal,
  SetpointCommand,
  ValidationResult,
} from "../services/kit/generated/messages.js";
import { createLogger } from "../services/kit/log.js";
import { connectMqtt } from "../services/kit/mqtt.js";
import { schemaRegistry } from "../services/kit/schemas.js";
import { loadSiteModelFile, type SiteModel } from "../services/model/index.js";
import { type ValidateConfig, validateConfigSchema } from "../services/validate/config.js";
import { start, type ValidateService } from "../services/validate/index.js";
import { mqttUrl, stopOwnBrokers, testSite, waitFor } from "./support/brokers.js";

// A test-only key: real keys come from STEADFAST_COMMAND_KEY_FILE (services/validate/main.ts).
const KEY = { id: "test-1", secret: "test-only-signing-key-not-secret-0123456789" };
const SITES = new URL("./fixtures/sites/", import.meta.url).pathname;

let url: string;
let model: SiteModel;
beforeAll(async () => {
  url = await mqttUrl();
  model = await loadSiteModelFile(`${SITES}williams-otto-plant.yaml`);
});
afterAll(async () => {
  await stopOwnBrokers();
});

/** A stand-in for the other stages and the control side: publishes their events, listens to validate's. */
interface Harness {
  site: string;
  bus: Bus;
  svc: ValidateService;
  events: Events;
  commands: Array<Event<"rto.command.v1">>;
  validations: Array<Event<"rto.validation.v1">>;
  cycles: Array<Event<"rto.cycle.v1">>;
  /** Publishes snapshot, model and proposal of a new cycle; returns the proposal event. */
  cycle(
    p: Partial<Proposal>,
    opts?: { snapshotAgeS?: number; model?: "accepted" | "rejected" },
  ): Promise<Event<"rto.proposal.v1">>;
  validationOf(proposalId: string): Promise<ValidationResult>;
}

const closers: Array<() => Promise<void>> = [];
afterEach(async () => {
  for (const c of closers.splice(0).reverse()) await c().catch(() => undefined);
});

function proposal(over: Partial<Proposal> = {}): Proposal {
  return {
    status: "optimal",
    formulation: "sequential",
    setpoints: [
      {
        decision: "FB",
        tag: "FIC-102",
        unit: "kg/s",
        current: 4,
        proposed: 4.3,
        lower: 3.5,
        upper: 4.5,
        lowerFrom: "move-limit",
        upperFrom: "move-limit",
      },
      {
        decision: "T_R",
        tag: "TIC-103",
        unit: "degC",
        current: 75,
        proposed: 77,
        lower: 72,
        upper: 78,
        lowerFrom: "move-limit",
        upperFrom: "move-limit",
      },
    ],
    objective: { sense: "max", unit: "USD/s", current: 100, proposed: 101, change: 1 },
    constraints: [],
    active: [],
    kkt: { stationarity: 1e-8, complementarity: 0, feasibility: 0 },
    solver: { name: "sqp", status: "converged", message: "ok", solveTimeMs: 5 },
    mismatch: { method: "none", updated: false, note: "" },
    parameters: [],
    prices: [],
    ...over,
  };
}

async function harness(validate: Record<string, unknown>): Promise<Harness> {
  const site = testSite("val");
  const config = loadConfig<ValidateConfig>(validateConfigSchema, {
    site,
    bus: { url },
    http: { enabled: false },
    heartbeatS: 1,
    logLevel: "silent",
    validate: { unit: "R-1", cyclePeriodS: 45, tickMs: 50, ...validate },
  });
  const bus: Bus = await connectMqtt({ url });
  closers.push(() => bus.close());
  const events = new Events({
    bus,
    emitter: { site, service: "optimize", instance: "t", clock: systemClock, registry: schemaRegistry() },
    log: createLogger("test", { level: "silent" }),
  });
  const h: Omit<Harness, "svc"> = {
    site,
    bus,
    events,
    commands: [],
    validations: [],
    cycles: [],
    async cycle(p, opts = {}) {
      const cycleid = `C${Math.random().toString(36).slice(2, 12)}`;
      const now = Date.now();
      await events.publish(
        "snapshot",
        "rto.snapshot.v1",
        {
          startMs: now - 600_000,
          endMs: now - (opts.snapshotAgeS ?? 5) * 1000,
          spanS: 600,
          lastCommandMs: null,
          tags: [
            {
              tag: "FIC-102",
              variable: "FB",
              key: true,
              count: 60,
              unit: "kg/s",
              mean: 4,
              std: 0.01,
              sigma: 0.02,
              modelUnit: "kg/s",
              modelMean: 4,
              modelStd: 0.01,
            },
          ],
          excluded: [],
        },
        { cycleid },
      );
      const accepted = (opts.model ?? "accepted") === "accepted";
      await events.publish(
        "model",
        "rto.model.v1",
        {
          status: accepted ? "accepted" : "rejected",
          accepted,
          window: { snapshots: 1, reconciledIds: [], startMs: null, endMs: null },
          parameters: [],
          fit: null,
          correlation: [],
          residuals: [],
          reasons: accepted ? [] : [{ code: "ESTIMATE_CHI_SQUARE", message: "fit too poor" }],
          warnings: [],
        },
        { cycleid },
      );
      return events.publish("proposal", "rto.proposal.v1", proposal(p), { cycleid });
    },
    async validationOf(proposalId) {
      await waitFor(() => h.validations.some((v) => v.data.proposalId === proposalId), 5000);
      const v = h.validations.filter((x) => x.data.proposalId === proposalId).at(-1);
      if (!v) throw new Error(`no validation of ${proposalId}`);
      return v.data;
    },
  };
  await events.on(`rto.${site}.command`, ["rto.command.v1"], (e) => {
    h.commands.push(e);
  });
  await events.on(`rto.${site}.validation`, ["rto.validation.v1"], (e) => {
    h.validations.push(e);
  });
  await events.on(`rto.${site}.cycle`, ["rto.cycle.v1"], (e) => {
    h.cycles.push(e);
  });
  const svc = await start(config, { model, signingKey: KEY });
  closers.push(() => svc.stop());
  return { ...h, svc };
}

const cycleOf = (h: Harness, cycleid: string | undefined, status: CycleStatus["status"]) =>
  h.cycles.filter((c) => c.cycleid === cycleid && c.data.status === status);

describe("validate in advisory mode", () => {
  it("sends nothing until an operator approves, then a signed advisory-approved command", async () => {
    const h = await harness({});
    expect(h.svc.mode().mode).toBe("advisory");
    // given a proposal that passes every check
    const p = await h.cycle({});
    const v = await h.validationOf(p.id);
    expect(v.verdict).toBe("pass");
    expect(v.next).toBe("await-approval");
    // then nothing reaches the command stream while it waits
    await new Promise((r) => setTimeout(r, 600));
    expect(h.commands).toHaveLength(0);
    // when an operator approves it
    await h.events.publish("operator.approval", "rto.operator-approval.v1", {
      proposalId: p.id,
      decision: "approve",
      user: "op-7",
      at: Date.now(),
    });
    // then one command arrives, signed, approved by the operator, ramped at the site's rates
    expect(await waitFor(() => h.commands.length === 1, 5000)).toBe(true);
    const cmd = h.commands[0]?.data as SetpointCommand;
    expect(verifyCommandSignature(cmd, { [KEY.id]: KEY.secret }).ok).toBe(true);
    expect(cmd.mode).toBe("advisory-approved");
    expect(cmd.approvedBy?.user).toBe("op-7");
    expect(cmd.proposalId).toBe(p.id);
    expect(cmd.setpoints).toEqual([
      { tag: "FIC-102", value: 4.3, unit: "kg/s", rampPerS: 0.01 },
      { tag: "TIC-103", value: 77, unit: "degC", rampPerS: 0.05 },
    ]);
  });

  it("answers a rejection by aborting the cycle, and refuses closed loop while the site requires approval", async () => {
    const h = await harness({});
    const p = await h.cycle({});
    await h.validationOf(p.id);
    await h.events.publish("operator.approval", "rto.operator-approval.v1", {
      proposalId: p.id,
      decision: "reject",
      user: "op-7",
      at: Date.now(),
      reason: "pump work",
    });
    expect(await waitFor(() => cycleOf(h, p.cycleid, "aborted").length === 1, 5000)).toBe(true);
    expect(cycleOf(h, p.cycleid, "aborted")[0]?.data.reasons?.[0]?.code).toBe("VALIDATE_APPROVAL_REJECTED");
    await h.events.publish("operator.mode", "rto.operator-mode.v1", {
      mode: "closed-loop",
      user: "eng-1",
      reason: "try",
    });
    await new Promise((r) => setTimeout(r, 300));
    expect(h.svc.mode().mode).toBe("advisory");
    expect(h.commands).toHaveLength(0);
  });
});

describe("validate in closed loop", () => {
  it("sends a signed, ramped command that a control gateway accepts, and keeps the mode as retained state", async () => {
    const h = await harness({ policy: { requireApproval: false } });
    await h.events.publish("operator.mode", "rto.operator-mode.v1", {
      mode: "closed-loop",
      user: "eng-1",
      reason: "trial week",
    });
    expect(await waitFor(() => h.svc.mode().mode === "closed-loop", 5000)).toBe(true);
    const retained = await h.bus.readState(h.events.subject("state.mode"), { timeoutMs: 1000 });
    expect(JSON.parse(Buffer.from(retained ?? new Uint8Array()).toString()).data).toMatchObject({
      mode: "closed-loop",
      user: "eng-1",
    });

    const p = await h.cycle({});
    expect(await waitFor(() => h.commands.length === 1, 5000)).toBe(true);
    const cmd = h.commands[0]?.data as SetpointCommand;
    const gw = createControlGateway({
      site: h.site,
      unit: "R-1",
      keys: { [KEY.id]: KEY.secret },
      limits: {
        "FIC-102": { min: 3, max: 6, unit: "kg/s", maxRatePerS: 0.01 },
        "TIC-103": { min: 70, max: 100, unit: "degC", maxRatePerS: 0.05 },
      },
      watchdogS: 30,
      startShed: false,
    });
    const verdict = gw.accept(cmd, Date.now());
    expect(verdict.accepted).toBe(true);
    expect(cmd).toMatchObject({
      mode: "closed-loop",
      seq: 1,
      cycleId: p.cycleid,
      target: { site: h.site, unit: "R-1" },
    });
    expect(cmd.expiresAt - cmd.issuedAt).toBe(120_000);
    expect(cmd.setpoints.map((s) => s.rampPerS)).toEqual([0.01, 0.05]);
  });

  it("never sends a command for a proposal that breaks a check", async () => {
    const h = await harness({
      policy: { requireApproval: false },
      initialMode: "closed-loop",
      acceptedSolverStatuses: ["converged"],
    });
    const sp = proposal().setpoints;
    const at = (i: number, proposed: number) =>
      sp.map((s, j) => (j === i ? { ...s, proposed } : s)) as Proposal["setpoints"];
    const cases: Array<{
      name: string;
      p: Partial<Proposal>;
      opts?: Parameters<Harness["cycle"]>[1];
      check: string;
    }> = [
      { name: "absolute bounds", p: { setpoints: at(1, 101) }, check: "bounds" },
      { name: "move limit", p: { setpoints: at(0, 4.8) }, check: "move-limit" },
      // 0.49 kg/s at 0.01 kg/s per s needs 49 s; the cycle is 45 s
      { name: "ramp rate", p: { setpoints: at(0, 4.49) }, check: "ramp-rate" },
      {
        name: "minimum improvement",
        p: { objective: { sense: "max", unit: "USD/s", current: 100, proposed: 100.01, change: 0.01 } },
        check: "min-improvement",
      },
      { name: "data age", p: {}, opts: { snapshotAgeS: 2000 }, check: "data-age" },
      { name: "model fit", p: {}, opts: { model: "rejected" }, check: "model-fit" },
      {
        name: "solver status",
        p: { solver: { name: "sqp", status: "max-iterations", message: "stopped", solveTimeMs: 9 } },
        check: "solver-status",
      },
      {
        name: "KKT residual",
        p: { kkt: { stationarity: 3, complementarity: 0, feasibility: 0 } },
        check: "kkt-residual",
      },
    ];
    for (const c of cases) {
      const ev = await h.cycle(c.p, c.opts);
      const v = await h.validationOf(ev.id);
      expect(v.verdict, c.name).toBe("fail");
      expect(
        v.checks.filter((x) => x.outcome === "fail").map((x) => x.name),
        c.name,
      ).toContain(c.check);
      expect(await waitFor(() => cycleOf(h, ev.cycleid, "aborted").length === 1, 3000), c.name).toBe(true);
    }
    // an engineer's hold on FB, set through an operator mode event
    await h.events.publish("operator.mode", "rto.operator-mode.v1", {
      mode: "closed-loop",
      user: "eng-1",
      reason: "hold FB",
      overrides: [{ tag: "FIC-102", hold: true }],
    });
    await new Promise((r) => setTimeout(r, 200));
    const held = await h.cycle({});
    expect((await h.validationOf(held.id)).checks.find((x) => x.outcome === "fail")?.name).toBe("override");
    // moves inside the deadband are skipped, not failed, and send nothing either
    const tiny = await h.cycle({
      setpoints: [{ ...(sp[0] as Proposal["setpoints"][number]), proposed: 4.001 }],
    });
    expect((await h.validationOf(tiny.id)).verdict).toBe("skip");
    await new Promise((r) => setTimeout(r, 300));
    expect(h.commands).toHaveLength(0);

    // after one good move (overrides cleared), reversing it at once is a flip-flop
    await h.events.publish("operator.mode", "rto.operator-mode.v1", {
      mode: "closed-loop",
      user: "eng-1",
      reason: "release",
      overrides: [],
    });
    await new Promise((r) => setTimeout(r, 200));
    await h.cycle({ setpoints: [sp[1] as Proposal["setpoints"][number]] });
    expect(await waitFor(() => h.commands.length === 1, 5000)).toBe(true);
    const back = await h.cycle({
      setpoints: [{ ...(sp[1] as Proposal["setpoints"][number]), current: 77, proposed: 75 }],
    });
    expect((await h.validationOf(back.id)).checks.find((x) => x.outcome === "fail")?.name).toBe(
      "consistency",
    );
    await new Promise((r) => setTimeout(r, 300));
    expect(h.commands).toHaveLength(1);
  });

  it("raises a readback alarm when the control side refuses or never answers, and holds until re-armed", async () => {
    const h = await harness({
      policy: { requireApproval: false },
      initialMode: "closed-loop",
      dispatch: { readbackTimeoutS: 0.5 },
    });
    // refused: the control side answers with a refusal
    const p1 = await h.cycle({});
    expect(await waitFor(() => h.commands.length === 1, 5000)).toBe(true);
    const cmd = h.commands[0] as Event<"rto.command.v1">;
    await h.events.publish(
      "readback",
      "rto.readback.v1",
      {
        trigger: "command",
        target: { site: h.site, unit: "R-1" },
        commandSeq: cmd.data.seq,
        proposalId: cmd.data.proposalId,
        lastSeq: 0,
        accepted: false,
        code: "GATEWAY_SHED",
        reason: "no heartbeat",
        shed: true,
        mode: "local",
        setpoints: [],
        time: Date.now(),
      },
      { causedBy: cmd },
    );
    expect(await waitFor(() => cycleOf(h, p1.cycleid, "alarm").length === 1, 5000)).toBe(true);
    expect(cycleOf(h, p1.cycleid, "alarm")[0]?.data).toMatchObject({
      stage: "readback",
      reasons: [{ code: "VALIDATE_READBACK_REFUSED" }],
    });
    expect(h.svc.holding()).toBeDefined();
    // held: the next proposal fails dispatch-hold and sends nothing
    const p2 = await h.cycle({
      setpoints: [{ ...(proposal().setpoints[0] as Proposal["setpoints"][number]), proposed: 4.2 }],
    });
    expect((await h.validationOf(p2.id)).checks.find((x) => x.outcome === "fail")?.name).toBe(
      "dispatch-hold",
    );
    // re-armed by an operator: a command goes out, and with no answer a timeout alarm follows
    await h.events.publish("operator.mode", "rto.operator-mode.v1", {
      mode: "closed-loop",
      user: "eng-1",
      reason: "gateway checked",
    });
    expect(await waitFor(() => h.svc.holding() === undefined, 5000)).toBe(true);
    const p3 = await h.cycle({
      setpoints: [{ ...(proposal().setpoints[0] as Proposal["setpoints"][number]), proposed: 4.2 }],
    });
    expect(await waitFor(() => h.commands.length === 2, 5000)).toBe(true);
    expect(h.commands[1]?.data.seq).toBe(2);
    expect(await waitFor(() => cycleOf(h, p3.cycleid, "alarm").length === 1, 5000)).toBe(true);
    expect(cycleOf(h, p3.cycleid, "alarm")[0]?.data.reasons?.[0]?.code).toBe("VALIDATE_READBACK_TIMEOUT");
  });
});
