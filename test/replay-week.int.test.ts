/**
 * A simulated week, twice: live — plant-sim on a real MQTT broker, accelerated, through the ingest and
 * steady services — and replayed — the same week written to a historian CSV by plant-sim's own
 * writer (services/plant-sim/csv-out.ts), read back by ingest's replayCsv through the same pipeline
 * and steady's own detector, offline. Both must give the same snapshots: the same count, windows,
 * sample counts, and window means and standard deviations.
 *
 * Why they can be identical, and what the test config does to make them so:
 * - the simulator draws its random numbers per hold and per batch, so the values depend on how
 *   simulated time is cut into steps; the writer steps one period at a time, and the live plant-sim
 *   runs on a clock quantised to the period (a ScaledClock read down to whole periods), so every tick
 *   ends on a period boundary and both draw the same numbers;
 * - live ingest judges staleness against its clock while the replay judges it against the data's time.
 *   At 50 000× one wall millisecond is 50 s of plant time, so the site's 60 s stale limit cannot be
 *   judged live; the test site gives every tag a day (the week has no silent tag, so neither run marks
 *   one stale);
 * - no commands go to the plant, and steady does not follow plant-sim's readbacks (a watchdog "shed"
 *   readback would start a settle time in the live run only).
 * - one batch per 60 s (a coarser period than the demo's 10 s keeps the week at 10 080 batches), with
 *   the Cao & Rhinehart (1995) filter factors λ = (0.2, 0.1, 0.1) and R* = 1.44 instead of the site's
 *   slower (0.1, 0.05, 0.05) and 1.31: at one sample a minute the cooling water's daily swing is a ramp
 *   of about 0.17 σ per sample, which the site's policy rightly calls transient all week (no cycle at
 *   all), while the faster filters find the calmer hours.
 * Everything else is the demo site as it stands (600 s steady duration, 3600 s settle time, limits).
 */
import { mkdtempSync, readFileSync, rmSync, statSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { Writable } from "node:stream";
import { afterAll, describe, expect, it } from "vitest";
import { parse, stringify } from "yaml";
import { type IngestConfig, ingestConfigSchema } from "../services/ingest/config.js";
import { start as startIngest } from "../services/ingest/index.js";
import { replayCsv } from "../services/ingest/replay.js";
import type { Bus } from "../services/kit/bus.js";
import { type Clock, ScaledClock } from "../services/kit/clock.js";
import { loadConfig } from "../services/kit/config.js";
import { connectBus } from "../services/kit/connect.js";
import type { Event } from "../services/kit/envelope.js";
import { silentLogger } from "../services/kit/log.js";
import type { Service } from "../services/kit/service.js";
import { subject } from "../services/kit/subjects.js";
import { loadSiteModel, loadSiteModelFile, type SiteModel } from "../services/model/index.js";
import {
  type PlantSimConfig,
  type PlantSimOptions,
  plantSimConfigSchema,
  simulatorOptions,
} from "../services/plant-sim/config.js";
import { writeSimulatedCsv } from "../services/plant-sim/csv-out.js";
import { type PlantSimService, start as startPlantSim } from "../services/plant-sim/index.js";
import { type SteadyConfig, steadyConfigSchema } from "../services/steady/config.js";
import type { Snapshot } from "../services/steady/detector.js";
import { detectorBatches, siteDetector, start as startSteady } from "../services/steady/index.js";
import { mqttUrl, type OwnBroker, startMosquitto, testSite, waitFor } from "./support/brokers.js";

const ROOT = new URL("../", import.meta.url).pathname;
const WEEK_S = 7 * 86_400;
const PERIOD_S = 60;
const SEED = 11;
/**
 * Plant seconds per wall second in the live run: a week in about 50 s. At 50,000 (12 s) a tag's stale
 * limit of 600 s was 12 ms of wall time, and under CI's parallel load the live run lost 12–25 of its
 * 28 snapshots (three failures at stop 10), most likely to values judged stale when the services fell
 * behind; 12,500 gives them 4× more time.
 */
const SCALE = 12_500;
const T0 = Date.UTC(2026, 0, 5, 0, 0, 0);

function weekSiteModel(): SiteModel {
  const doc = parse(readFileSync(`${ROOT}infra/sites/kestrel-r1/site.yaml`, "utf8")) as {
    steadyState: Record<string, number>;
    tags: { staleAfterS?: number }[];
  };
  for (const t of doc.tags) t.staleAfterS = 86_400;
  doc.steadyState = { ...doc.steadyState, lambda1: 0.2, lambda2: 0.1, lambda3: 0.1, rCritical: 1.44 };
  return loadSiteModel(stringify(doc), "kestrel-r1-week-test.yaml");
}

/** A snapshot reduced to what both runs must share, times relative to the run's simulated time 0. */
interface Shared {
  startS: number;
  endS: number;
  tags: [string, number, number, number][];
  excluded: string[];
}

const shareLive = (s: Event<"rto.snapshot.v1">["data"], epochMs: number): Shared => ({
  startS: (s.startMs - epochMs) / 1000,
  endS: (s.endMs - epochMs) / 1000,
  tags: s.tags.map((t) => [t.tag, t.mean, t.std, t.count]),
  excluded: s.excluded.map((e) => `${e.tag}: ${e.reason}`),
});
const shareReplay = (s: Snapshot, epochMs: number): Shared => ({
  startS: (s.startMs - epochMs) / 1000,
  endS: (s.endMs - epochMs) / 1000,
  tags: s.tags.map((t) => [t.tagId, t.mean, t.std, t.count]),
  excluded: s.excluded.map((e) => `${e.tagId}: ${e.reason}`),
});

describe("a simulated week: live on Mosquitto and replayed from CSV", () => {
  const dir = mkdtempSync(join(tmpdir(), "steadfast-week-"));
  const services: Service[] = [];
  let watcher: Bus | undefined;
  let own: OwnBroker | undefined;

  afterAll(async () => {
    for (const s of services.reverse()) await s.stop().catch(() => undefined);
    await watcher?.close();
    await own?.stop();
    rmSync(dir, { recursive: true, force: true });
  });

  it("gives the same snapshots, and the replay draws its progress bar", async () => {
    const site = testSite("week");
    // The live week is a backlog of 10,080 batches for subscribers that may lag; unless MQTT_URL names
    // a broker, it runs on a Mosquitto of its own with an unlimited queue (DEVELOPERS.md), away from
    // the other tests' traffic.
    own = process.env.MQTT_URL ? undefined : await startMosquitto().catch(() => undefined);
    const url = own?.url ?? (await mqttUrl());
    const bus = { transport: "mqtt" as const, url };
    const base = { site, bus, http: { enabled: false }, logLevel: "silent" as const, heartbeatS: 3600 };
    const model = weekSiteModel();
    const demo = (
      parse(readFileSync(`${ROOT}services/plant-sim/kestrel-r1.config.yaml`, "utf8")) as {
        plantSim: PlantSimOptions;
      }
    ).plantSim;
    const plantConfig = loadConfig<PlantSimConfig>(plantSimConfigSchema, {
      ...base,
      plantSim: {
        ...demo,
        plantModel: `${ROOT}${demo.plantModel}`,
        timeScale: 1,
        periodS: PERIOD_S,
        tickMs: 5,
        statusPeriodS: 1e7,
        seed: SEED,
        gateway: { ...demo.gateway, watchdogS: 1e9 },
      },
    });

    // given the week written to CSV by plant-sim's writer, with the options plant-sim itself uses
    const plantModel = await loadSiteModelFile(plantConfig.plantSim.plantModel);
    const file = join(dir, "week.csv");
    let t = performance.now();
    const written = writeSimulatedCsv({
      model: plantModel,
      simulator: simulatorOptions(plantConfig.plantSim),
      durationS: WEEK_S,
      startMs: T0,
      file,
    });
    const writeS = (performance.now() - t) / 1000;
    expect(written.rows).toBe(WEEK_S / PERIOD_S);

    // when it is replayed offline through ingest's pipeline and steady's detector, drawing the bar
    // on a terminal-like stream
    const { detector } = siteDetector(model, { minSnapshotSamples: 2, noiseTest: true });
    const replayed: Shared[] = [];
    const drawn: string[] = [];
    const tty = Object.assign(
      new Writable({
        write(chunk, _enc, done) {
          drawn.push(String(chunk));
          done();
        },
      }),
      { isTTY: true, columns: 120 },
    );
    t = performance.now();
    const result = await replayCsv({
      model,
      file,
      progressStream: tty,
      onBatch: (data) => {
        for (const b of detectorBatches(data.values)) {
          for (const out of detector.observe(b, b.time)) {
            if (out.kind === "snapshot") replayed.push(shareReplay(out.snapshot, T0));
          }
        }
      },
    });
    const replayS = (performance.now() - t) / 1000;
    expect(result.batches).toBe(WEEK_S / PERIOD_S);
    expect(result.counts.stale).toBe(0);
    // then the bar was drawn on the terminal and ended full, with the batch count
    const screen = drawn.join("");
    expect(screen).toMatch(/replay \|/);
    expect(screen).toMatch(new RegExp(`100% \\| ${WEEK_S / PERIOD_S} batches`));

    // when the same week runs live: plant-sim, ingest and steady on one clock quantised to the period
    const scaled = new ScaledClock(SCALE, T0);
    const clock: Clock = {
      now: () => T0 + Math.floor((scaled.now() - T0) / (PERIOD_S * 1000)) * PERIOD_S * 1000,
    };
    watcher = await connectBus({ site, bus }, { name: `${site}-watch` });
    const live: Event<"rto.snapshot.v1">[] = [];
    let lastMeasuredMs = 0;
    await watcher.subscribe(subject(site, "snapshot"), (m) => {
      live.push(JSON.parse(Buffer.from(m.payload).toString("utf8")) as Event<"rto.snapshot.v1">);
    });
    await watcher.subscribe(subject(site, "measurements"), (m) => {
      const e = JSON.parse(Buffer.from(m.payload).toString("utf8")) as Event<"rto.measurements.v1">;
      lastMeasuredMs = Math.max(lastMeasuredMs, e.data.values[0].time);
    });
    const deps = { clock, log: silentLogger(), model };
    services.push(
      await startSteady(
        loadConfig<SteadyConfig>(steadyConfigSchema, {
          ...base,
          steady: { siteModelFile: "(given)", followCommands: false },
        }),
        deps,
      ),
    );
    services.push(
      await startIngest(
        loadConfig<IngestConfig>(ingestConfigSchema, {
          ...base,
          ingest: { siteModelFile: "(given)", tagHealthIntervalS: 5 },
        }),
        deps,
      ),
    );
    t = performance.now();
    const plant: PlantSimService = await startPlantSim(plantConfig, { clock, log: silentLogger() });
    services.push(plant);
    const epochMs = plant.simNowMs() - plant.simulator.plant.timeS * 1000;
    const weekEndMs = epochMs + WEEK_S * 1000;
    expect(await waitFor(() => lastMeasuredMs > weekEndMs, 120_000, 20)).toBe(true);
    const liveS = (performance.now() - t) / 1000;
    await plant.stop();
    // steady trails ingest by a message or two
    await new Promise((r) => setTimeout(r, 500));

    // then both runs give the same snapshots: same windows, counts, means and standard deviations.
    // The same batches with the same verdicts reach the same detector, so equality is exact.
    const liveWeek = live.filter((e) => e.data.endMs <= weekEndMs).map((e) => shareLive(e.data, epochMs));
    console.log(
      `week: ${written.rows} batches, CSV ${(statSync(file).size / 1e6).toFixed(1)} MB written in ${writeS.toFixed(1)} s, ` +
        `replayed in ${replayS.toFixed(1)} s, live in ${liveS.toFixed(1)} s wall; ${replayed.length} snapshots each way`,
    );
    expect(replayed.length).toBeGreaterThan(5);
    expect(liveWeek.length).toBe(replayed.length);
    expect(liveWeek).toEqual(replayed);
  }, 180_000);
});
