import { afterEach, describe, expect, it } from "vitest";
import type { Proposal } from "../kit/generated/messages.js";
import { explain } from "./explain.js";
import { recompute } from "./recompute.js";
import { type EnvelopeLike, EventStore } from "./store.js";

const T0 = Date.parse("2026-01-01T00:00:00.000Z");
const stores: EventStore[] = [];
const newStore = (o: Partial<ConstructorParameters<typeof EventStore>[0]> = {}) => {
  const s = new EventStore({ path: ":memory:", ...o });
  stores.push(s);
  return s;
};
afterEach(() => {
  for (const s of stores.splice(0)) s.close();
});

let n = 0;
function ev(type: string, data: unknown, atMs: number, extra: Partial<EnvelopeLike> = {}): EnvelopeLike {
  n++;
  return {
    id: `E${String(n).padStart(6, "0")}`,
    type,
    time: new Date(atMs).toISOString(),
    site: "s1",
    source: "/steadfast/s1/test/0",
    data,
    ...extra,
  };
}

const proposalData = (proposedF: number): Proposal => ({
  status: "optimal",
  formulation: "sequential",
  setpoints: [
    {
      decision: "F",
      tag: "FIC-100",
      unit: "kg/s",
      current: 2,
      proposed: proposedF,
      lower: 1.5,
      upper: 2.5,
      lowerFrom: "move-limit",
      upperFrom: "move-limit",
    },
  ],
  objective: { sense: "max", unit: "USD/h", current: 100, proposed: 104, change: 4 },
  constraints: [],
  active: [{ name: "F ≤ 2.5 (move-limit)", kind: "move-limit", shadowPrice: 3, unit: "USD/h per kg/s" }],
  kkt: { stationarity: 1e-9, complementarity: 0, feasibility: 0 },
  solver: { name: "sqp", status: "converged", message: "ok", solveTimeMs: 3 },
  mismatch: { method: "none", updated: false, note: "" },
  parameters: [{ symbol: "k", value: 0.7, unit: "1" }],
  prices: [{ symbol: "pF", value: 9, unit: "USD/kg" }],
});

/** A full cycle C1 with prices published before it. */
function recordCycle(store: EventStore, cycleid = "C1") {
  const c = { cycleid };
  store.add(
    ev(
      "rto.prices.v1",
      { effectiveFrom: T0 - 5000, prices: [{ symbol: "pF", value: 10, unit: "USD/kg" }], source: "test" },
      T0 - 5000,
    ),
    "rto.s1.prices",
  );
  store.add(
    ev(
      "rto.prices.v1",
      { effectiveFrom: T0 + 60_000, prices: [{ symbol: "pF", value: 99, unit: "USD/kg" }], source: "test" },
      T0 + 60_000,
    ),
    "rto.s1.prices",
  );
  store.add(
    ev(
      "rto.snapshot.v1",
      {
        startMs: T0 - 600_000,
        endMs: T0,
        spanS: 600,
        lastCommandMs: null,
        tags: [
          {
            tag: "FIC-100",
            variable: "F",
            key: true,
            count: 60,
            unit: "kg/s",
            mean: 2.05,
            std: 0.01,
            sigma: 0.02,
            modelUnit: "kg/s",
            modelMean: 2.05,
            modelStd: 0.01,
          },
        ],
        excluded: [],
      },
      T0 + 100,
      c,
    ),
    "rto.s1.snapshot",
  );
  store.add(
    ev(
      "rto.model.v1",
      {
        status: "accepted",
        accepted: true,
        parameters: [{ symbol: "k", unit: "1", fitted: true, value: 0.8, inForce: 0.8, previous: 0.7 }],
        reasons: [],
      },
      T0 + 200,
      c,
    ),
    "rto.s1.model",
  );
  store.add(ev("rto.proposal.v1", proposalData(2.4), T0 + 300, c), "rto.s1.proposal");
  store.add(
    ev(
      "rto.validation.v1",
      {
        proposalId: "P",
        verdict: "pass",
        mode: "closed-loop",
        next: "dispatch",
        checks: [
          { name: "bounds", outcome: "pass", reason: "ok" },
          { name: "deadband", outcome: "skip", code: "VALIDATE_DEADBAND", reason: "T within deadband" },
        ],
        setpoints: [],
      },
      T0 + 400,
      c,
    ),
    "rto.s1.validation",
  );
  store.add(
    ev(
      "rto.command.v1",
      {
        seq: 7,
        mode: "closed-loop",
        setpoints: [{ tag: "FIC-100", value: 2.4, unit: "kg/s", rampPerS: 0.01 }],
        expiresAt: T0 + 120_000,
      },
      T0 + 500,
      c,
    ),
    "rto.s1.command",
  );
  store.add(
    ev(
      "rto.readback.v1",
      { trigger: "command", commandSeq: 7, accepted: false, code: "GATEWAY_SHED", reason: "no heartbeat" },
      T0 + 600,
      c,
    ),
    "rto.s1.readback",
  );
  store.add(
    ev(
      "rto.cycle.v1",
      {
        status: "alarm",
        stage: "readback",
        reasons: [{ code: "VALIDATE_READBACK_REFUSED", message: "seq 7 refused" }],
      },
      T0 + 700,
      c,
    ),
    "rto.s1.cycle",
  );
}

describe("EventStore", () => {
  it("keeps one row per event id however often it is delivered", () => {
    const store = newStore();
    const e = ev("rto.cycle.v1", { status: "opened" }, T0, { cycleid: "C" });
    store.add(e, "rto.s1.cycle");
    store.add(e, "rto.s1.cycle");
    expect(store.flush()).toBe(1);
    store.add(e, "rto.s1.cycle");
    expect(store.flush()).toBe(0);
    expect(store.count()).toBe(1);
  });

  it("writes a batch as soon as it is full and holds the rest until flushed", () => {
    const store = newStore({ batchSize: 3 });
    const written = [0, 1, 2, 3].map((i) =>
      store.add(ev("rto.cycle.v1", { status: "opened" }, T0 + i), "rto.s1.cycle"),
    );
    expect(written).toEqual([0, 0, 3, 0]);
    expect(store.pending()).toBe(1);
    expect(store.count()).toBe(3);
  });

  it("finds events by cycle, by time and type, and a tag's values in measurements and snapshots", () => {
    const store = newStore();
    recordCycle(store);
    store.add(
      ev(
        "rto.measurements.v1",
        {
          source: "sim",
          values: [
            { tag: "FIC-100", value: 2.01, unit: "kg/s", time: T0 - 10 },
            { tag: "TI-1", value: 50, unit: "degC", time: T0 - 10 },
          ],
        },
        T0 - 5,
      ),
      "rto.s1.measurements",
    );
    store.flush();
    expect(store.byCycle("C1").map((e) => e.type)).toEqual([
      "rto.snapshot.v1",
      "rto.model.v1",
      "rto.proposal.v1",
      "rto.validation.v1",
      "rto.command.v1",
      "rto.readback.v1",
      "rto.cycle.v1",
    ]);
    expect(store.byTime(T0 - 10_000, T0 + 50, { type: "rto.prices.v1" })).toHaveLength(1);
    const tag = store.byTag("FIC-100", T0 - 60_000, T0 + 60_000);
    expect(tag.measurements.map((p) => [p.value, p.unit, p.timeMs])).toEqual([[2.01, "kg/s", T0 - 10]]);
    expect(tag.snapshots.map((p) => [p.value, p.std, p.timeMs])).toEqual([[2.05, 0.01, T0]]);
  });

  it("prunes events past the retention age and the oldest beyond the row limit", () => {
    const store = newStore({ retentionDays: 1, maxRows: 2 });
    for (const ageDays of [3, 0.5, 0.4, 0.3])
      store.add(ev("rto.cycle.v1", { status: "opened" }, T0 - ageDays * 86_400_000), "rto.s1.cycle");
    const r = store.prune(T0);
    expect(r).toEqual({ byAge: 1, byCount: 1 });
    expect(store.byTime(0, T0).map((e) => e.timeMs)).toEqual([T0 - 0.4 * 86_400_000, T0 - 0.3 * 86_400_000]);
  });
});

describe("explain", () => {
  it("lays out the chain of a cycle with the prices in force at the proposal and every reason", () => {
    const store = newStore();
    recordCycle(store);
    const x = explain(store, "C1");
    expect(x.found).toBe(true);
    expect(x.steps.filter((s) => s.stage !== "cycle").map((s) => s.stage)).toEqual([
      "snapshot",
      "model",
      "prices",
      "proposal",
      "validation",
      "command",
      "readback",
    ]);
    // the prices in force are those published before the proposal, not the later change
    expect(x.steps.find((s) => s.stage === "prices")?.summary).toContain("pF 10 USD/kg");
    expect(x.missing).toEqual(["reconciled"]);
    expect(x.outcome).toBe("command refused by the control side (GATEWAY_SHED)");
    expect(x.reasons.map((r) => r.code)).toEqual([
      "VALIDATE_DEADBAND",
      "GATEWAY_SHED",
      "VALIDATE_READBACK_REFUSED",
    ]);
    expect(x.text).toContain("proposal @");
    expect(x.text).toContain("F 2 → 2.4 kg/s");
    expect(x.text).toContain("seq 7 closed-loop: FIC-100 → 2.4 kg/s at 0.01/s");
  });

  it("says so when a cycle is unknown", () => {
    const x = explain(newStore(), "nope");
    expect(x.found).toBe(false);
    expect(x.outcome).toBe("no events recorded");
  });
});

describe("recompute", () => {
  it("hands the injected optimizer the recorded inputs and compares its proposal setpoint by setpoint", async () => {
    const store = newStore();
    recordCycle(store);
    // given an optimizer whose answer depends on every input it is handed
    const seen: unknown[] = [];
    const r = await recompute(store, "C1", {
      optimize: (inp) => {
        seen.push({ p: inp.parameters, pr: inp.prices, cur: inp.current, src: inp.sources });
        return proposalData(
          2.4 + (inp.parameters.k === 0.8 && inp.prices.pF === 10 && inp.current.F === 2 ? 0 : 1),
        );
      },
    });
    // then it saw the model's parameters, the prices in force and the setpoints the proposal was
    // centred on (the setpoints in force), not the snapshot's noisier PV mean
    expect(seen).toEqual([
      {
        p: { k: 0.8 },
        pr: { pF: 10 },
        cur: { F: 2 },
        src: { parameters: "model", prices: "prices", current: "proposal" },
      },
    ]);
    expect(r.agrees).toBe(true);
    expect(r.maxAbsDiff).toBe(0);
  });

  it("takes the price set the proposal used when a newer one was recorded just before it, and says so", async () => {
    // given two price sets, the second recorded 2 ms before a proposal that still used the first
    const store = newStore();
    const priceSet = (value: number, atMs: number) =>
      store.add(
        ev(
          "rto.prices.v1",
          { effectiveFrom: atMs, prices: [{ symbol: "pF", value, unit: "USD/kg" }], source: "test" },
          atMs,
        ),
        "rto.s1.prices",
      );
    priceSet(10, T0 - 5000);
    priceSet(12, T0 - 2);
    const propose = (cycleid: string, pF: number) =>
      store.add(
        ev(
          "rto.proposal.v1",
          { ...proposalData(2.4), prices: [{ symbol: "pF", value: pF, unit: "USD/kg" }] },
          T0,
          {
            cycleid,
          },
        ),
        "rto.s1.proposal",
      );
    propose("C3", 10);
    propose("C4", 12);
    const seen: Record<string, number>[] = [];
    const optimize = (inp: { prices: Record<string, number> }) => {
      seen.push(inp.prices);
      return proposalData(2.4);
    };
    // when both cycles are re-run and explained
    const r3 = await recompute(store, "C3", { optimize });
    const r4 = await recompute(store, "C4", { optimize });
    // then each re-run was handed the set its proposal used, and only the first needed a note
    expect(seen).toEqual([{ pF: 10 }, { pF: 12 }]);
    expect(r3.notes.join(" ")).toMatch(
      /prices changed at .* just before the proposal; it used the set of event/,
    );
    expect(r4.notes.join(" ")).not.toMatch(/prices changed/);
    expect(explain(store, "C3").steps.find((x) => x.stage === "prices")?.summary).toContain("pF 10 USD/kg");
    expect(explain(store, "C4").steps.find((x) => x.stage === "prices")?.summary).toContain("pF 12 USD/kg");
  });

  it("reports a disagreement beyond the tolerance, and refuses a cycle with no proposal", async () => {
    const store = newStore();
    recordCycle(store);
    const r = await recompute(store, "C1", { optimize: () => proposalData(2.41) }, { tolerance: 1e-6 });
    expect(r.agrees).toBe(false);
    expect(r.maxAbsDiff).toBeCloseTo(0.01, 12);
    await expect(recompute(store, "none", { optimize: () => proposalData(1) })).rejects.toMatchObject({
      code: "RECORDER_CYCLE_UNKNOWN",
    });
  });
});
