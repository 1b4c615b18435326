import { describe, expect, test } from "vitest";
import { createRandom } from "../kit/random.js";
import { PlantSimError } from "./errors.js";
import { createFaultInjector, type FaultSpec, type MeasuredValue } from "./faults.js";

const SIGMA = 0.2;
const sigmaOf = () => SIGMA;

/** A clean batch at time t: TI-1 rises 0.1 per s, FI-2 constant. */
const batch = (t: number): MeasuredValue[] => [
  { tag: "TI-1", value: 80 + 0.1 * t },
  { tag: "FI-2", value: 4 },
];

/** Runs `fault` over t = 0..100 s every 10 s; returns each batch as published (undefined when lost). */
function run(fault: FaultSpec) {
  const inj = createFaultInjector([fault]);
  const rand = createRandom(7);
  const out: { t: number; values: Map<string, number> | undefined }[] = [];
  for (let t = 0; t <= 100; t += 10) {
    const b = inj.apply(t, batch(t), sigmaOf, rand);
    out.push({ t, values: b ? new Map(b.map((m) => [m.tag, m.value])) : undefined });
  }
  return out;
}

const at = (r: ReturnType<typeof run>, t: number, tag = "TI-1") => r.find((x) => x.t === t)?.values?.get(tag);

describe("fault injection", () => {
  test("a stuck sensor repeats the value it had when it stuck, then recovers", () => {
    const r = run({ kind: "stuck", tag: "TI-1", startS: 30, durationS: 40 });
    expect(at(r, 30)).toBe(83);
    expect(at(r, 60)).toBe(83);
    expect(at(r, 70)).toBe(87);
    expect(at(r, 60, "FI-2")).toBe(4);
  });

  test("a spike changes exactly one value by its magnitude", () => {
    const r = run({ kind: "spike", tag: "TI-1", startS: 25, magnitude: 15 });
    const changed = r.filter((x) => x.values?.get("TI-1") !== 80 + 0.1 * x.t);
    expect(changed.map((x) => x.t)).toEqual([30]);
    expect(at(r, 30)).toBeCloseTo(83 + 15, 12);
  });

  test("a drift adds a ramp from its start", () => {
    const r = run({ kind: "drift", tag: "TI-1", startS: 20, ratePerS: 0.5 });
    expect(at(r, 20)).toBeCloseTo(82, 12);
    expect(at(r, 60)).toBeCloseTo(86 + 0.5 * 40, 12);
  });

  test("a bias adds a constant offset while it lasts, 10 σ by default", () => {
    const r = run({ kind: "bias", tag: "TI-1", startS: 50, durationS: 20 });
    expect(at(r, 40)).toBeCloseTo(84, 12);
    expect(at(r, 50)).toBeCloseTo(85 + 10 * SIGMA, 12);
    expect(at(r, 60)).toBeCloseTo(86 + 10 * SIGMA, 12);
    expect(at(r, 70)).toBeCloseTo(87, 12);
  });

  test("a dropout removes the tag from the batch but keeps the others", () => {
    const r = run({ kind: "dropout", tag: "TI-1", startS: 10, durationS: 30 });
    expect(at(r, 20)).toBeUndefined();
    expect(at(r, 20, "FI-2")).toBe(4);
    expect(at(r, 40)).toBeCloseTo(84, 12);
  });

  test("a noise burst multiplies the measurement noise by its factor", () => {
    // given a burst of factor 4 on a clean constant signal, sampled 20 000 times
    const inj = createFaultInjector([{ kind: "noise-burst", tag: "FI-2", startS: 0, factor: 4 }]);
    const rand = createRandom(11);
    const xs: number[] = [];
    for (let i = 0; i < 20_000; i += 1)
      xs.push(inj.apply(1, [{ tag: "FI-2", value: 0 }], sigmaOf, rand)?.[0]?.value ?? 0);
    // then the added noise has σ·sqrt(k² − 1), so σ_total = k·σ on a signal that already carries σ
    const sd = Math.sqrt(xs.reduce((a, x) => a + x * x, 0) / xs.length);
    // Source: variance of a sum of independent normals (common practice, no source); 20 000 samples → ±1 % on σ.
    expect(sd / (SIGMA * Math.sqrt(15))).toBeGreaterThan(0.97);
    expect(sd / (SIGMA * Math.sqrt(15))).toBeLessThan(1.03);
  });

  test("a lost connection publishes no batch at all while it lasts", () => {
    const r = run({ kind: "lost-connection", startS: 20, durationS: 30 });
    expect(r.filter((x) => x.values === undefined).map((x) => x.t)).toEqual([20, 30, 40]);
  });

  test("clearing a tag's faults restores its values", () => {
    const inj = createFaultInjector([{ kind: "bias", tag: "TI-1", startS: 0, magnitude: 5 }]);
    const rand = createRandom(1);
    expect(inj.active(10)).toHaveLength(1);
    inj.clear("TI-1");
    expect(inj.apply(10, batch(10), sigmaOf, rand)?.[0]?.value).toBe(81);
  });

  test("refuses a tag fault without a tag and a burst factor not above one", () => {
    expect(() => createFaultInjector([{ kind: "bias", startS: 0 }])).toThrow(PlantSimError);
    expect(() => createFaultInjector([{ kind: "noise-burst", tag: "A-1", startS: 0, factor: 1 }])).toThrow(
      PlantSimError,
    );
  });
});
