import { describe, expect, it } from "vitest";
import type { Proposal } from "../kit/generated/messages.js";
import {
  type CheckInput,
  type CheckOptions,
  type DecisionLimits,
  type MoveRecord,
  runChecks,
} from "./checks.js";

const NOW = 1_767_225_600_000;

const decisions: DecisionLimits[] = [
  {
    symbol: "F",
    unit: "kg/s",
    setpointTag: "FIC-100",
    min: 1,
    max: 5,
    maxMovePerCycle: 0.5,
    rampPerS: 0.01,
    deadband: 0.02,
  },
  {
    symbol: "T",
    unit: "degC",
    setpointTag: "TIC-101",
    min: 60,
    max: 90,
    maxMovePerCycle: 4,
    rampPerS: 0.05,
    deadband: 0.2,
  },
];

const options: CheckOptions = {
  policy: { minImprovement: 0.5, maxDataAgeS: 1800, maxFitChiSquareRatio: 3 },
  cyclePeriodS: 900,
  kkt: { maxStationarity: 1e-3, maxComplementarity: 1e-3, maxFeasibility: 1e-6 },
  allowSoftViolated: false,
  acceptedSolverStatuses: ["converged", "optimal"],
  requireModelAccepted: true,
  consistency: { windowCycles: 3, minReversalFraction: 0.02 },
  tolerance: 1e-9,
};

function proposal(over: Partial<Proposal> = {}): Proposal {
  return {
    status: "optimal",
    formulation: "sequential",
    setpoints: [
      {
        decision: "F",
        tag: "FIC-100",
        unit: "kg/s",
        current: 2,
        proposed: 2.3,
        lower: 1.5,
        upper: 2.5,
        lowerFrom: "move-limit",
        upperFrom: "move-limit",
      },
      {
        decision: "T",
        tag: "TIC-101",
        unit: "degC",
        current: 75,
        proposed: 77,
        lower: 71,
        upper: 79,
        lowerFrom: "move-limit",
        upperFrom: "move-limit",
      },
    ],
    objective: { sense: "max", unit: "USD/h", current: 100, proposed: 103, change: 3 },
    constraints: [],
    active: [],
    kkt: { stationarity: 1e-6, complementarity: 1e-8, feasibility: 0 },
    solver: { name: "sqp", status: "converged", message: "ok", solveTimeMs: 12 },
    mismatch: { method: "none", updated: false, note: "" },
    parameters: [],
    prices: [],
    ...over,
  };
}

function input(over: Partial<CheckInput> = {}): CheckInput {
  return {
    proposal: proposal(),
    nowMs: NOW,
    snapshotEndMs: NOW - 60_000,
    model: { status: "accepted", accepted: true, fit: { weightedRss: 8, dof: 6 } },
    inForce: new Map([
      ["FIC-100", 2],
      ["TIC-101", 75],
    ]),
    history: [],
    overrides: new Map(),
    ...over,
  };
}

function failed(r: ReturnType<typeof runChecks>) {
  return r.checks.filter((c) => c.outcome === "fail").map((c) => [c.name, c.code, c.decision]);
}

describe("runChecks", () => {
  it("passes a proposal that keeps every limit, and names every check", () => {
    // given a proposal inside every limit / when checked
    const r = runChecks(input(), decisions, options);
    // then the verdict is pass and each check appears by name
    expect(r.verdict).toBe("pass");
    expect(failed(r)).toEqual([]);
    const names = new Set(r.checks.map((c) => c.name));
    for (const n of [
      "solver-status",
      "kkt-residual",
      "bounds",
      "move-limit",
      "ramp-rate",
      "deadband",
      "min-improvement",
      "data-age",
      "model-fit",
      "consistency",
    ]) {
      expect(names.has(n as never), n).toBe(true);
    }
    expect(r.setpoints.map((s) => [s.decision, s.from, s.target, s.action, s.rampPerS])).toEqual([
      ["F", 2, 2.3, "move", 0.01],
      ["T", 75, 77, "move", 0.05],
    ]);
  });

  it("fails a setpoint outside the decision's absolute bounds", () => {
    const p = proposal();
    (p.setpoints[1] as Proposal["setpoints"][number]).proposed = 92;
    const r = runChecks(
      input({
        proposal: p,
        inForce: new Map([
          ["TIC-101", 89],
          ["FIC-100", 2],
        ]),
      }),
      decisions,
      options,
    );
    expect(r.verdict).toBe("fail");
    expect(failed(r)).toContainEqual(["bounds", "VALIDATE_BOUNDS", "T"]);
  });

  it("fails a move larger than the per-cycle move limit", () => {
    const p = proposal();
    (p.setpoints[0] as Proposal["setpoints"][number]).proposed = 2.8;
    const r = runChecks(input({ proposal: p }), decisions, { ...options, cyclePeriodS: 1e6 });
    expect(failed(r)).toEqual([["move-limit", "VALIDATE_MOVE_LIMIT", "F"]]);
  });

  it("measures the move from the read-back setpoint, not the proposal's current value", () => {
    // given the control side reads back TIC-101 at 72 while the proposal assumed 75
    const r = runChecks(
      input({
        inForce: new Map([
          ["FIC-100", 2],
          ["TIC-101.SP", 72],
        ]),
      }),
      decisions,
      options,
    );
    // then the 5 degC move from 72 to 77 breaks the 4 degC move limit
    expect(failed(r)).toContainEqual(["move-limit", "VALIDATE_MOVE_LIMIT", "T"]);
    expect(r.setpoints[1]?.from).toBe(72);
  });

  it("fails a move that the ramp rate cannot finish within the cycle period", () => {
    // 0.3 kg/s at 0.01 kg/s/s needs 30 s: more than a 20 s cycle
    const r = runChecks(input(), decisions, { ...options, cyclePeriodS: 20 });
    expect(failed(r)).toContainEqual(["ramp-rate", "VALIDATE_RAMP_TOO_SLOW", "F"]);
  });

  it("skips a move within the deadband instead of failing, and skips the whole proposal when every move is that small", () => {
    const p = proposal();
    (p.setpoints[0] as Proposal["setpoints"][number]).proposed = 2.01;
    const one = runChecks(input({ proposal: p }), decisions, options);
    expect(one.verdict).toBe("pass");
    expect(one.checks.find((c) => c.name === "deadband" && c.decision === "F")?.outcome).toBe("skip");
    expect(one.setpoints[0]?.action).toBe("skip");

    (p.setpoints[1] as Proposal["setpoints"][number]).proposed = 75.1;
    const all = runChecks(input({ proposal: p }), decisions, options);
    expect(all.verdict).toBe("skip");
    expect(all.reasons.map((x) => x.code)).toEqual(["VALIDATE_DEADBAND", "VALIDATE_DEADBAND"]);
  });

  it("fails a predicted improvement below the minimum, in the objective's own sense", () => {
    const small = runChecks(
      input({
        proposal: proposal({
          objective: { sense: "max", unit: "USD/h", current: 100, proposed: 100.2, change: 0.2 },
        }),
      }),
      decisions,
      options,
    );
    expect(failed(small)).toEqual([["min-improvement", "VALIDATE_IMPROVEMENT_SMALL", undefined]]);
    // a cost that falls by 3 is an improvement of 3 when minimizing
    const cost = runChecks(
      input({
        proposal: proposal({
          objective: { sense: "min", unit: "USD/h", current: 100, proposed: 97, change: -3 },
        }),
      }),
      decisions,
      options,
    );
    expect(cost.verdict).toBe("pass");
  });

  it("fails a proposal whose snapshot is older than the maximum data age, or unknown", () => {
    const old = runChecks(input({ snapshotEndMs: NOW - 1801_000 }), decisions, options);
    expect(failed(old)).toEqual([["data-age", "VALIDATE_DATA_STALE", undefined]]);
    expect(old.checks.find((c) => c.name === "data-age")?.value).toBeCloseTo(1801, 9);
    const unknown = runChecks(input({ snapshotEndMs: undefined }), decisions, options);
    expect(failed(unknown)).toEqual([["data-age", "VALIDATE_DATA_UNKNOWN", undefined]]);
  });

  it("fails when the cycle's model update was rejected, missing, or fits poorly", () => {
    const rejected = runChecks(
      input({ model: { status: "rejected", accepted: false, fit: null } }),
      decisions,
      options,
    );
    expect(failed(rejected)).toEqual([["model-fit", "VALIDATE_MODEL_REJECTED", undefined]]);
    const missing = runChecks(input({ model: undefined }), decisions, options);
    expect(failed(missing)).toEqual([["model-fit", "VALIDATE_MODEL_UNKNOWN", undefined]]);
    const poor = runChecks(
      input({ model: { status: "accepted", accepted: true, fit: { weightedRss: 40, dof: 10 } } }),
      decisions,
      options,
    );
    expect(failed(poor)).toEqual([["model-fit", "VALIDATE_MODEL_FIT_POOR", undefined]]);
  });

  it("fails a move that reverses a recent move of the same decision beyond the threshold (flip-flop)", () => {
    // T moved −2 degC two cycles ago; +2 degC now reverses it (threshold 0.02 × 30 = 0.6 degC)
    const history: MoveRecord[] = [
      { cycleId: "c1", moves: { T: -2 } },
      { cycleId: "c2", moves: { F: 0.1 } },
    ];
    const r = runChecks(input({ history }), decisions, options);
    expect(failed(r)).toEqual([["consistency", "VALIDATE_FLIP_FLOP", "T"]]);
    // outside the window of 3 cycles it is no longer a flip-flop
    const long: MoveRecord[] = [...history, { cycleId: "c3", moves: {} }, { cycleId: "c4", moves: {} }];
    expect(failed(runChecks(input({ history: long }), decisions, options))).toEqual([]);
  });

  it("fails a solver status not accepted, and a soft violation when soft violations are not allowed", () => {
    const status = runChecks(
      input({
        proposal: proposal({
          solver: { name: "sqp", status: "max-iterations", message: "stopped", solveTimeMs: 9 },
        }),
      }),
      decisions,
      options,
    );
    expect(failed(status)).toEqual([["solver-status", "VALIDATE_SOLVER_STATUS", undefined]]);
    const soft = runChecks(input({ proposal: proposal({ status: "soft-violated" }) }), decisions, options);
    expect(failed(soft)).toEqual([["solver-status", "VALIDATE_SOFT_VIOLATED", undefined]]);
    expect(
      runChecks(input({ proposal: proposal({ status: "soft-violated" }) }), decisions, {
        ...options,
        allowSoftViolated: true,
      }).verdict,
    ).toBe("pass");
  });

  it("fails a proposal whose KKT residual exceeds its limit", () => {
    const r = runChecks(
      input({ proposal: proposal({ kkt: { stationarity: 0.5, complementarity: 0, feasibility: 0 } }) }),
      decisions,
      options,
    );
    expect(failed(r)).toEqual([["kkt-residual", "VALIDATE_KKT_RESIDUAL", undefined]]);
  });

  it("fails a move of a setpoint an engineer holds, and one outside the engineer's tighter bounds", () => {
    const held = runChecks(
      input({ overrides: new Map([["FIC-100", { tag: "FIC-100", hold: true, note: "pump work" }]]) }),
      decisions,
      options,
    );
    expect(failed(held)).toEqual([["override", "VALIDATE_OVERRIDE_HOLD", "F"]]);
    const tight = runChecks(
      input({ overrides: new Map([["TIC-101", { tag: "TIC-101", max: 76 }]]) }),
      decisions,
      options,
    );
    expect(failed(tight)).toEqual([["override", "VALIDATE_OVERRIDE_BOUNDS", "T"]]);
  });

  it("fails a proposal while dispatch is held after a readback alarm", () => {
    const r = runChecks(input({ dispatchHold: "held after alarm" }), decisions, options);
    expect(failed(r)).toEqual([["dispatch-hold", "VALIDATE_DISPATCH_HOLD", undefined]]);
  });

  it("fails a setpoint for a decision the site model does not have", () => {
    const p = proposal();
    p.setpoints.push({
      decision: "P",
      tag: "PIC-9",
      unit: "bar",
      current: 1,
      proposed: 2,
      lower: 0,
      upper: 3,
      lowerFrom: "bound",
      upperFrom: "bound",
    });
    expect(failed(runChecks(input({ proposal: p }), decisions, options))).toEqual([
      ["bounds", "VALIDATE_DECISION_UNKNOWN", "P"],
    ]);
  });

  describe("under modifier adaptation", () => {
    const modifiers = (iteration: number): Proposal["mismatch"]["modifiers"] => ({
      point: [],
      objectiveEpsilon: 0,
      objectiveLambda: [],
      constraints: [],
      iteration,
    });
    const excitation: NonNullable<Proposal["mismatch"]["excitation"]> = {
      reason: "the operating points coincide",
      step: 0.5,
      direction: [
        { decision: "F", value: 0 },
        { decision: "T", value: 1 },
      ],
      modelOptimal: [
        { decision: "F", value: 2 },
        { decision: "T", value: 75 },
      ],
    };

    it("exempts an excitation step from the minimum improvement, and from nothing else", () => {
      // given an excitation step that costs 0.4 USD/h by the corrected model
      const step = proposal({
        objective: { sense: "max", unit: "USD/h", current: 100, proposed: 99.6, change: -0.4 },
        mismatch: { method: "modifier", updated: false, note: "", modifiers: modifiers(2), excitation },
      });
      // when checked
      const r = runChecks(input({ proposal: step }), decisions, options);
      // then it passes, and the check says why
      expect(r.verdict).toBe("pass");
      const minImprovement = r.checks.find((c) => c.name === "min-improvement");
      expect(minImprovement?.outcome).toBe("pass");
      expect(minImprovement?.reason).toContain("excitation step");
      // and a step beyond the move limit, or a stale snapshot, still fails
      const far = proposal({
        ...step,
        setpoints: step.setpoints.map((s) =>
          s.decision === "T" ? { ...s, proposed: 79.5 } : s,
        ) as Proposal["setpoints"],
      });
      const stale = runChecks(input({ proposal: far, snapshotEndMs: NOW - 3_600_000 }), decisions, options);
      expect(failed(stale)).toEqual([
        ["data-age", "VALIDATE_DATA_STALE", undefined],
        ["move-limit", "VALIDATE_MOVE_LIMIT", "T"],
      ]);
    });

    it("does not exempt a proposal of another mismatch method that carries an excitation", () => {
      const odd = proposal({
        objective: { sense: "max", unit: "USD/h", current: 100, proposed: 100.1, change: 0.1 },
        mismatch: { method: "bias", updated: true, note: "", excitation },
      });
      expect(failed(runChecks(input({ proposal: odd }), decisions, options))).toEqual([
        ["min-improvement", "VALIDATE_IMPROVEMENT_SMALL", undefined],
      ]);
    });

    it("lets a reversal pass when the modifiers learnt from the plant since the reversed move", () => {
      // given T moved −2 degC under modifier update 3
      const history: MoveRecord[] = [{ cycleId: "c1", moves: { T: -2 }, modifierIteration: 3 }];
      const at = (iteration: number) =>
        proposal({
          mismatch: { method: "modifier", updated: true, note: "", modifiers: modifiers(iteration) },
        });
      // when a +2 degC proposal rests on update 4 it answers new plant information: no flip-flop
      expect(failed(runChecks(input({ proposal: at(4), history }), decisions, options))).toEqual([]);
      // but on the same update 3 it is the flip-flop the guard is for
      expect(failed(runChecks(input({ proposal: at(3), history }), decisions, options))).toEqual([
        ["consistency", "VALIDATE_FLIP_FLOP", "T"],
      ]);
    });

    it("lets the way back from an excitation step pass the flip-flop guard", () => {
      const history: MoveRecord[] = [
        { cycleId: "c1", moves: { T: -2 }, modifierIteration: 3, excitation: true },
      ];
      const back = proposal({
        mismatch: { method: "modifier", updated: false, note: "", modifiers: modifiers(3) },
      });
      expect(failed(runChecks(input({ proposal: back, history }), decisions, options))).toEqual([]);
    });
  });
});
