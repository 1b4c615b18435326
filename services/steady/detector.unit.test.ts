import { describe, expect, test } from "vitest";
import {
  createDetector,
  type DetectorOutput,
  type DetectorTag,
  defaultWarmupSamples,
  noiseRatioLimit,
  RFilterBank,
  resolveDetectorOptions,
} from "./detector.js";
import { SteadyError } from "./errors.js";

/** mulberry32: a small seeded 32-bit PRNG, uniform on [0, 1). */
function mulberry32(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/** Standard normal deviates by Box–Muller on a seeded uniform source. */
function gaussian(seed: number): () => number {
  const u = mulberry32(seed);
  return () => Math.sqrt(-2 * Math.log(1 - u())) * Math.cos(2 * Math.PI * u());
}

const ONE_KEY: DetectorTag[] = [{ id: "TI-101", key: true }];

/** Feeds `signal(i)` at one sample per second; returns every output and the verdict states seen. */
function feed(
  d: ReturnType<typeof createDetector>,
  count: number,
  signal: (i: number) => number,
  startS = 0,
): { outputs: DetectorOutput[]; steadySamples: number } {
  const outputs: DetectorOutput[] = [];
  let steadySamples = 0;
  for (let i = 0; i < count; i++) {
    const t = (startS + i) * 1000;
    outputs.push(
      ...d.observe({ time: t, values: [{ tagId: "TI-101", value: signal(i), status: "good" }] }, t),
    );
    if (d.verdict().steady) steadySamples++;
  }
  return { outputs, steadySamples };
}

describe("R-statistic filters", () => {
  test("filter values after four hand-computable samples match the published equations", () => {
    // given the recommended factors and the samples 1, 3, 2, 5
    const bank = new RFilterBank(1, { lambda1: 0.2, lambda2: 0.1, lambda3: 0.1 });
    // when they are fed in turn
    const r = [1, 3, 2, 5].map((x) => bank.update(0, x));
    // then the filters follow the equations worked by hand below.
    // Source: Cao & Rhinehart (1995), An efficient method for on-line identification of steady state,
    // filter equations (published); ν² uses the previous filtered mean X_f,i−1.
    // n=2: ν² = 0.1·(3−1)² = 0.4; X_f = 0.2·3 + 0.8·1 = 1.4; δ² = 0.1·(3−1)² = 0.4; R = 1.8·0.4/0.4
    // n=3: ν² = 0.1·(2−1.4)² + 0.9·0.4 = 0.396; X_f = 1.52; δ² = 0.1·1 + 0.9·0.4 = 0.46
    // n=4: ν² = 0.1·(5−1.52)² + 0.9·0.396 = 1.56744; X_f = 2.216; δ² = 0.1·9 + 0.9·0.46 = 1.314
    expect(r[0]).toBeNaN();
    expect(r[1]).toBeCloseTo(1.8, 12);
    expect(r[2]).toBeCloseTo((1.8 * 0.396) / 0.46, 12);
    expect(r[3]).toBeCloseTo((1.8 * 1.56744) / 1.314, 12);
    expect(bank.meanF[0]).toBeCloseTo(2.216, 12);
    expect(bank.nu2F[0]).toBeCloseTo(1.56744, 12);
    expect(bank.delta2F[0]).toBeCloseTo(1.314, 12);
  });

  test("the deviation filter uses the previous filtered mean, not the updated one", () => {
    // given samples 1 then 3
    const bank = new RFilterBank(1);
    bank.update(0, 1);
    // when the second arrives
    bank.update(0, 3);
    // then ν² = 0.1·(3 − 1)² = 0.4, not 0.1·(3 − 1.4)² = 0.256.
    // Source: Cao & Rhinehart (1995), filter equation for ν² (published).
    expect(bank.nu2F[0]).toBeCloseTo(0.4, 14);
    expect(bank.nu2F[0]).not.toBeCloseTo(0.256, 6);
  });

  test("on 2×10⁵ samples of white noise about 5 % of R values exceed 1.44 and about 1 % exceed 1.73", () => {
    // given seeded Gaussian white noise
    const g = gaussian(20240601);
    const bank = new RFilterBank(1);
    const warm = defaultWarmupSamples({ lambda1: 0.2, lambda2: 0.1, lambda3: 0.1 });
    let above95 = 0;
    let above99 = 0;
    let counted = 0;
    // when R is computed for every sample after the warm-up
    for (let i = 0; i < 200_000; i++) {
      const r = bank.update(0, g());
      if (i < warm) continue;
      counted++;
      if (r > 1.44) above95++;
      if (r > 1.73) above99++;
    }
    // then the exceedance fractions match the critical values.
    // Source: Cao & Rhinehart (1995) filters; critical values 1.44 (95 %) and 1.73 (99 %) for
    // λ = (0.2, 0.1, 0.1) reproduced by Monte Carlo (CHECK-VALUES §3); the published table of
    // Cao & Rhinehart (1997) was not re-read.
    expect(Math.abs(above95 / counted - 0.05)).toBeLessThan(0.01);
    expect(Math.abs(above99 / counted - 0.01)).toBeLessThan(0.005);
  });

  test("with λ = (0.1, 0.05, 0.05) the reproduced critical values 1.31 and 1.49 hold on white noise", () => {
    // given slower filters
    const g = gaussian(99);
    const bank = new RFilterBank(1, { lambda1: 0.1, lambda2: 0.05, lambda3: 0.05 });
    let above95 = 0;
    let above99 = 0;
    let counted = 0;
    // when R is computed on 2×10⁵ samples
    for (let i = 0; i < 200_000; i++) {
      const r = bank.update(0, g());
      if (i < 100) continue;
      counted++;
      if (r > 1.31) above95++;
      if (r > 1.49) above99++;
    }
    // then about 5 % and 1 % exceed them.
    // Source: critical values for λ = (0.1, 0.05, 0.05) reproduced by Monte Carlo (CHECK-VALUES §3),
    // filters of Cao & Rhinehart (1995).
    expect(Math.abs(above95 / counted - 0.05)).toBeLessThan(0.01);
    expect(Math.abs(above99 / counted - 0.01)).toBeLessThan(0.005);
  });

  test("a perfectly constant signal gives R = 0 rather than 0/0", () => {
    const bank = new RFilterBank(1);
    let r = Number.NaN;
    for (let i = 0; i < 10; i++) r = bank.update(0, 5);
    expect(r).toBe(0);
  });
});

describe("plant-wide verdict", () => {
  const fast = { steadyDurationS: 60, settleTimeS: 0 };

  test("white noise is declared steady after the warm-up and the steady duration, with a snapshot", () => {
    // given one key tag of white noise around 50 with σ = 2
    const g = gaussian(1);
    const d = createDetector(fast, ONE_KEY);
    // when 400 samples arrive, one per second
    const { outputs } = feed(d, 400, () => 50 + 2 * g());
    // then the first verdict says warming-up, and a snapshot with the window's mean follows
    const verdicts = outputs.flatMap((o) => (o.kind === "verdict" ? [o.verdict] : []));
    const snaps = outputs.flatMap((o) => (o.kind === "snapshot" ? [o.snapshot] : []));
    expect(verdicts.some((v) => v.state === "steady")).toBe(true);
    expect(snaps.length).toBeGreaterThan(0);
    const first = snaps[0]!;
    expect(first.spanS).toBeGreaterThanOrEqual(60);
    expect(first.startMs).toBeGreaterThanOrEqual(defaultWarmupSamples(d.options.lambdas) * 1000 - 1000);
    expect(first.tags[0]!.mean).toBeGreaterThan(49);
    expect(first.tags[0]!.mean).toBeLessThan(51);
    expect(first.tags[0]!.std).toBeGreaterThan(1.5);
    expect(first.tags[0]!.std).toBeLessThan(2.5);
  });

  test("gives no verdict other than warming-up during the documented warm-up", () => {
    const g = gaussian(3);
    const d = createDetector(fast, ONE_KEY);
    const warm = defaultWarmupSamples(d.options.lambdas);
    const { outputs } = feed(d, warm - 1, () => g());
    expect(outputs).toEqual([]);
    expect(d.verdict().state).toBe("warming-up");
    expect(warm).toBe(50);
  });

  test("a ramp of 0.2 σ per sample is never declared steady with the default factors", () => {
    // given a ramp of 0.2 σ per sample on unit noise
    const g = gaussian(7);
    const d = createDetector(fast, ONE_KEY);
    // when 5000 samples arrive
    const { steadySamples, outputs } = feed(d, 5000, (i) => g() + 0.2 * i);
    // then the plant is never steady and no snapshot is made
    expect(steadySamples).toBe(0);
    expect(outputs.filter((o) => o.kind === "snapshot")).toHaveLength(0);
  });

  test("a ramp of 0.1 σ per sample is never declared steady with λ = (0.1, 0.05, 0.05) and its critical values", () => {
    // given the slower factors with their reproduced critical values (CHECK-VALUES §3)
    const g = gaussian(7);
    const d = createDetector(
      {
        ...fast,
        lambdas: { lambda1: 0.1, lambda2: 0.05, lambda3: 0.05 },
        steadyThreshold: 1.31,
        transientThreshold: 1.49,
      },
      ONE_KEY,
    );
    // when a ramp of 0.1 σ per sample arrives
    const { steadySamples } = feed(d, 5000, (i) => g() + 0.1 * i);
    // then the plant is never steady
    expect(steadySamples).toBe(0);
  });

  test("a ramp of 0.1 σ per sample pushes R above 1.44 far more often than white noise with the default factors", () => {
    // given the default factors: a 0.1 σ ramp raises R only modestly (see the report: not reliably caught)
    const g = gaussian(11);
    const bank = new RFilterBank(1);
    let above = 0;
    for (let i = 0; i < 50_000; i++) if (bank.update(0, g() + 0.1 * i) > 1.44) above++;
    // then more than four times the white-noise rate of 5 % exceeds the 95 % critical value.
    // Source: 1.44 reproduced by Monte Carlo (CHECK-VALUES §3) for Cao & Rhinehart (1995) filters.
    expect(above / 50_000).toBeGreaterThan(0.2);
  });

  test("a step then a flat signal goes transient and then returns to steady at the new level", () => {
    // given 300 s of noise at 10, then a step to 20 held with the same noise
    const g = gaussian(5);
    const d = createDetector(fast, ONE_KEY);
    feed(d, 300, () => 10 + 0.5 * g());
    expect(d.verdict().steady).toBe(true);
    // when the step arrives
    const { outputs } = feed(d, 400, () => 20 + 0.5 * g(), 300);
    // then the verdict goes transient and comes back to steady, with a snapshot near 20
    const states = outputs.flatMap((o) => (o.kind === "verdict" ? [o.verdict.state] : []));
    expect(states[0]).toBe("transient");
    expect(states.at(-1)).toBe("steady");
    const snap = outputs.find((o) => o.kind === "snapshot");
    expect(snap?.kind === "snapshot" && Math.abs(snap.snapshot.tags[0]!.mean - 20)).toBeLessThan(0.3);
  });

  test("a rejected key tag blocks the verdict and says which tag and why", () => {
    // given two steady key tags and a non-key tag
    const g = gaussian(8);
    const tags = [
      { id: "FI-1", key: true },
      { id: "TI-2", key: true },
      { id: "PI-3", key: false },
    ];
    const d = createDetector(fast, tags);
    for (let i = 0; i < 200; i++) {
      const values = tags.map((t) => ({ tagId: t.id, value: 5 + g(), status: "good" }));
      d.observe({ time: i * 1000, values }, i * 1000);
    }
    expect(d.verdict().steady).toBe(true);
    // when TI-2 arrives frozen
    const out = d.observe(
      {
        time: 200_000,
        values: [
          { tagId: "FI-1", value: 5, status: "good" },
          { tagId: "TI-2", value: 5, status: "frozen" },
        ],
      },
      200_000,
    );
    // then the plant is blocked by TI-2 with the reason
    expect(out).toHaveLength(1);
    const v = out[0]!.kind === "verdict" ? out[0]!.verdict : null;
    expect(v?.state).toBe("blocked");
    expect(v?.steady).toBe(false);
    expect(v?.blockedBy).toEqual([{ tagId: "TI-2", status: "frozen" }]);
  });

  test("a rejected non-key tag does not block but is excluded from the snapshot with its reason", () => {
    const g = gaussian(9);
    const d = createDetector(fast, [
      { id: "FI-1", key: true },
      { id: "AI-9", key: false },
    ]);
    const outputs: DetectorOutput[] = [];
    for (let i = 0; i < 200; i++) {
      outputs.push(
        ...d.observe(
          {
            time: i * 1000,
            values: [
              { tagId: "FI-1", value: 5 + g(), status: "good" },
              { tagId: "AI-9", value: Number.NaN, status: "bad-quality" },
            ],
          },
          i * 1000,
        ),
      );
    }
    const snap = outputs.find((o) => o.kind === "snapshot");
    expect(snap?.kind).toBe("snapshot");
    if (snap?.kind !== "snapshot") return;
    expect(snap.snapshot.tags.map((t) => t.tagId)).toEqual(["FI-1"]);
    expect(snap.snapshot.excluded).toEqual([{ tagId: "AI-9", reason: "rejected: bad-quality" }]);
  });

  test("the settle time after a command is honoured before the plant can be steady again", () => {
    // given a steady plant and a settle time of 120 s
    const g = gaussian(10);
    const d = createDetector({ steadyDurationS: 30, settleTimeS: 120 }, ONE_KEY);
    feed(d, 200, () => g());
    expect(d.verdict().steady).toBe(true);
    // when a command is noted at t = 200 s and the signal stays the same
    d.noteCommand(200_000);
    const outputs: { t: number; state: string }[] = [];
    for (let i = 200; i < 500; i++) {
      for (const o of d.observe(
        { time: i * 1000, values: [{ tagId: "TI-101", value: g(), status: "good" }] },
        0,
      )) {
        if (o.kind === "verdict") outputs.push({ t: i, state: o.verdict.state });
      }
    }
    // then it is settling at once, and steady again no sooner than settle + duration later
    expect(outputs[0]).toEqual({ t: 200, state: "settling" });
    const back = outputs.find((o) => o.state === "steady");
    expect(back).toBeDefined();
    expect(back!.t).toBeGreaterThanOrEqual(200 + 120 + 30);
    expect(d.verdict().settleUntilMs).toBe(320_000);
  });

  test("snapshot statistics equal a two-pass mean and standard deviation over the window", () => {
    // given a steady signal
    const g = gaussian(12);
    const d = createDetector({ steadyDurationS: 40, settleTimeS: 0 }, ONE_KEY);
    const xs: number[] = [];
    let snapStart = -1;
    let snapshot = null as null | { mean: number; std: number; count: number };
    for (let i = 0; i < 300 && snapshot === null; i++) {
      const x = 3 + 0.1 * g();
      xs.push(x);
      for (const o of d.observe(
        { time: i * 1000, values: [{ tagId: "TI-101", value: x, status: "good" }] },
        0,
      )) {
        if (o.kind === "snapshot") {
          snapStart = o.snapshot.startMs / 1000;
          snapshot = o.snapshot.tags[0]!;
        }
      }
    }
    // when the window's samples are summed the slow way
    expect(snapshot).not.toBeNull();
    const window = xs.slice(snapStart);
    const mean = window.reduce((a, b) => a + b, 0) / window.length;
    const std = Math.sqrt(window.reduce((a, b) => a + (b - mean) ** 2, 0) / (window.length - 1));
    // then Welford agrees (common practice, no source: two-pass formulas)
    expect(snapshot!.count).toBe(window.length);
    expect(snapshot!.mean).toBeCloseTo(mean, 12);
    expect(snapshot!.std).toBeCloseTo(std, 12);
  });
});

describe("noise-level test", () => {
  const SIGMA = 0.2;
  const NOISY_KEY: DetectorTag[] = [{ id: "TI-101", key: true, sigma: SIGMA }];
  const fast = { steadyDurationS: 60, settleTimeS: 0 };

  test("the δ² filter's σ̂²/σ² exceeds its limits about as often as their confidence says, on white noise", () => {
    // given the default δ² factor 0.1 and 10⁶ samples of white noise at σ = 1
    const g = gaussian(11);
    const bank = new RFilterBank(1);
    const hi = noiseRatioLimit(0.1, 0.999);
    const mid = noiseRatioLimit(0.1, 0.99);
    let aboveHi = 0;
    let aboveMid = 0;
    let sum = 0;
    const n = 1_000_000;
    for (let i = 0; i < 200; i++) bank.update(0, g());
    // when σ̂²/σ² = δ²_f / 2 is compared with the limits at every sample
    for (let i = 0; i < n; i++) {
      bank.update(0, g());
      const ratio = bank.delta2F[0]! / 2;
      sum += ratio;
      if (ratio > hi) aboveHi++;
      if (ratio > mid) aboveMid++;
    }
    // then σ̂² is unbiased and the exceedance fractions are near 0.1 % and 1 %.
    // Source: Cao & Rhinehart (1995), δ² estimates 2σ² under white noise (published); the limits are
    // our three-moment χ² approximation (derived, no source), checked here by our own Monte Carlo.
    expect(sum / n).toBeGreaterThan(0.99);
    expect(sum / n).toBeLessThan(1.01);
    expect(aboveHi / n).toBeGreaterThan(0.0005);
    expect(aboveHi / n).toBeLessThan(0.002);
    expect(aboveMid / n).toBeGreaterThan(0.007);
    expect(aboveMid / n).toBeLessThan(0.013);
  });

  test("the χ² with the EWMA's effective sample size (2−λ)/λ alone would be far too tight, which is why three moments are matched", () => {
    // given the limit a plain χ² with ν = (2 − λ)/λ = 19 would give at 99.9 % for λ3 = 0.1
    const g = gaussian(12);
    const bank = new RFilterBank(1);
    const naive = 43.82 / 19;
    let above = 0;
    const n = 300_000;
    for (let i = 0; i < 200; i++) bank.update(0, g());
    for (let i = 0; i < n; i++) {
      bank.update(0, g());
      if (bank.delta2F[0]! / 2 > naive) above++;
    }
    // then that limit is crossed several times more often than 0.1 %, and ours lies above it.
    // Source: Abramowitz & Stegun (1964), Handbook of Mathematical Functions, table 26.8: χ²(19) 99.9 % point 43.82 (from memory).
    expect(above / n).toBeGreaterThan(0.004);
    expect(noiseRatioLimit(0.1, 0.999)).toBeGreaterThan(naive);
  });

  test("white noise at the declared sigma passes the noise test at least 99 % of the time", () => {
    for (const seed of [21, 22, 23]) {
      // given a key tag whose white noise has exactly its declared sigma
      const g = gaussian(seed);
      const d = createDetector(fast, NOISY_KEY);
      let noisy = 0;
      const n = 100_000;
      // when 10⁵ samples arrive
      for (let i = 0; i < n; i++) {
        d.observe(
          { time: i * 1000, values: [{ tagId: "TI-101", value: 50 + SIGMA * g(), status: "good" }] },
          0,
        );
        if (d.tags()[0]!.state === "noisy") noisy++;
      }
      // then the tag is noisy in at most 1 % of the samples (hysteresis included)
      expect(noisy / n).toBeLessThan(0.01);
    }
  });

  test("a burst at 3 × sigma is flagged within 2/λ3 samples, although R cannot see it", () => {
    const delays: number[] = [];
    let rAbove = 0;
    let burstSamples = 0;
    for (let seed = 100; seed < 300; seed++) {
      // given 200 samples at the declared sigma, then white noise at 3 σ
      const g = gaussian(seed);
      const d = createDetector(fast, NOISY_KEY);
      let delay = -1;
      for (let i = 0; i < 300; i++) {
        const sigma = i < 200 ? SIGMA : 3 * SIGMA;
        d.observe(
          { time: i * 1000, values: [{ tagId: "TI-101", value: 50 + sigma * g(), status: "good" }] },
          0,
        );
        const tag = d.tags()[0]!;
        if (i >= 200) {
          burstSamples++;
          if ((tag.r ?? 0) > d.options.transientThreshold) rAbove++;
          if (delay < 0 && tag.state === "noisy") delay = i - 200 + 1;
        }
      }
      delays.push(delay);
    }
    delays.sort((a, b) => a - b);
    // then every burst is flagged: 95 % within 2/λ3 = 20 samples of its start (median 5 on these
    // seeds), the slowest within 3/λ3
    expect(delays[0]).toBeGreaterThan(0);
    expect(delays[189]).toBeLessThanOrEqual(20);
    expect(delays[199]).toBeLessThanOrEqual(30);
    // and R alone stays above its 99 % value about as rarely as on plain white noise (a few %).
    // Source: CHECK-VALUES §3, 99 % critical value 1.73 for λ = (0.2, 0.1, 0.1) (reproduced by Monte Carlo).
    expect(rAbove / burstSamples).toBeLessThan(0.05);
  });

  test("a burst longer than the steady duration opens no cycle, names the tag noisy, and the tag recovers after it", () => {
    // given a key tag steady at its sigma for 300 s, then 200 s at 4 σ, then 300 s at σ again
    const g = gaussian(5);
    const d = createDetector(fast, NOISY_KEY);
    const outputs: DetectorOutput[] = [];
    const snapshotsDuring: number[] = [];
    for (let i = 0; i < 800; i++) {
      const sigma = i >= 300 && i < 500 ? 4 * SIGMA : SIGMA;
      const out = d.observe(
        { time: i * 1000, values: [{ tagId: "TI-101", value: 50 + sigma * g(), status: "good" }] },
        0,
      );
      outputs.push(...out);
      if (i >= 300 && i < 500) snapshotsDuring.push(...out.filter((o) => o.kind === "snapshot").map(() => i));
    }
    // then no snapshot is made while the burst lasts, the verdict names the tag noisy with its ratio,
    // and after the burst a new cycle opens again
    expect(snapshotsDuring).toEqual([]);
    const verdicts = outputs.flatMap((o) => (o.kind === "verdict" ? [o.verdict] : []));
    const noisy = verdicts.find((v) => v.notSteady.some((t) => t.state === "noisy"));
    expect(noisy?.state).toBe("transient");
    expect(noisy?.notSteady[0]?.noiseRatio).toBeGreaterThan(d.options.noiseRatioHigh);
    const snaps = outputs.flatMap((o) => (o.kind === "snapshot" ? [o.snapshot] : []));
    expect(snaps.some((s) => s.startMs >= 500_000)).toBe(true);
    expect(snaps.some((s) => s.endMs < 300_000)).toBe(true);
  });

  test("a non-key noisy tag is left out of the snapshot with the reason", () => {
    // given a quiet key tag and a non-key tag at 5 × its sigma
    const g = gaussian(8);
    const d = createDetector(fast, [
      { id: "TI-101", key: true, sigma: SIGMA },
      { id: "FI-9", key: false, sigma: 0.1 },
    ]);
    const snaps: DetectorOutput[] = [];
    for (let i = 0; i < 300; i++) {
      const values = [
        { tagId: "TI-101", value: 50 + SIGMA * g(), status: "good" },
        { tagId: "FI-9", value: 3 + 0.5 * g(), status: "good" },
      ];
      snaps.push(...d.observe({ time: i * 1000, values }, 0).filter((o) => o.kind === "snapshot"));
    }
    // then the snapshot holds the key tag and explains why the other is missing
    const s = snaps[0];
    expect(s?.kind).toBe("snapshot");
    if (s?.kind !== "snapshot") return;
    expect(s.snapshot.tags.map((t) => t.tagId)).toEqual(["TI-101"]);
    expect(s.snapshot.excluded[0]?.tagId).toBe("FI-9");
    expect(s.snapshot.excluded[0]?.reason).toMatch(/^noisy: σ̂²\/σ² = /);
  });

  test("a tag without a declared sigma gets no noise test", () => {
    const g = gaussian(9);
    const d = createDetector(fast, ONE_KEY);
    feed(d, 200, () => 50 + 10 * g());
    expect(d.tags()[0]?.noiseRatio).toBeNull();
    expect(d.tags()[0]?.state).not.toBe("noisy");
  });
});

describe("configuration", () => {
  test("refuses a tag list without a key tag, or with a repeated id", () => {
    expect(() => createDetector({}, [{ id: "a", key: false }])).toThrow(SteadyError);
    try {
      createDetector({}, [
        { id: "a", key: true },
        { id: "a", key: false },
      ]);
    } catch (e) {
      expect((e as SteadyError).code).toBe("STEADY_TAGS_INVALID");
    }
  });

  test("refuses out-of-range options naming the option", () => {
    expect(() => resolveDetectorOptions({ lambdas: { lambda1: 0 } })).toThrow(/lambda1/);
    expect(() => resolveDetectorOptions({ steadyThreshold: 2, transientThreshold: 1.5 })).toThrow(
      /transientThreshold/,
    );
    expect(() => resolveDetectorOptions({ noiseConfidence: 0.99, noiseClearConfidence: 0.999 })).toThrow(
      /noiseClearConfidence/,
    );
    expect(() => resolveDetectorOptions({ noiseConfidence: 1 })).toThrow(/noiseConfidence/);
  });
});
