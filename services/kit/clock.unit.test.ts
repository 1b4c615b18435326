import { describe, expect, it } from "vitest";
import { ManualClock, ScaledClock } from "./clock.js";

describe("ScaledClock", () => {
  it("runs `scale` simulated seconds per wall second from its start time", () => {
    const wall = new ManualClock(1_000_000);
    const clock = new ScaledClock(60, Date.parse("2026-12-02T06:00:00Z"), wall);
    wall.advance(1000);
    expect(new Date(clock.now()).toISOString()).toBe("2026-12-02T06:01:00.000Z");
    expect(clock.wallMs(60_000)).toBe(1000);
  });

  it("refuses a scale that is not positive", () => {
    expect(() => new ScaledClock(0)).toThrow(RangeError);
  });
});
