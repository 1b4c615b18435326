import { describe, expect, test } from "vitest";
import { loadSiteModelFile, STEADY_STATE_DEFAULTS } from "../model/index.js";
import type { Snapshot } from "./detector.js";
import { detectorBatches, detectorOptions, snapshotData, verdictData } from "./index.js";

const model = await loadSiteModelFile(
  new URL("../../test/fixtures/sites/ingest-demo.yaml", import.meta.url).pathname,
);

describe("steady wiring helpers", () => {
  test("the default policy maps to the published 95 % and 99 % R thresholds", () => {
    const { options, warnings } = detectorOptions(STEADY_STATE_DEFAULTS, { minSnapshotSamples: 2 });
    // Source: Cao & Rhinehart (1995), critical R for λ = (0.2, 0.1, 0.1); reproduced by Monte Carlo (CHECK-VALUES §3).
    expect(options.steadyThreshold).toBe(1.44);
    expect(options.transientThreshold).toBe(1.73);
    expect(options.steadyDurationS).toBe(STEADY_STATE_DEFAULTS.minSteadyS);
    expect(options.settleTimeS).toBe(STEADY_STATE_DEFAULTS.settleTimeS);
    expect(warnings).toEqual([]);
  });

  test("a key-tag fraction below 1 is reported as not implemented", () => {
    const { warnings } = detectorOptions(
      { ...STEADY_STATE_DEFAULTS, keyTagFraction: 0.5 },
      { minSnapshotSamples: 2 },
    );
    expect(warnings[0]).toMatch(/keyTagFraction 0.5 is not implemented/);
  });

  test("a measurement batch splits into one detector batch per sample time, in time order", () => {
    const b = detectorBatches([
      { tag: "A-1", value: 1, quality: "good", time: 2000, status: "good" },
      { tag: "B-1", value: null, quality: "bad", time: 1000, status: "stale" },
      { tag: "C-1", value: 3, quality: "good", time: 2000, status: "good" },
    ]);
    expect(b.map((x) => [x.time, x.values.map((v) => v.tagId)])).toEqual([
      [1000, ["B-1"]],
      [2000, ["A-1", "C-1"]],
    ]);
    expect(b[0]?.values[0]?.value).toBeNaN();
  });

  test("a snapshot gives each tag in its own unit and in the model's unit", () => {
    const s: Snapshot = {
      startMs: 0,
      endMs: 60_000,
      spanS: 60,
      createdAtMs: 60_001,
      lastCommandMs: null,
      tags: [{ tagId: "TI-102", key: true, mean: 80, std: 0.2, count: 61 }],
      excluded: [{ tagId: "FI-101", reason: "rejected: frozen" }],
    };
    const d = snapshotData(s, model);
    // Source: common practice, no source — T[K] = T[°C] + 273.15; a spread is unchanged by an offset.
    expect(d.tags[0]).toMatchObject({
      unit: "degC",
      modelUnit: "K",
      mean: 80,
      std: 0.2,
      sigma: 0.2,
      variable: "T",
    });
    expect(d.tags[0]?.modelMean).toBeCloseTo(353.15, 10);
    expect(d.tags[0]?.modelStd).toBeCloseTo(0.2, 12);
    expect(d.excluded).toEqual([{ tag: "FI-101", reason: "rejected: frozen" }]);
  });

  test("an infinite R is reported as null, since JSON has no infinity", () => {
    const v = verdictData({
      state: "transient",
      steady: false,
      timeMs: 5,
      decidedAtMs: 6,
      steadySinceMs: null,
      settleUntilMs: null,
      blockedBy: [],
      notSteady: [
        { tagId: "TI-102", state: "transient", r: Number.POSITIVE_INFINITY, noiseRatio: null },
        { tagId: "FI-101", state: "noisy", r: 1.1, noiseRatio: 7.5 },
      ],
    });
    expect(v.notSteady).toEqual([
      { tag: "TI-102", state: "transient", r: null, noiseRatio: null },
      { tag: "FI-101", state: "noisy", r: 1.1, noiseRatio: 7.5 },
    ]);
  });
});
