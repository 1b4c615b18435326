import { describe, expect, test } from "vitest";
import { PlantSimError } from "./errors.js";
import { createLoop, type LoopSpec } from "./regulatory.js";

/** Runs a loop from 0 toward `target` for `totalS`, sampling every `dtS`; returns the samples. */
function run(spec: LoopSpec, target: number, totalS: number, dtS = 1) {
  const loop = createLoop(spec, 0);
  loop.setTarget(target);
  const out: { t: number; sp: number; pv: number }[] = [{ t: 0, sp: 0, pv: 0 }];
  for (let t = dtS; t <= totalS + 1e-9; t += dtS) {
    loop.advance(dtS);
    const s = loop.state();
    out.push({ t, sp: s.sp, pv: s.pv });
  }
  return out;
}

describe("regulatory loops", () => {
  test("a first-order loop without a ramp reaches 1 − 1/e of a step after one time constant", () => {
    // given a first-order loop with τc = 60 s and no ramp limit
    const s = run({ closedLoopTauS: 60 }, 10, 60, 60);
    // then after 60 s the pv has covered 63.2 % of the step
    // Source: step response of a first-order lag, y(τ)/Δ = 1 − e^(−1) (analytic).
    expect(s.at(-1)?.pv).toBeCloseTo(10 * (1 - Math.exp(-1)), 10);
  });

  test("the working setpoint never moves faster than the ramp limit and the pv never faster either", () => {
    // given a ramp limit of 0.05 unit/s and a step of 10
    const s = run({ closedLoopTauS: 30, rampPerS: 0.05 }, 10, 600, 5);
    // then every 5 s the setpoint moved at most 0.25 and the pv at most as much
    for (let i = 1; i < s.length; i += 1) {
      const a = s[i - 1];
      const b = s[i];
      if (!a || !b) continue;
      expect(b.sp - a.sp).toBeLessThanOrEqual(0.05 * 5 + 1e-12);
      expect(b.pv - a.pv).toBeLessThanOrEqual(0.05 * 5 + 1e-12);
    }
    // and the setpoint reaches the target after 10 / 0.05 = 200 s
    expect(s.find((x) => x.t === 195)?.sp).toBeLessThan(10);
    expect(s.find((x) => x.t === 200)?.sp).toBe(10);
  });

  test("a ramped first-order loop lags its ramp by rate × τc and never overshoots", () => {
    // given a ramp of 0.05 unit/s toward 10 through a lag of 30 s
    const s = run({ closedLoopTauS: 30, rampPerS: 0.05 }, 10, 900, 1);
    // then mid-ramp the pv trails the setpoint by r·τ = 1.5 (after the transient e^(−t/τ) has died)
    // Source: ramp response of a first-order lag, steady lag = r·τ (analytic).
    const mid = s.find((x) => x.t === 180);
    expect((mid?.sp ?? 0) - (mid?.pv ?? 0)).toBeCloseTo(1.5, 2);
    // and the pv never exceeds the target
    expect(Math.max(...s.map((x) => x.pv))).toBeLessThanOrEqual(10);
    expect(s.at(-1)?.pv).toBeCloseTo(10, 6);
  });

  test("a SIMC-tuned PI loop on a first-order process responds like a first-order closed loop", () => {
    // given a PI loop with τc = 40 s on a process with K = 2, τp = 120 s, default SIMC tuning
    const s = run({ mode: "pi", closedLoopTauS: 40, processGain: 2, processTauS: 120 }, 5, 400, 1);
    // then the pv after one τc is 63.2 % of the step and it does not overshoot by more than 0.1 %
    // Source: Skogestad (2003), J. Process Control 13(4):291–309 — SIMC on a first-order process gives y/ys = 1/(τc s + 1) (from memory).
    expect(s.find((x) => x.t === 40)?.pv).toBeCloseTo(5 * (1 - Math.exp(-1)), 3);
    expect(Math.max(...s.map((x) => x.pv))).toBeLessThanOrEqual(5 * 1.001);
    expect(s.at(-1)?.pv).toBeCloseTo(5, 3);
  });

  test("a saturating PI loop with anti-windup settles without more than 2 % overshoot", () => {
    // given a PI loop whose output is limited to ±1 (the process can move at most ±2 from rest)
    const spec: LoopSpec = {
      mode: "pi",
      closedLoopTauS: 20,
      processGain: 2,
      processTauS: 100,
      outMin: -1,
      outMax: 1,
    };
    const s = run(spec, 1.5, 1500, 1);
    // then it gets there, slower than unconstrained, and overshoots by no more than 2 %
    expect(s.find((x) => x.t === 20)?.pv).toBeLessThan(1.5 * (1 - Math.exp(-1)));
    expect(Math.max(...s.map((x) => x.pv))).toBeLessThanOrEqual(1.5 * 1.02);
    expect(s.at(-1)?.pv).toBeCloseTo(1.5, 2);
  });

  test("a command's ramp rate is honoured only when slower than the loop's own", () => {
    // given a loop with its own ramp 0.1/s
    const loop = createLoop({ closedLoopTauS: 10, rampPerS: 0.1 }, 0);
    // when asked for 1/s, then for 0.02/s
    loop.setTarget(5, 1);
    const fast = loop.state().rampPerS;
    loop.setTarget(5, 0.02);
    const slow = loop.state().rampPerS;
    // then it keeps 0.1, then takes 0.02
    expect(fast).toBe(0.1);
    expect(slow).toBe(0.02);
  });

  test("refuses a non-positive time constant", () => {
    expect(() => createLoop({ closedLoopTauS: 0 }, 1)).toThrow(PlantSimError);
  });
});
