/**
 * The steady service: wiring only. Measurements (with ingest's per-value status) feed the pure
 * detector over the site model's tags; a verdict change goes out as rto.steady.v1; a confirmed steady
 * period opens an RTO cycle (rto.cycle.v1 "opened", stage steady) and publishes its rto.snapshot.v1,
 * both carrying the new cycleid. Commands (rto.<site>.command) and the control side's readbacks
 * (rto.<site>.readback) start the settle time.
 *
 * One steady instance per site: the detector keeps state, so it takes no load-sharing group.
 */
import type { Event } from "../kit/envelope.js";
import type { Measurements, Snapshot as SnapshotData, SteadyVerdict } from "../kit/generated/messages.js";
import { newId } from "../kit/ids.js";
import { type Deps, type Service, startRuntime } from "../kit/service.js";
import { loadSiteModelFile, type SiteModel, type SteadyStatePolicy } from "../model/index.js";
import type { SteadyConfig, SteadyOptions } from "./config.js";
import {
  createDetector,
  type Detector,
  type DetectorBatch,
  type DetectorOptions,
  type DetectorValue,
  type PlantVerdict,
  type Snapshot,
} from "./detector.js";

/** What steady may be given besides the kit's dependencies. */
export interface SteadyDeps extends Deps {
  /** An already loaded site model (tests, the demo); default: loaded from `steady.siteModelFile`. */
  model?: SiteModel;
}

/** The running steady service. */
export interface SteadyService extends Service {
  /** Starts the settle time as if a command had gone to the plant at sample time `timeMs` (epoch ms). */
  noteCommand(timeMs: number): void;
  /** The latest plant verdict. */
  verdict(): PlantVerdict;
}

/** The published 95 % and 99 % R critical values for λ = (0.2, 0.1, 0.1) (CHECK-VALUES §3, reproduced). */
const R95 = 1.44;
const R99 = 1.73;

/**
 * Detector options from the site model's steadyState policy and steady's own options.
 * `keyTagFraction` below 1 is not implemented by the detector (every key tag must be steady): the
 * caller is told through `warnings`.
 */
export function detectorOptions(
  policy: Readonly<SteadyStatePolicy>,
  own: Pick<
    SteadyOptions,
    "transientThreshold" | "warmupSamples" | "minSnapshotSamples" | "noiseConfidence" | "noiseClearConfidence"
  >,
): { options: DetectorOptions; warnings: string[] } {
  const warnings: string[] = [];
  const steadyThreshold = policy.rCritical;
  const transientThreshold =
    own.transientThreshold ?? (steadyThreshold === R95 ? R99 : (steadyThreshold * R99) / R95);
  const options: DetectorOptions = {
    lambdas: { lambda1: policy.lambda1, lambda2: policy.lambda2, lambda3: policy.lambda3 },
    steadyThreshold,
    transientThreshold: Math.max(transientThreshold, steadyThreshold),
    steadyDurationS: policy.minSteadyS,
    settleTimeS: policy.settleTimeS,
    minSnapshotSamples: own.minSnapshotSamples,
  };
  if (own.noiseConfidence !== undefined) options.noiseConfidence = own.noiseConfidence;
  if (own.noiseClearConfidence !== undefined) options.noiseClearConfidence = own.noiseClearConfidence;
  if (own.warmupSamples !== undefined) options.warmupSamples = own.warmupSamples;
  if (policy.keyTagFraction < 1) {
    warnings.push(
      `steadyState.keyTagFraction ${policy.keyTagFraction} is not implemented: every key tag must be steady`,
    );
  }
  return { options, warnings };
}

/**
 * Splits a measurement batch into detector batches, one per distinct sample time, in time order.
 * A value without a number (null) reaches the detector as NaN with its status, so it is rejected there.
 */
export function detectorBatches(values: Measurements["values"]): DetectorBatch[] {
  // Most batches carry one sample time: skip the grouping then.
  const t0 = values[0].time;
  let oneTime = true;
  for (let k = 1; k < values.length && oneTime; k++) oneTime = values[k]!.time === t0;
  if (oneTime) {
    const list: DetectorValue[] = new Array(values.length);
    for (let k = 0; k < values.length; k++) {
      const v = values[k]!;
      list[k] = { tagId: v.tag, value: v.value ?? Number.NaN, status: v.status ?? "good" };
    }
    return [{ time: t0, values: list }];
  }
  const byTime = new Map<number, DetectorValue[]>();
  for (const v of values) {
    const list = byTime.get(v.time) ?? [];
    list.push({ tagId: v.tag, value: v.value ?? Number.NaN, status: v.status ?? "good" });
    byTime.set(v.time, list);
  }
  return [...byTime.keys()].sort((a, b) => a - b).map((time) => ({ time, values: byTime.get(time) ?? [] }));
}

const ms = (x: number | null): number | null =>
  x === null || !Number.isFinite(x) ? null : Math.max(0, Math.round(x));

/** The rto.steady.v1 data of a detector verdict. */
export function verdictData(v: PlantVerdict): SteadyVerdict {
  const out: SteadyVerdict = {
    state: v.state,
    steady: v.steady,
    timeMs: ms(v.timeMs) ?? 0,
    steadySinceMs: ms(v.steadySinceMs),
    settleUntilMs: ms(v.settleUntilMs),
    blockedBy: v.blockedBy.slice(0, 1000).map((b) => ({ tag: b.tagId, status: b.status.slice(0, 40) })),
    // R is +∞ when a tag moved with no successive-difference variance yet: no finite number to report.
    notSteady: v.notSteady.slice(0, 1000).map((t) => ({
      tag: t.tagId,
      state: t.state,
      r: t.r !== null && Number.isFinite(t.r) ? t.r : null,
      noiseRatio: t.noiseRatio !== null && Number.isFinite(t.noiseRatio) ? t.noiseRatio : null,
    })),
  };
  const decided = ms(v.decidedAtMs);
  if (decided !== null) out.decidedAtMs = decided;
  return out;
}

/**
 * The rto.snapshot.v1 data of a detector snapshot: statistics in the tag's unit, and converted to the
 * unit of the model symbol the tag measures (mean through the affine conversion, standard deviation
 * through its scale only — an offset does not change a spread).
 */
export function snapshotData(s: Snapshot, model: SiteModel): SnapshotData {
  return {
    startMs: ms(s.startMs) ?? 0,
    endMs: ms(s.endMs) ?? 0,
    spanS: Math.max(0, s.spanS),
    createdAtMs: ms(s.createdAtMs) ?? 0,
    lastCommandMs: ms(s.lastCommandMs),
    tags: s.tags.map((t) => {
      const tag = model.tagById.get(t.tagId);
      if (tag === undefined) throw new Error(`snapshot tag ${t.tagId} is not in the site model`);
      const { scale, offset } = tag.toModel;
      return {
        tag: t.tagId,
        variable: tag.variable,
        key: t.key,
        count: t.count,
        unit: tag.unit,
        mean: t.mean,
        std: t.std,
        sigma: tag.sigma,
        modelUnit: model.layout.units.get(tag.variable) ?? tag.unit,
        modelMean: scale * t.mean + offset,
        modelStd: Math.abs(scale) * t.std,
      };
    }),
    excluded: s.excluded.map((e) => ({ tag: e.tagId, reason: e.reason.slice(0, 200) })),
  };
}

/**
 * The detector steady runs for a site model and steady's options: key tags, declared sigmas (noise
 * test, unless `noiseTest` is false) and the steadyState policy. Offline tools (a CSV replay) use it to
 * judge data exactly as the service does. Throws STEADY_TAGS_INVALID when the model has no key tag.
 */
export function siteDetector(
  model: SiteModel,
  own: Pick<
    SteadyOptions,
    | "transientThreshold"
    | "warmupSamples"
    | "minSnapshotSamples"
    | "noiseConfidence"
    | "noiseClearConfidence"
    | "noiseTest"
  >,
): { detector: Detector; warnings: string[] } {
  const { options, warnings } = detectorOptions(model.steadyState, own);
  const detector = createDetector(
    options,
    model.tags.map((t) => ({ id: t.id, key: t.key, ...(own.noiseTest ? { sigma: t.sigma } : {}) })),
  );
  return { detector, warnings };
}

/** Starts steady. Throws on a bad site model (no key tag: STEADY_TAGS_INVALID) or when the broker cannot be reached. */
export async function start(config: Readonly<SteadyConfig>, deps: SteadyDeps = {}): Promise<SteadyService> {
  const o = config.steady;
  const model = deps.model ?? (await loadSiteModelFile(o.siteModelFile));
  const { detector, warnings } = siteDetector(model, o);
  const rt = await startRuntime("steady", config, deps);
  for (const w of warnings) rt.log.warn(w);

  rt.track(
    await rt.events.on(rt.events.subject("measurements"), ["rto.measurements.v1"], async (event) => {
      for (const batch of detectorBatches(event.data.values)) {
        const outputs = detector.observe(batch, rt.clock.now());
        if (outputs.length === 0) continue;
        // A snapshot opens a cycle: its id goes on the steady verdict, the cycle event and the snapshot.
        const opens = outputs.some((x) => x.kind === "snapshot");
        const cycleid = opens ? newId(rt.clock.now()) : undefined;
        for (const out of outputs) {
          if (out.kind === "verdict") {
            await rt.events.publish("steady", "rto.steady.v1", verdictData(out.verdict), {
              causedBy: event,
              ...(cycleid && out.verdict.steady ? { cycleid } : {}),
            });
          } else {
            await openCycle(out.snapshot, event, cycleid ?? newId(rt.clock.now()));
          }
        }
      }
    }),
  );

  async function openCycle(
    snapshot: Snapshot,
    causedBy: Event<"rto.measurements.v1">,
    cycleid: string,
  ): Promise<void> {
    const snapshotId = newId(rt.clock.now());
    await rt.events.publish(
      "cycle",
      "rto.cycle.v1",
      { status: "opened", stage: "steady", outcome: "steady", eventIds: [snapshotId] },
      { cycleid, causedBy },
    );
    await rt.events.publish("snapshot", "rto.snapshot.v1", snapshotData(snapshot, model), {
      id: snapshotId,
      cycleid,
      causedBy,
    });
    rt.log.info({ cycleid, tags: snapshot.tags.length, excluded: snapshot.excluded.length }, "cycle opened");
  }

  if (o.followCommands) {
    // The command's issue time starts the settle time; an accepted readback (or the control side
    // shedding or recovering, which moves setpoints too) restarts it from when the control side acted.
    // noteCommand keeps the latest of these, so the settle time is never shortened.
    const registry = rt.emitter.registry;
    if (registry.has("rto.command.v1")) {
      rt.track(
        await rt.events.on(rt.events.subject("command"), ["rto.command.v1"], (event) => {
          detector.noteCommand(event.data.issuedAt);
        }),
      );
    }
    if (registry.has("rto.readback.v1")) {
      rt.track(
        await rt.events.on(rt.events.subject("readback"), ["rto.readback.v1"], (event) => {
          const d = event.data;
          const moved =
            (d.trigger === "command" && "accepted" in d && d.accepted === true) ||
            d.trigger === "shed" ||
            d.trigger === "recovered";
          if (moved) detector.noteCommand(d.time);
        }),
      );
    }
  }

  const handle = rt.ready();
  return {
    ...handle,
    noteCommand: (timeMs: number) => detector.noteCommand(timeMs),
    verdict: () => detector.verdict(),
  };
}
