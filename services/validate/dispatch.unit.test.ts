import { describe, expect, it } from "vitest";
import { signCommand, verifyCommandSignature } from "../kit/command-signing.js";
import { createControlGateway } from "../kit/control-gateway.js";
import type { Readback, ValidatedSetpoint } from "../kit/generated/messages.js";
import {
  buildCommand,
  createReadbackWatch,
  inForceFromReadback,
  nextSeq,
  planDispatch,
  rampValues,
} from "./dispatch.js";

const T0 = 1_767_225_600_000;
const KEY = { id: "test-1", secret: "test-only-key-0123456789abcdef-0123" };
const moves: ValidatedSetpoint[] = [
  { decision: "T", tag: "TIC-101", unit: "degC", from: 75, target: 77, action: "move", rampPerS: 0.05 },
  { decision: "F", tag: "FIC-100", unit: "kg/s", from: 2, target: 2.01, action: "skip", rampPerS: 0.01 },
  { decision: "P", tag: "PIC-102", unit: "bar", from: 3, target: 2.5, action: "move" },
];

describe("dispatch planning", () => {
  it("ramps from the read-back value to the target in steps no larger than rate × period, ending on the target", () => {
    const v = rampValues(75, 77, 0.05, 10);
    // 2 degC at 0.5 degC per 10 s step: four steps
    expect(v.map((x) => x.value)).toEqual([75.5, 76, 76.5, 77]);
    expect(v.map((x) => x.atS)).toEqual([0, 10, 20, 30]);
    expect(rampValues(3, 2.5, undefined, 10)).toEqual([{ atS: 0, value: 2.5 }]);
    const down = rampValues(10, 9.25, 0.05, 10);
    expect(down.map((x) => x.value)).toEqual([9.5, 9.25]);
  });

  it("sends one command with targets and ramp rates in gateway style, leaving skipped setpoints out", () => {
    const steps = planDispatch(moves, { style: "gateway", stepS: 10, maxSteps: 60 });
    expect(steps).toEqual([
      {
        atS: 0,
        setpoints: [
          { tag: "TIC-101", value: 77, unit: "degC", rampPerS: 0.05 },
          { tag: "PIC-102", value: 2.5, unit: "bar" },
        ],
      },
    ]);
  });

  it("spreads a stepped dispatch so it never takes more than maxSteps commands", () => {
    const steps = planDispatch(moves, { style: "stepped", stepS: 10, maxSteps: 2 });
    // the 40 s ramp of TIC-101 needs a 20 s period to fit two commands
    expect(steps.map((s) => s.atS)).toEqual([0, 20]);
    expect(steps.map((s) => s.setpoints.map((x) => x.value))).toEqual([
      [76, 2.5],
      [77, 2.5],
    ]);
    expect(
      planDispatch([moves[1] as ValidatedSetpoint], { style: "stepped", stepS: 10, maxSteps: 2 }),
    ).toEqual([]);
  });

  it("resumes sequence numbers above both what it sent and what the control side last accepted", () => {
    expect(nextSeq(0, undefined)).toBe(1);
    expect(nextSeq(7, 3)).toBe(8);
    expect(nextSeq(2, 41)).toBe(42);
  });

  it("builds a command that, once signed, verifies and passes a control gateway", () => {
    const unsigned = buildCommand({
      site: "s1",
      unit: "R-1",
      seq: 5,
      nowMs: T0,
      expiryS: 120,
      keyId: KEY.id,
      proposalId: "P1",
      cycleId: "C1",
      setpoints: [{ tag: "TIC-101", value: 77, unit: "degC", rampPerS: 0.05 }],
      approvedBy: { user: "op-7", at: T0 - 1000 },
    });
    expect(unsigned.mode).toBe("advisory-approved");
    expect(unsigned.expiresAt - unsigned.issuedAt).toBe(120_000);
    const signed = signCommand(unsigned, KEY);
    expect(verifyCommandSignature(signed, { [KEY.id]: KEY.secret }).ok).toBe(true);
    const gw = createControlGateway({
      site: "s1",
      unit: "R-1",
      keys: { [KEY.id]: KEY.secret },
      limits: { "TIC-101": { min: 60, max: 90, unit: "degC" } },
      watchdogS: 30,
      startShed: false,
    });
    expect(gw.accept(signed, T0 + 100)).toMatchObject({ accepted: true, seq: 5 });
    expect(() => buildCommand({ ...unsigned, nowMs: T0, expiryS: 1, setpoints: [] } as never)).toThrow(
      /no setpoint/,
    );
  });
});

describe("readback watch", () => {
  const rb = (over: Partial<Readback>): Readback => ({
    trigger: "command",
    target: { site: "s1", unit: "R-1" },
    lastSeq: 3,
    shed: false,
    mode: "remote",
    setpoints: [{ tag: "TIC-101", unit: "degC", current: 75.5, target: 77 }],
    time: T0,
    commandSeq: 3,
    accepted: true,
    ...over,
  });

  it("matches a readback to the awaited command and reports a refusal with its code", () => {
    const w = createReadbackWatch();
    w.expect({ seq: 3, proposalId: "P", cycleId: "C", eventId: "E", deadlineMs: T0 + 10_000 });
    expect(w.onReadback(rb({ commandSeq: 2 }))).toBeUndefined();
    const v = w.onReadback(rb({ accepted: false, code: "GATEWAY_EXPIRED", reason: "late" }));
    expect(v).toMatchObject({ kind: "refused", code: "GATEWAY_EXPIRED" });
    expect(w.size()).toBe(0);
  });

  it("hands back commands left unanswered past their deadline", () => {
    const w = createReadbackWatch();
    w.expect({ seq: 4, proposalId: "P", cycleId: "C", eventId: "E", deadlineMs: T0 + 10_000 });
    expect(w.due(T0 + 9_999)).toEqual([]);
    expect(w.due(T0 + 10_000).map((c) => c.seq)).toEqual([4]);
  });

  it("reads the setpoints in force from a readback under both tag spellings", () => {
    const m = inForceFromReadback(
      rb({ setpoints: [{ tag: "TIC-101.SP", unit: "degC", current: 75.5, target: 77 }] }),
    );
    expect(m.get("TIC-101")).toBe(75.5);
    expect(m.get("TIC-101.SP")).toBe(75.5);
  });
});
