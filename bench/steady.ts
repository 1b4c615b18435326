/**
 * Benchmark: the Cao & Rhinehart (1995) R-statistic over many tags, samples per second on one core,
 * against a Python/NumPy peer measured in the same run (a Python loop over time vectorised over tags,
 * and scipy.signal.lfilter over whole series). Run: `npx tsx bench/steady.ts [tags] [samples]`.
 *
 * Accuracy: both sides compute R on the same deterministic signal (max |ΔR| across tags at the last
 * sample), and the fraction of white-noise samples above the 95 % critical value 1.44 (expected 0.05,
 * reproduced by Monte Carlo, CHECK-VALUES §3).
 */
import { spawnSync } from "node:child_process";
import { createRandom } from "../services/kit/random.js";
import { createDetector, RFilterBank } from "../services/steady/detector.js";

/** Seeded uniform numbers, so that every run sees the same data. */
const mulberry32 = (seed: number): (() => number) => createRandom(seed).uniform;

const TAGS = Number(process.argv[2] ?? 1000);
const SAMPLES = Number(process.argv[3] ?? 20_000);
const REPEATS = 5;

/** The shared deterministic test signal; the Python peer evaluates the same formula. */
function signal(k: number, t: number): number {
  return Math.sin(0.37 * t + 0.11 * k) + 0.5 * Math.sin(1.7 * t * (1 + 0.01 * k));
}

// Time-major noise block, reused across repetitions so that the timing measures the filters only.
const u = mulberry32(1);
const noise = new Float64Array(TAGS * SAMPLES);
for (let i = 0; i < noise.length; i += 2) {
  const r = Math.sqrt(-2 * Math.log(1 - u()));
  const th = 2 * Math.PI * u();
  noise[i] = r * Math.cos(th);
  if (i + 1 < noise.length) noise[i + 1] = r * Math.sin(th);
}

function runBank(): { seconds: number; fracAbove: number } {
  const bank = new RFilterBank(TAGS);
  let above = 0;
  let counted = 0;
  const t0 = process.hrtime.bigint();
  for (let t = 0; t < SAMPLES; t++) {
    const base = t * TAGS;
    for (let k = 0; k < TAGS; k++) {
      const r = bank.update(k, noise[base + k]!);
      if (r > 1.44) above++;
    }
    if (t >= 100) counted += TAGS;
  }
  const seconds = Number(process.hrtime.bigint() - t0) / 1e9;
  return { seconds, fracAbove: above / counted };
}

let best = Number.POSITIVE_INFINITY;
let frac = 0;
for (let rep = 0; rep < REPEATS; rep++) {
  const { seconds, fracAbove } = runBank();
  if (seconds < best) best = seconds;
  frac = fracAbove;
}
const tsRate = (TAGS * SAMPLES) / best;

// Whole detector (verdicts, Welford window) on batches of 200 tags: what the service will pay.
const DET_TAGS = 200;
const DET_SAMPLES = 5000;
const tagList = Array.from({ length: DET_TAGS }, (_, k) => ({ id: `T${k}`, key: k < 20 }));
const batches = Array.from({ length: DET_SAMPLES }, (_, t) => ({
  time: t * 1000,
  values: tagList.map((tag, k) => ({ tagId: tag.id, value: noise[t * TAGS + (k % TAGS)]!, status: "good" })),
}));
let detBest = Number.POSITIVE_INFINITY;
for (let rep = 0; rep < REPEATS; rep++) {
  const det = createDetector({ steadyDurationS: 60, settleTimeS: 0 }, tagList);
  const t0 = process.hrtime.bigint();
  for (const b of batches) det.observe(b, b.time);
  detBest = Math.min(detBest, Number(process.hrtime.bigint() - t0) / 1e9);
}
const detRate = (DET_TAGS * DET_SAMPLES) / detBest;

// Accuracy on the deterministic signal.
const ACC_TAGS = 50;
const ACC_SAMPLES = 2000;
const accBank = new RFilterBank(ACC_TAGS);
const rTs = new Float64Array(ACC_TAGS);
for (let t = 0; t < ACC_SAMPLES; t++)
  for (let k = 0; k < ACC_TAGS; k++) rTs[k] = accBank.update(k, signal(k, t));

const py = `
import json, sys, time
import numpy as np
from scipy.signal import lfilter
T, S, REP = int(sys.argv[1]), int(sys.argv[2]), int(sys.argv[3])
l1, l2, l3 = 0.2, 0.1, 0.1
rng = np.random.default_rng(1)
x = rng.standard_normal((S, T))          # time-major, like the TypeScript side
def loop(x):
    xf = x[0].copy(); prev = x[0].copy(); nu2 = np.zeros(x.shape[1]); d2 = np.zeros(x.shape[1])
    above = 0
    for t in range(1, x.shape[0]):
        xt = x[t]
        dev = xt - xf
        nu2 = l2 * dev * dev + (1 - l2) * nu2
        dd = xt - prev
        d2 = l3 * dd * dd + (1 - l3) * d2
        xf = l1 * xt + (1 - l1) * xf
        prev = xt
        r = (2 - l1) * nu2 / d2
        if t >= 100: above += int(np.count_nonzero(r > 1.44))
    return r, above / ((x.shape[0] - 100) * x.shape[1])
def filt(x):
    xt = x.T                              # series along axis 1
    zi = (1 - l1) * xt[:, :1]
    xf = lfilter([l1], [1, -(1 - l1)], xt, axis=1, zi=zi)[0]
    dev = xt[:, 1:] - xf[:, :-1]
    nu2 = lfilter([l2], [1, -(1 - l2)], dev * dev, axis=1)
    dd = np.diff(xt, axis=1)
    d2 = lfilter([l3], [1, -(1 - l3)], dd * dd, axis=1)
    return (2 - l1) * nu2 / d2
def best(f, reps):
    b = float("inf")
    for _ in range(reps):
        t0 = time.perf_counter(); out = f(x); b = min(b, time.perf_counter() - t0)
    return b, out
t_loop, (r_loop, frac) = best(loop, REP)
t_filt, r_f = best(filt, REP)
frac_f = float(np.count_nonzero(r_f[:, 99:] > 1.44)) / r_f[:, 99:].size
k = np.arange(50)[:, None]; t = np.arange(2000)[None, :]
sig = np.sin(0.37 * t + 0.11 * k) + 0.5 * np.sin(1.7 * t * (1 + 0.01 * k))
r_sig = filt(sig.T)[:, -1]
print(json.dumps({"loop_s": t_loop, "lfilter_s": t_filt, "frac_loop": frac, "frac_lfilter": frac_f,
                  "r_sig": r_sig.tolist()}))
`;
const out = spawnSync("python3", ["-c", py, String(TAGS), String(SAMPLES), "3"], {
  encoding: "utf8",
  maxBuffer: 1 << 24,
});
if (out.status !== 0) {
  console.error(out.stderr);
  process.exit(1);
}
const peer = JSON.parse(out.stdout) as {
  loop_s: number;
  lfilter_s: number;
  frac_loop: number;
  frac_lfilter: number;
  r_sig: number[];
};
let maxDiff = 0;
for (let k = 0; k < ACC_TAGS; k++) maxDiff = Math.max(maxDiff, Math.abs(rTs[k]! - peer.r_sig[k]!));
const loopRate = (TAGS * SAMPLES) / peer.loop_s;
const filtRate = (TAGS * SAMPLES) / peer.lfilter_s;

const row = (name: string, rate: number, frac: string) =>
  `${name.padEnd(44)} ${(rate / 1e6).toFixed(1).padStart(10)} ${(tsRate / rate).toFixed(2).padStart(12)} ${frac.padStart(14)}`;
console.log(`R-statistic, ${TAGS} tags × ${SAMPLES} samples, best of ${REPEATS} (TS) / 3 (Python), one core`);
console.log(
  `${"implementation".padEnd(44)} ${"M samples/s".padStart(10)} ${"rate ours/peer".padStart(12)} ${"P(R>1.44)".padStart(14)}`,
);
console.log(row("TypeScript RFilterBank (ours)", tsRate, frac.toFixed(4)));
console.log(row("NumPy, Python loop over time, vector over tags", loopRate, peer.frac_loop.toFixed(4)));
console.log(row("SciPy lfilter over whole series", filtRate, peer.frac_lfilter.toFixed(4)));
console.log(
  `TypeScript full detector.observe (${DET_TAGS} tags/batch, 20 key): ${(detRate / 1e6).toFixed(2)} M samples/s`,
);
console.log(
  `max |R_ts − R_scipy| on the shared deterministic signal (${ACC_TAGS} tags): ${maxDiff.toExponential(2)}`,
);
console.log("expected P(R>1.44) on white noise: 0.05 (reproduced by Monte Carlo, CHECK-VALUES §3)");
