import { describe, expect, it } from "vitest";
import type { Readback } from "../kit/generated/messages.js";
import { inForceAt } from "./index.js";

const T0 = 1_767_225_600_000;

/** The gateway's answer to a command, sent as the ramps start. */
const answer: Readback = {
  trigger: "command",
  target: { site: "kestrel-r1", unit: "R-1" },
  commandSeq: 4,
  lastSeq: 4,
  accepted: true,
  shed: false,
  mode: "remote",
  setpoints: [
    { tag: "FI-102", unit: "kg/s", current: 1.8, target: 2.1, rampPerS: 0.002 },
    { tag: "TI-101", unit: "degC", current: 72, target: 69, rampPerS: 0.01 },
    { tag: "PI-300", unit: "bar", current: 5, target: 5 },
  ],
  time: T0,
};

describe("setpoints in force for the checks", () => {
  it("move along each ramp from the readback's time and stop at the target", () => {
    // given a readback at the start of two ramps / when asked 60 s later
    const early = inForceAt(answer, T0 + 60_000);
    // then each setpoint has moved rate × time toward its target
    expect(early.get("FI-102")).toBeCloseTo(1.92, 12);
    expect(early.get("TI-101")).toBeCloseTo(71.4, 12);
    expect(early.get("PI-300")).toBe(5);
    // and once the ramps are done the targets are in force: a move is measured from where the
    // setpoint is, not from where its last ramp began
    const late = inForceAt(answer, T0 + 3_600_000);
    expect(late.get("FI-102")).toBe(2.1);
    expect(late.get("TI-101")).toBe(69);
  });

  it("is empty before any readback and never runs a ramp backwards in time", () => {
    expect(inForceAt(undefined, T0).size).toBe(0);
    expect(inForceAt(answer, T0 - 10_000).get("FI-102")).toBe(1.8);
  });
});
