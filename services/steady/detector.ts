/**
 * Steady-state detection: the Cao & Rhinehart (1995) R-statistic per tag and a plant-wide verdict.
 *
 * Source: Cao, S. & Rhinehart, R.R. (1995), "An efficient method for on-line identification of steady
 * state", J. Process Control 5(6):363–374. Three first-order filters per tag, O(1) work and O(1) memory
 * per sample:
 *
 *   X_f,i  = λ1·X_i + (1−λ1)·X_f,i−1
 *   ν²_f,i = λ2·(X_i − X_f,i−1)² + (1−λ2)·ν²_f,i−1     (the PREVIOUS filtered value)
 *   δ²_f,i = λ3·(X_i − X_i−1)²  + (1−λ3)·δ²_f,i−1
 *   R_i    = (2−λ1)·ν²_f,i / δ²_f,i
 *
 * Pure: no bus, no clock of its own. Time comes in with each batch (sample time, epoch ms) and as
 * `nowMs` (the caller's clock, only stamped on outputs).
 */
import { chiSquareQuantile } from "../model/distributions.js";
import { SteadyError } from "./errors.js";

/** Filter factors of the three first-order filters (dimensionless, each in (0, 1]). */
export interface RFilterLambdas {
  /** Factor of the mean filter X_f. Default 0.2 (Cao & Rhinehart 1995 recommendation). */
  lambda1: number;
  /** Factor of the filtered squared deviation from the previous mean, ν². Default 0.1. */
  lambda2: number;
  /** Factor of the filtered squared successive difference, δ². Default 0.1. */
  lambda3: number;
}

/** The published recommended filter factors (Cao & Rhinehart 1995). */
export const DEFAULT_LAMBDAS: Readonly<RFilterLambdas> = Object.freeze({
  lambda1: 0.2,
  lambda2: 0.1,
  lambda3: 0.1,
});

/**
 * R-statistic filters for many tags at once, kept as parallel Float64Arrays so that one update is a
 * handful of multiply-adds with no allocation (this is what the benchmark measures).
 *
 * Initialisation: the first sample of a tag sets X_f and the previous value to that sample, and
 * ν² = δ² = 0. The zero start biases R for a while (it decays as (1−λ)^n), so callers should give no
 * verdict during a warm-up of `defaultWarmupSamples(lambdas)` samples; `update` returns NaN for the
 * first sample only.
 */
export class RFilterBank {
  /** Filtered mean X_f per tag. */
  readonly meanF: Float64Array;
  /** Filtered squared deviation from the previous filtered mean, ν²_f, per tag. */
  readonly nu2F: Float64Array;
  /** Filtered squared successive difference δ²_f per tag. */
  readonly delta2F: Float64Array;
  /** Previous raw value X_i−1 per tag. */
  readonly prev: Float64Array;
  /** Samples seen per tag. */
  readonly count: Float64Array;
  private readonly l1: number;
  private readonly l2: number;
  private readonly l3: number;
  private readonly scale: number;

  /** Creates filters for `size` tags with the given factors (validated by the caller or `checkLambdas`). */
  constructor(
    readonly size: number,
    lambdas: RFilterLambdas = DEFAULT_LAMBDAS,
  ) {
    checkLambdas(lambdas);
    this.meanF = new Float64Array(size);
    this.nu2F = new Float64Array(size);
    this.delta2F = new Float64Array(size);
    this.prev = new Float64Array(size);
    this.count = new Float64Array(size);
    this.l1 = lambdas.lambda1;
    this.l2 = lambdas.lambda2;
    this.l3 = lambdas.lambda3;
    this.scale = 2 - lambdas.lambda1;
  }

  /**
   * Feeds sample `x` of tag `i` and returns R (dimensionless); NaN for the tag's first sample.
   * When both variance estimates are zero (a perfectly constant signal) R is 0: there is no
   * variation at all, which is steady; a frozen sensor is ingest's business, not this filter's.
   */
  update(i: number, x: number): number {
    const n = this.count[i]!;
    this.count[i] = n + 1;
    if (n === 0) {
      this.meanF[i] = x;
      this.prev[i] = x;
      this.nu2F[i] = 0;
      this.delta2F[i] = 0;
      return Number.NaN;
    }
    const meanPrev = this.meanF[i]!;
    const dev = x - meanPrev; // uses the PREVIOUS filtered value: Cao & Rhinehart 1995
    const diff = x - this.prev[i]!;
    const nu2 = this.l2 * dev * dev + (1 - this.l2) * this.nu2F[i]!;
    const delta2 = this.l3 * diff * diff + (1 - this.l3) * this.delta2F[i]!;
    this.nu2F[i] = nu2;
    this.delta2F[i] = delta2;
    this.meanF[i] = this.l1 * x + (1 - this.l1) * meanPrev;
    this.prev[i] = x;
    if (delta2 > 0) return (this.scale * nu2) / delta2;
    return nu2 > 0 ? Number.POSITIVE_INFINITY : 0;
  }

  /** Forgets tag `i`'s history: its next sample starts a fresh warm-up. */
  reset(i: number): void {
    this.count[i] = 0;
  }
}

/**
 * Warm-up length used when none is configured: ceil(5 / min λ), i.e. until the zero start of the
 * slowest filter weighs less than (1 − λ)^(5/λ) ≈ e⁻⁵ ≈ 0.7 %. For λ = (0.2, 0.1, 0.1): 50 samples.
 */
export function defaultWarmupSamples(lambdas: RFilterLambdas): number {
  return Math.ceil(5 / Math.min(lambdas.lambda1, lambdas.lambda2, lambdas.lambda3));
}

/** Throws STEADY_OPTIONS_INVALID unless every factor is a finite number in (0, 1]. */
export function checkLambdas(lambdas: RFilterLambdas): void {
  for (const key of ["lambda1", "lambda2", "lambda3"] as const) {
    const v = lambdas[key];
    if (!(Number.isFinite(v) && v > 0 && v <= 1)) {
      throw new SteadyError("STEADY_OPTIONS_INVALID", `${key} must be in (0, 1], got ${v}`);
    }
  }
}

/**
 * The noise-level test's limit on σ̂²/σ² (dimensionless) at `confidence`, for the δ² filter factor
 * `lambda3`: a tag whose high-frequency variance σ̂² = δ²_f/2 exceeds σ² times this is "noisy".
 *
 * Why δ²_f/2: under white noise of variance σ² the successive difference X_i − X_i−1 has variance 2σ², so
 * the δ² filter estimates 2σ² (Cao & Rhinehart 1995, the denominator of R); the R-statistic itself is a
 * ratio of two variance estimates and cannot see a larger white-noise amplitude.
 *
 * Distribution (derived, no source; checked by Monte Carlo in detector.unit.test.ts): with σ = 1,
 * δ²_f = Σ_k w_k·d²_(i−k), w_k = λ(1−λ)^k, a quadratic form in the Gaussian successive differences d,
 * whose covariance Σ is tridiagonal (2 on the diagonal, −1 beside it). An EWMA of independent terms has
 * the effective sample size (2−λ)/λ (its variance is λ/(2−λ) times one term's), which suggests χ² with
 * ν = (2−λ)/λ; but the differences overlap (the squared differences have lag-1 correlation 1/4) and
 * the latest term weighs λ, so that choice gives 0.7 % false alarms at a nominal 0.1 % (λ = 0.1).
 * Instead the quadratic form's first three cumulants, κ_r = 2^(r−1)(r−1)!·tr((WΣ)^r) (standard for
 * Gaussian quadratic forms, from memory), are matched by a + b·χ²_ν — the three-moment approximation
 * (Pearson 1959; used by Imhof 1961, Biometrika 48:419–426; from memory). With r = 1 − λ, in closed form
 * for the stationary filter:
 *   κ1 = 2,  tr((WΣ)²) = λ²(4 + 2r)/(1 − r²),  tr((WΣ)³) = λ³(8 + 6r + 6r²)/(1 − r³),
 *   b = κ3/(4κ2),  ν = 8κ2³/κ3²,  a = κ1 − bν,  limit = (a + b·χ²_ν(confidence)) / 2.
 * For λ3 = 0.1 this gives ν ≈ 6.3 and a 99.9 % limit of 2.84 (0.12 % exceedances in 2·10⁶ samples).
 */
export function noiseRatioLimit(lambda3: number, confidence: number): number {
  if (!(lambda3 > 0 && lambda3 <= 1))
    throw new SteadyError("STEADY_OPTIONS_INVALID", `lambda3 must be in (0, 1], got ${lambda3}`);
  if (!(confidence > 0 && confidence < 1))
    throw new SteadyError("STEADY_OPTIONS_INVALID", `noise confidence must be in (0, 1), got ${confidence}`);
  const r = 1 - lambda3;
  const k1 = 2;
  const k2 = (2 * lambda3 ** 2 * (4 + 2 * r)) / (1 - r * r);
  const k3 = (8 * lambda3 ** 3 * (8 + 6 * r + 6 * r * r)) / (1 - r ** 3);
  const b = k3 / (4 * k2);
  const nu = (8 * k2 ** 3) / (k3 * k3);
  const a = k1 - b * nu;
  return (a + b * chiSquareQuantile(confidence, nu)) / 2;
}

/** Detector options; every field is optional and has the default named in its doc. */
export interface DetectorOptions {
  /** Filter factors. Default (0.2, 0.1, 0.1), Cao & Rhinehart 1995. */
  lambdas?: Partial<RFilterLambdas>;
  /**
   * A tag in the transient state becomes steady when R falls below this. Default 1.44: the 95 %
   * critical value under white noise for λ = (0.2, 0.1, 0.1), reproduced by Monte Carlo (see
   * CHECK-VALUES §3); for λ = (0.1, 0.05, 0.05) use 1.31. Change it with the lambdas.
   */
  steadyThreshold?: number;
  /**
   * A tag in the steady state becomes transient when R rises above this. Default 1.73: the 99 %
   * critical value for λ = (0.2, 0.1, 0.1), reproduced by Monte Carlo; for λ = (0.1, 0.05, 0.05) use 1.49.
   * The gap between the two thresholds is the hysteresis that keeps verdicts from chattering.
   */
  transientThreshold?: number;
  /** Samples per tag with no verdict after its first sample. Default ceil(5 / min λ) (50 for the defaults). */
  warmupSamples?: number;
  /** Seconds all key tags must stay steady before the plant is declared steady. Default 300 s (common practice, no source). */
  steadyDurationS?: number;
  /** Seconds after a command (see `noteCommand`) during which the plant cannot be steady. Default 600 s (common practice, no source). */
  settleTimeS?: number;
  /** Fewest good samples a tag needs in the window to enter a snapshot. Default 2 (a standard deviation needs two). */
  minSnapshotSamples?: number;
  /**
   * Confidence of the noise-level test (see `noiseRatioLimit`): a tag with a declared sigma turns
   * "noisy" when σ̂²/σ² exceeds the limit at this confidence. Default 0.999 (a false alarm in about
   * 1 000 samples of white noise at the declared sigma, before hysteresis).
   */
  noiseConfidence?: number;
  /**
   * A noisy tag is clear again when σ̂²/σ² falls below the limit at this confidence (the hysteresis of
   * the noise test). Default 0.99. Must not exceed `noiseConfidence`.
   */
  noiseClearConfidence?: number;
}

/** Options after defaults are applied. */
export type ResolvedDetectorOptions = Readonly<Required<Omit<DetectorOptions, "lambdas">>> & {
  readonly lambdas: Readonly<RFilterLambdas>;
  /** σ̂²/σ² above which a tag turns noisy (from `noiseConfidence`). */
  readonly noiseRatioHigh: number;
  /** σ̂²/σ² below which a noisy tag is clear again (from `noiseClearConfidence`). */
  readonly noiseRatioLow: number;
};

/** A tag the detector watches. Key tags decide the plant-wide verdict; the others only enter snapshots. */
export interface DetectorTag {
  id: string;
  key: boolean;
  /**
   * Declared measurement standard deviation, in the tag's unit (the site model's `sigma`). Enables the
   * noise-level test; absent or ≤ 0: no noise test for this tag.
   */
  sigma?: number;
}

/** One value in a batch. `status` is ingest's verdict: anything other than "good" is rejected. */
export interface DetectorValue {
  tagId: string;
  value: number;
  status: "good" | (string & {});
}

/** A batch of values sharing one sample time (epoch ms). */
export interface DetectorBatch {
  time: number;
  values: readonly DetectorValue[];
}

/**
 * Per-tag state: "warming-up" (no verdict yet), "steady", "transient" (R above its limit), "noisy" (the
 * high-frequency variance is above the declared sigma's limit, whatever R says), or "rejected" (last
 * status not good).
 */
export type TagState = "warming-up" | "steady" | "transient" | "noisy" | "rejected";

/** What the detector knows about one tag. */
export interface TagVerdict {
  tagId: string;
  key: boolean;
  state: TagState;
  /** Latest R (dimensionless); null before the second sample. */
  r: number | null;
  /** Latest σ̂²/σ² = δ²_f / (2σ²) (dimensionless); null before the second sample or without a declared sigma. */
  noiseRatio: number | null;
  /** Latest status from ingest ("good" or the rejection reason); null before any sample. */
  lastStatus: string | null;
  /** Sample time of the latest value (epoch ms); null before any sample. */
  lastTimeMs: number | null;
}

/**
 * Plant-wide state, in order of precedence:
 * "blocked" (a key tag's latest value was rejected), "warming-up" (a key tag has no verdict yet),
 * "transient" (a key tag is transient or noisy), "settling" (within the settle time after a command),
 * "pending" (all key tags steady, but for less than the steady duration), "steady".
 */
export type PlantState = "blocked" | "warming-up" | "transient" | "settling" | "pending" | "steady";

/**
 * The plant-wide verdict, emitted whenever its state changes, or, within "blocked", the blocking tags,
 * or, within "transient", which key tags are noisy.
 */
export interface PlantVerdict {
  state: PlantState;
  steady: boolean;
  /** Sample time of the batch that produced the verdict (epoch ms). */
  timeMs: number;
  /** The caller's clock when the verdict was made (epoch ms). */
  decidedAtMs: number;
  /** Start of the current candidate steady period (epoch ms), or null when there is none. */
  steadySinceMs: number | null;
  /** Sample time from which the plant may be steady after the last command (epoch ms), or null. */
  settleUntilMs: number | null;
  /** Key tags whose latest value was rejected, with ingest's reason. */
  blockedBy: { tagId: string; status: string }[];
  /** Key tags not (yet) steady, with R and (when the tag declares a sigma) σ̂²/σ². */
  notSteady: { tagId: string; state: TagState; r: number | null; noiseRatio: number | null }[];
}

/** Window statistics of one tag over a steady period (Welford's algorithm, sample standard deviation). */
export interface SnapshotTag {
  tagId: string;
  key: boolean;
  mean: number;
  /** Sample standard deviation (n − 1 in the denominator), in the tag's unit. */
  std: number;
  count: number;
}

/** Means and standard deviations over a confirmed steady window. */
export interface Snapshot {
  /** Sample time of the first batch of the window (epoch ms). */
  startMs: number;
  /** Sample time of the latest batch of the window (epoch ms). */
  endMs: number;
  spanS: number;
  /** The caller's clock when the snapshot was made (epoch ms). */
  createdAtMs: number;
  /** Time of the last command noted (epoch ms), or null. */
  lastCommandMs: number | null;
  tags: SnapshotTag[];
  /** Tags left out of the snapshot and why ("rejected: <status>", "transient", "noisy: …", "warming-up", "too few samples: n"). */
  excluded: { tagId: string; reason: string }[];
}

/** One output of `observe`, in the order it happened. */
export type DetectorOutput =
  | { kind: "verdict"; verdict: PlantVerdict }
  | { kind: "snapshot"; snapshot: Snapshot };

/** A running detector over a fixed tag list. */
export interface Detector {
  /** Feeds one batch; returns verdict changes and, on confirming a steady period, its snapshot. */
  observe(batch: DetectorBatch, nowMs: number): DetectorOutput[];
  /** Notes that a command went to the plant at sample time `timeMs` (epoch ms): starts the settle time. */
  noteCommand(timeMs: number): void;
  /** The latest plant verdict (state "warming-up" before any batch). */
  verdict(): PlantVerdict;
  /** The current window's snapshot while the plant is steady; null otherwise. */
  snapshot(nowMs: number): Snapshot | null;
  /** Per-tag states, in the order the tags were given. */
  tags(): TagVerdict[];
  /** The options in force, defaults applied. */
  readonly options: ResolvedDetectorOptions;
}

const orNull = (x: number): number | null => (Number.isNaN(x) ? null : x);

const STATE_WARM = 0;
const STATE_STEADY = 1;
const STATE_TRANSIENT = 2;

/** Applies defaults and checks ranges; throws STEADY_OPTIONS_INVALID naming the option. */
export function resolveDetectorOptions(options: DetectorOptions = {}): ResolvedDetectorOptions {
  const lambdas: RFilterLambdas = { ...DEFAULT_LAMBDAS, ...options.lambdas };
  checkLambdas(lambdas);
  const resolved = {
    lambdas: Object.freeze(lambdas),
    steadyThreshold: options.steadyThreshold ?? 1.44,
    transientThreshold: options.transientThreshold ?? 1.73,
    warmupSamples: options.warmupSamples ?? defaultWarmupSamples(lambdas),
    steadyDurationS: options.steadyDurationS ?? 300,
    settleTimeS: options.settleTimeS ?? 600,
    minSnapshotSamples: options.minSnapshotSamples ?? 2,
    noiseConfidence: options.noiseConfidence ?? 0.999,
    noiseClearConfidence: options.noiseClearConfidence ?? 0.99,
  };
  const bad = (name: string, v: number, range: string): never => {
    throw new SteadyError("STEADY_OPTIONS_INVALID", `${name} must be ${range}, got ${v}`);
  };
  if (!(resolved.steadyThreshold > 0 && Number.isFinite(resolved.steadyThreshold)))
    bad("steadyThreshold", resolved.steadyThreshold, "a finite number > 0");
  if (
    !(resolved.transientThreshold >= resolved.steadyThreshold && Number.isFinite(resolved.transientThreshold))
  )
    bad(
      "transientThreshold",
      resolved.transientThreshold,
      `finite and ≥ steadyThreshold (${resolved.steadyThreshold})`,
    );
  if (!(Number.isInteger(resolved.warmupSamples) && resolved.warmupSamples >= 2))
    bad("warmupSamples", resolved.warmupSamples, "an integer ≥ 2");
  if (!(resolved.steadyDurationS >= 0 && Number.isFinite(resolved.steadyDurationS)))
    bad("steadyDurationS", resolved.steadyDurationS, "finite and ≥ 0 s");
  if (!(resolved.settleTimeS >= 0 && Number.isFinite(resolved.settleTimeS)))
    bad("settleTimeS", resolved.settleTimeS, "finite and ≥ 0 s");
  if (!(Number.isInteger(resolved.minSnapshotSamples) && resolved.minSnapshotSamples >= 2))
    bad("minSnapshotSamples", resolved.minSnapshotSamples, "an integer ≥ 2");
  if (!(resolved.noiseConfidence > 0 && resolved.noiseConfidence < 1))
    bad("noiseConfidence", resolved.noiseConfidence, "in (0, 1)");
  if (!(resolved.noiseClearConfidence > 0 && resolved.noiseClearConfidence <= resolved.noiseConfidence))
    bad(
      "noiseClearConfidence",
      resolved.noiseClearConfidence,
      `in (0, noiseConfidence = ${resolved.noiseConfidence}]`,
    );
  return Object.freeze({
    ...resolved,
    noiseRatioHigh: noiseRatioLimit(lambdas.lambda3, resolved.noiseConfidence),
    noiseRatioLow: noiseRatioLimit(lambdas.lambda3, resolved.noiseClearConfidence),
  });
}

/**
 * Creates a detector for the given tags. Throws STEADY_TAGS_INVALID when the list has no key tag or
 * repeats an id, STEADY_OPTIONS_INVALID when an option is out of range.
 *
 * Per tag: the R filters of `RFilterBank`; a warm-up of `warmupSamples` samples with no verdict; then
 * hysteresis (transient → steady when R < steadyThreshold, steady → transient when R > transientThreshold;
 * a tag leaves warm-up as steady or transient by the same test against the steady threshold).
 * Tags with a declared sigma also get the noise-level test (`noiseRatioLimit`), with its own
 * hysteresis: a noisy tag is not steady whatever R says, and is left out of the window.
 * A rejected value (status not "good") does not enter the filters or the window; it marks the tag
 * rejected until its next good value.
 *
 * Plant: a candidate steady period starts at the first batch where every key tag is steady, none is
 * rejected and the settle time since the last command has passed; window statistics (Welford) restart
 * there. The period is confirmed, and its snapshot emitted once, when it has lasted `steadyDurationS`
 * of sample time; it ends at the first batch where any of those conditions fails.
 * Values of tags not in the list are ignored.
 */
export function createDetector(options: DetectorOptions, tags: readonly DetectorTag[]): Detector {
  const opts = resolveDetectorOptions(options);
  if (tags.length === 0 || !tags.some((t) => t.key)) {
    throw new SteadyError("STEADY_TAGS_INVALID", "the detector needs at least one key tag");
  }
  const index = new Map<string, number>();
  tags.forEach((t, i) => {
    if (index.has(t.id)) throw new SteadyError("STEADY_TAGS_INVALID", `tag '${t.id}' is listed twice`);
    index.set(t.id, i);
  });
  const n = tags.length;
  const isKey = tags.map((t) => t.key);
  const keyIdx = tags.flatMap((t, i) => (t.key ? [i] : []));
  const bank = new RFilterBank(n, opts.lambdas);
  const state = new Uint8Array(n); // STATE_*
  // Noise test: 1/(2σ²) per tag (0 = no test), the noisy flag, and the latest σ̂²/σ².
  const halfInvVar = new Float64Array(
    tags.map((t) => (t.sigma !== undefined && t.sigma > 0 ? 0.5 / (t.sigma * t.sigma) : 0)),
  );
  const noisy = new Uint8Array(n);
  const noiseLast = new Float64Array(n).fill(Number.NaN);
  const rLast = new Float64Array(n).fill(Number.NaN);
  const lastStatus: (string | null)[] = new Array<string | null>(n).fill(null);
  const lastTime = new Float64Array(n).fill(Number.NaN);
  // Welford accumulators over the current steady window.
  const wCount = new Float64Array(n);
  const wMean = new Float64Array(n);
  const wM2 = new Float64Array(n);

  // Counters over key tags, kept incrementally so a batch costs O(its size), not O(key tags).
  let keyRejected = 0;
  let keyWarm = keyIdx.length; // includes key tags with no sample yet
  let keyTransient = 0;
  let keyNoisy = 0;
  let blockVersion = 0;
  // A key tag turning noisy (or clear) while the plant is already transient changes what the verdict
  // says without changing its state: it is announced like a change of blocking tags.
  let noisyVersion = 0;
  let currentNoisyVersion = 0;

  let lastCommandMs: number | null = null;
  let periodStartMs: number | null = null;
  let periodEndMs = 0;
  let confirmed = false;
  let current: PlantVerdict = makeVerdict("warming-up", Number.NaN, Number.NaN);
  let currentBlockVersion = 0;

  const { steadyThreshold, transientThreshold, warmupSamples, noiseRatioHigh, noiseRatioLow } = opts;
  const steadyMs = opts.steadyDurationS * 1000;
  const settleMs = opts.settleTimeS * 1000;

  function setState(i: number, next: number): void {
    const prev = state[i]!;
    if (prev === next) return;
    state[i] = next;
    if (!isKey[i]) return;
    if (prev === STATE_WARM) keyWarm--;
    else if (prev === STATE_TRANSIENT) keyTransient--;
    if (next === STATE_WARM) keyWarm++;
    else if (next === STATE_TRANSIENT) keyTransient++;
  }

  function setRejected(i: number, status: string): void {
    const wasRejected = lastStatus[i] !== null && lastStatus[i] !== "good";
    const nowRejected = status !== "good";
    lastStatus[i] = status;
    if (isKey[i] && wasRejected !== nowRejected) {
      keyRejected += nowRejected ? 1 : -1;
      blockVersion++;
    } else if (isKey[i] && nowRejected) {
      blockVersion++; // a different reason still changes what the verdict says
    }
  }

  function setNoisy(i: number, next: number): void {
    if (noisy[i] === next) return;
    noisy[i] = next;
    if (isKey[i]) {
      keyNoisy += next === 1 ? 1 : -1;
      noisyVersion++;
    }
  }

  function tagState(i: number): TagState {
    if (lastStatus[i] !== null && lastStatus[i] !== "good") return "rejected";
    const s = state[i]!;
    if (s === STATE_WARM) return "warming-up";
    if (noisy[i] === 1) return "noisy";
    return s === STATE_STEADY ? "steady" : "transient";
  }

  function makeVerdict(s: PlantState, timeMs: number, nowMs: number): PlantVerdict {
    const blockedBy: PlantVerdict["blockedBy"] = [];
    const notSteady: PlantVerdict["notSteady"] = [];
    for (const i of keyIdx) {
      const ts = tagState(i);
      const r = rLast[i]!;
      if (ts === "rejected") blockedBy.push({ tagId: tags[i]!.id, status: lastStatus[i]! });
      else if (ts !== "steady")
        notSteady.push({ tagId: tags[i]!.id, state: ts, r: orNull(r), noiseRatio: orNull(noiseLast[i]!) });
    }
    return {
      state: s,
      steady: s === "steady",
      timeMs,
      decidedAtMs: nowMs,
      steadySinceMs: periodStartMs,
      settleUntilMs: lastCommandMs === null ? null : lastCommandMs + settleMs,
      blockedBy,
      notSteady,
    };
  }

  function buildSnapshot(nowMs: number): Snapshot {
    const out: SnapshotTag[] = [];
    const excluded: Snapshot["excluded"] = [];
    for (let i = 0; i < n; i++) {
      const id = tags[i]!.id;
      const ts = tagState(i);
      const count = wCount[i]!;
      if (ts === "rejected") excluded.push({ tagId: id, reason: `rejected: ${lastStatus[i]}` });
      else if (ts === "noisy")
        excluded.push({
          tagId: id,
          reason: `noisy: σ̂²/σ² = ${noiseLast[i]!.toPrecision(3)} above ${noiseRatioHigh.toPrecision(3)}`,
        });
      else if (ts !== "steady") excluded.push({ tagId: id, reason: ts });
      else if (count < opts.minSnapshotSamples)
        excluded.push({ tagId: id, reason: `too few samples: ${count}` });
      else {
        out.push({
          tagId: id,
          key: isKey[i]!,
          mean: wMean[i]!,
          std: Math.sqrt(wM2[i]! / (count - 1)),
          count,
        });
      }
    }
    const startMs = periodStartMs ?? periodEndMs;
    return {
      startMs,
      endMs: periodEndMs,
      spanS: (periodEndMs - startMs) / 1000,
      createdAtMs: nowMs,
      lastCommandMs,
      tags: out,
      excluded,
    };
  }

  function observe(batch: DetectorBatch, nowMs: number): DetectorOutput[] {
    const t = batch.time;
    const values = batch.values;
    const accepted: number[] = [];
    for (let k = 0; k < values.length; k++) {
      const v = values[k]!;
      const i = index.get(v.tagId);
      if (i === undefined) continue;
      lastTime[i] = t;
      if (v.status !== "good" || !Number.isFinite(v.value)) {
        setRejected(i, v.status === "good" ? "not-a-number" : v.status);
        continue;
      }
      setRejected(i, "good");
      const r = bank.update(i, v.value);
      rLast[i] = r;
      const hiv = halfInvVar[i]!;
      const noise = hiv > 0 && bank.count[i]! > 1 ? bank.delta2F[i]! * hiv : Number.NaN;
      noiseLast[i] = noise;
      if (bank.count[i]! < warmupSamples) continue;
      if (hiv > 0) {
        if (noisy[i] === 0) {
          if (noise > noiseRatioHigh) setNoisy(i, 1);
        } else if (noise < noiseRatioLow) setNoisy(i, 0);
      }
      const s = state[i]!;
      if (s === STATE_STEADY) {
        if (r > transientThreshold) setState(i, STATE_TRANSIENT);
      } else if (r < steadyThreshold) setState(i, STATE_STEADY);
      else if (s === STATE_WARM) setState(i, STATE_TRANSIENT);
      accepted.push(i, v.value);
    }

    const settled = lastCommandMs === null || t - lastCommandMs >= settleMs;
    let next: PlantState;
    if (keyRejected > 0) next = "blocked";
    else if (keyWarm > 0) next = "warming-up";
    else if (keyTransient > 0 || keyNoisy > 0) next = "transient";
    else if (!settled) next = "settling";
    else next = "pending";

    if (next === "pending") {
      if (periodStartMs === null) {
        periodStartMs = t;
        confirmed = false;
        wCount.fill(0);
        wMean.fill(0);
        wM2.fill(0);
      }
      periodEndMs = t;
      for (let k = 0; k < accepted.length; k += 2) {
        const i = accepted[k]!;
        const x = accepted[k + 1]!;
        if (state[i] !== STATE_STEADY || noisy[i] === 1) continue;
        const c = wCount[i]! + 1;
        const d = x - wMean[i]!;
        const m = wMean[i]! + d / c;
        wCount[i] = c;
        wMean[i] = m;
        wM2[i] = wM2[i]! + d * (x - m);
      }
      if (t - periodStartMs >= steadyMs) next = "steady";
    } else {
      periodStartMs = null;
      confirmed = false;
    }

    const outputs: DetectorOutput[] = [];
    const blockedChanged = next === "blocked" && blockVersion !== currentBlockVersion;
    const noisyChanged = next === "transient" && noisyVersion !== currentNoisyVersion;
    if (next !== current.state || blockedChanged || noisyChanged) {
      current = makeVerdict(next, t, nowMs);
      currentBlockVersion = blockVersion;
      currentNoisyVersion = noisyVersion;
      outputs.push({ kind: "verdict", verdict: current });
    }
    if (next === "steady" && !confirmed) {
      confirmed = true;
      outputs.push({ kind: "snapshot", snapshot: buildSnapshot(nowMs) });
    }
    return outputs;
  }

  return {
    options: opts,
    observe,
    noteCommand(timeMs: number): void {
      lastCommandMs = lastCommandMs === null ? timeMs : Math.max(lastCommandMs, timeMs);
    },
    verdict: () => current,
    snapshot: (nowMs: number) => (current.state === "steady" ? buildSnapshot(nowMs) : null),
    tags: () =>
      tags.map((tag, i) => ({
        tagId: tag.id,
        key: tag.key,
        state: tagState(i),
        r: orNull(rLast[i]!),
        noiseRatio: orNull(noiseLast[i]!),
        lastStatus: lastStatus[i]!,
        lastTimeMs: Number.isNaN(lastTime[i]!) ? null : lastTime[i]!,
      })),
  };
}
