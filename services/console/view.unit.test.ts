import { describe, expect, it } from "vitest";
import { ManualClock } from "../kit/clock.js";
import { type AnyEvent, createEvent, type EventOptions } from "../kit/envelope.js";
import type { EventDataMap, EventType } from "../kit/generated/messages.js";
import { schemaRegistry } from "../kit/schemas.js";
import {
  awaitingApproval,
  commandData,
  cycleData,
  modelData,
  proposalData,
  readbackData,
} from "./test-events.js";
import { type ConsoleState, createView, rateUnitSeconds } from "./view.js";

const SITE = "view-test";
const registry = schemaRegistry();
const clock = new ManualClock(Date.parse("2026-03-02T08:00:00Z"));
const T0 = clock.now();

/** Builds a schema-checked event as service `service` would publish it. */
function ev<T extends EventType>(
  service: string,
  type: T,
  data: EventDataMap[T],
  options: EventOptions = {},
): AnyEvent {
  return createEvent(
    { site: SITE, service, instance: "0", clock, registry },
    type,
    data,
    options,
  ) as AnyEvent;
}

const measurement = (tag: string, value: number | null, timeMs: number, status: "good" | "spike" = "good") =>
  ev("ingest", "rto.measurements.v1", {
    source: "sim",
    values: [{ tag, value, quality: "good", time: timeMs, status, unit: "degC" }],
  });

describe("the console view", () => {
  it("shows each service's last heartbeat and calls it silent after three missed intervals", () => {
    const view = createView(SITE);
    const changed = view.apply(
      ev("steady", "rto.heartbeat.v1", {
        service: "steady",
        instance: "0",
        status: "running",
        intervalS: 5,
        uptimeS: 60,
      }),
      T0,
    );
    expect([...changed]).toEqual(["services"]);
    expect(view.state(T0 + 14_000).services[0]).toMatchObject({
      service: "steady",
      status: "running",
      silent: false,
    });
    expect(view.state(T0 + 16_000).services[0]?.silent).toBe(true);
  });

  it("trends good values as one mean per step of sample time and leaves rejected values out", () => {
    const view = createView(SITE, { trendStepMs: 5000 });
    // given values 1..10 one second apart, and a spike the ingest checks rejected
    for (let i = 0; i < 10; i++) view.apply(measurement("TI-101", i + 1, T0 + i * 1000), T0);
    view.apply(measurement("TI-101", 500, T0 + 9500, "spike"), T0);
    // then two buckets: mean(1..5) = 3 and mean(6..10) = 8
    const trend = view.state(T0).trends.find((t) => t.tag === "TI-101");
    expect(trend?.points).toEqual([
      [T0, 3],
      [T0 + 5000, 8],
    ]);
  });

  it("keeps only the newest points of a trend and reports what changed since the last push", () => {
    const view = createView(SITE, { trendStepMs: 1000, trendPoints: 3 });
    for (let i = 0; i < 5; i++) view.apply(measurement("FI-101", i, T0 + i * 1000), T0);
    expect(view.state(T0).trends[0]?.points.map((p) => p[1])).toEqual([2, 3, 4]);
    expect(view.takeTrendPatch()[0]?.points.length).toBe(3);
    view.apply(measurement("FI-101", 5, T0 + 5000), T0);
    const patch = view.takeTrendPatch();
    expect(patch).toHaveLength(1);
    expect(patch[0]).toMatchObject({ tag: "FI-101", fromMs: T0 + 5000, points: [[T0 + 5000, 5]] });
    expect(view.takeTrendPatch()).toEqual([]);
  });

  it("puts key tags from the snapshot ahead of others when the trend list is full", () => {
    const view = createView(SITE, { maxTrendTags: 2 });
    view.apply(measurement("AI-101", 0.1, T0), T0);
    view.apply(measurement("AI-102", 0.2, T0), T0);
    const snap = ev("steady", "rto.snapshot.v1", {
      startMs: T0,
      endMs: T0 + 60_000,
      spanS: 60,
      lastCommandMs: null,
      excluded: [],
      tags: [
        {
          tag: "TI-101",
          variable: "T_R",
          key: true,
          count: 12,
          unit: "degC",
          mean: 70,
          std: 0.1,
          sigma: 0.1,
          modelUnit: "degC",
          modelMean: 70,
          modelStd: 0.1,
        },
      ],
    });
    view.apply(snap, T0);
    expect(view.state(T0).trends.map((t) => [t.tag, t.key])).toEqual([
      ["TI-101", true],
      ["AI-102", false],
    ]);
  });

  it("lists a validated proposal as waiting, with the optimizer's bounds and gain, until an operator answers", () => {
    const view = createView(SITE);
    const proposal = ev("optimize", "rto.proposal.v1", proposalData(1.8), { cycleid: "c1" });
    view.apply(proposal, T0);
    view.apply(
      ev("validate", "rto.validation.v1", awaitingApproval(proposal.id, T0 + 600_000), { cycleid: "c1" }),
      T0,
    );
    const pending = view.state(T0).pending;
    expect(pending).toHaveLength(1);
    expect(pending[0]).toMatchObject({ proposalId: proposal.id, cycleId: "c1", expiresAtMs: T0 + 600_000 });
    expect(pending[0]?.objective?.change).toBe(0.05);
    expect(pending[0]?.setpoints[0]).toMatchObject({
      tag: "FI-102",
      from: 1.2,
      target: 1.35,
      lower: 1.0,
      upper: 1.4,
    });
    expect(view.isPending(proposal.id, T0)).toBe(true);

    // when an operator approves it, it leaves the list and the decision is on record
    view.apply(
      ev("console", "rto.operator-approval.v1", {
        proposalId: proposal.id,
        decision: "approve",
        user: "otto",
        at: T0 + 1000,
      }),
      T0,
    );
    const s = view.state(T0);
    expect(s.pending).toEqual([]);
    expect(s.decisions[0]).toMatchObject({
      kind: "approval",
      user: "otto",
      decision: "approve",
      proposalId: proposal.id,
    });
  });

  it("drops a waiting proposal once its approval expiry has passed", () => {
    const view = createView(SITE);
    view.apply(ev("validate", "rto.validation.v1", awaitingApproval("p-late", T0 + 1000)), T0);
    expect(view.isPending("p-late", T0 + 999)).toBe(true);
    expect(view.isPending("p-late", T0 + 1000)).toBe(false);
  });

  it("builds the cycle timeline with each stage's outcome and the reasons of an abort", () => {
    const view = createView(SITE);
    view.apply(
      ev("validate", "rto.validation.v1", awaitingApproval("p1", T0 + 600_000), { cycleid: "c7" }),
      T0,
    );
    view.apply(ev("steady", "rto.cycle.v1", cycleData("opened", "steady", "steady"), { cycleid: "c7" }), T0);
    view.apply(
      ev("reconcile", "rto.cycle.v1", cycleData("stage-done", "reconcile", "reconciled"), { cycleid: "c7" }),
      T0,
    );
    const reasons = [{ code: "VALIDATE_APPROVAL_REJECTED", message: "otto: feed B pump under maintenance" }];
    view.apply(
      ev("validate", "rto.cycle.v1", cycleData("aborted", "validate", "rejected", reasons), {
        cycleid: "c7",
      }),
      T0,
    );
    const s: ConsoleState = view.state(T0);
    expect(s.cycles[0]?.cycleId).toBe("c7");
    expect(s.cycles[0]?.state).toBe("aborted");
    expect(s.cycles[0]?.stages.map((x) => `${x.stage}:${x.outcome}`)).toEqual([
      "steady:steady",
      "reconcile:reconciled",
      "validate:rejected",
    ]);
    expect(s.cycles[0]?.stages[2]?.reasons).toEqual(reasons);
    expect(s.overview.lastCycle?.outcome).toBe("rejected");
    // the aborted cycle's proposal no longer waits
    expect(s.pending).toEqual([]);
  });

  it("keeps the accepted estimates of each parameter with their confidence interval", () => {
    const view = createView(SITE);
    view.apply(ev("estimate", "rto.model.v1", modelData(41, 0.8, true, T0)), T0);
    view.apply(ev("estimate", "rto.model.v1", modelData(30, 12, false, T0 + 3_600_000)), T0);
    view.apply(ev("estimate", "rto.model.v1", modelData(40.2, 0.7, true, T0 + 7_200_000)), T0);
    const ua = view.state(T0).parameters.find((p) => p.symbol === "UA");
    expect(ua?.points.map((p) => [p.value, p.ciLower, p.ciUpper])).toEqual([
      [41, 40.2, 41.8],
      [40.2, 40.2 - 0.7, 40.2 + 0.7],
    ]);
    expect(ua?.inForce).toBe(40.2);
    expect(ua?.lastStatus).toBe("accepted");
  });

  it("measures profit against the first cycle seen and sums the gain over plant time", () => {
    const view = createView(SITE);
    // given three cycles whose snapshots end 10 s of plant time apart, at 10, 12 and 12 USD/s
    const profits = [10, 12, 12];
    profits.forEach((p, i) => {
      const cycleid = `c${i}`;
      const endMs = T0 + i * 10_000;
      view.apply(
        ev(
          "steady",
          "rto.snapshot.v1",
          { startMs: endMs - 1000, endMs, spanS: 1, lastCommandMs: null, tags: [], excluded: [] },
          { cycleid },
        ),
        T0,
      );
      view.apply(ev("optimize", "rto.proposal.v1", proposalData(p), { cycleid }), T0);
    });
    // then the gain is the trapezoid (0 + 2)/2·10 + (2 + 2)/2·10 = 30 USD
    const s = view.state(T0);
    expect(s.profit.map((p) => p.tMs - T0)).toEqual([0, 10_000, 20_000]);
    expect(s.overview.profit).toMatchObject({
      now: 12,
      baseline: 10,
      change: 2,
      earnedUnit: "USD",
      unit: "USD/s",
    });
    expect(s.overview.profit?.earned).toBeCloseTo(30, 12);
    expect(s.constraints?.active.map((a) => a.name)).toEqual(["cooling-capacity", "T_R ≤ 72 (move-limit)"]);
  });

  it("shows the mode validate reports and records a person's mode request as a decision", () => {
    const view = createView(SITE);
    view.apply(
      ev("validate", "rto.operator-mode.v1", {
        mode: "advisory",
        user: "validate",
        reason: "default at start",
        accepted: true,
      }),
      T0,
    );
    view.apply(
      ev("console", "rto.operator-mode.v1", {
        mode: "off",
        user: "erin",
        reason: "analyser recalibration",
        at: T0,
      }),
      T0,
    );
    const s = view.state(T0);
    expect(s.overview.mode).toMatchObject({ mode: "advisory", user: "validate" });
    expect(s.decisions[0]).toMatchObject({
      kind: "mode",
      user: "erin",
      decision: "off",
      reason: "analyser recalibration",
    });
  });

  it("shows commands and readbacks and draws the setpoint read back on its tag's trend", () => {
    const view = createView(SITE);
    view.apply(ev("validate", "rto.validation.v1", awaitingApproval("p9", T0 + 600_000)), T0);
    view.apply(ev("validate", "rto.command.v1", commandData(SITE, 4, "p9", "c9", "otto", T0)), T0);
    view.apply(ev("plant-sim", "rto.readback.v1", readbackData(SITE, 4, "p9", T0 + 500)), T0);
    const s = view.state(T0);
    expect(s.pending).toEqual([]);
    expect(s.control.commands[0]).toMatchObject({
      seq: 4,
      mode: "advisory-approved",
      approvedBy: { user: "otto", at: T0 },
    });
    expect(s.control.readbacks[0]).toMatchObject({ commandSeq: 4, accepted: true, mode: "remote" });
    expect(s.trends.find((t) => t.tag === "TI-101")?.setpoint).toEqual([[T0 + 500, 70.05]]);
  });

  it("reads the time base of an objective's unit", () => {
    expect(rateUnitSeconds("USD/s")).toEqual({ seconds: 1, perUnit: "USD" });
    expect(rateUnitSeconds("EUR / h")).toEqual({ seconds: 3600, perUnit: "EUR" });
    expect(rateUnitSeconds("USD")).toBeNull();
  });
});
