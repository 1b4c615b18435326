/**
 * plant-sim, wiring only: runs the simulated plant (sim.ts) against the service clock scaled by
 * `timeScale`, publishes its measurement batches on rto.<site>.raw.<source> (and optionally as
 * Sparkplug B), passes every command on rto.<site>.command through the control gateway
 * (services/kit/control-gateway.ts) and answers each on rto.<site>.readback, feeds validate's
 * heartbeats to the gateway's watchdog and holds the setpoints when it sheds, and takes demo faults
 * from rto.<site>.plant-control.
 *
 * Two times: the service clock (`deps.clock`, the wall clock by default) runs the gateway (command
 * expiry, watchdog) and the envelopes; simulated time runs `timeScale` times faster and stamps the
 * batches (`timestamps: simulated`). Give every service one scaled clock and timeScale 1 to run the
 * whole loop accelerated on one time base.
 */
import { type ControlGateway, createControlGateway, type TagLimit } from "../kit/control-gateway.js";
import type { Readback, ReadbackSetpoint, SetpointCommand } from "../kit/generated/messages.js";
import { type Deps, type Service, startRuntime } from "../kit/service.js";
import { subject } from "../kit/subjects.js";
import { loadSiteModelFile } from "../model/index.js";
import { type PlantSimConfig, simulatorOptions } from "./config.js";
import type { FaultSpec } from "./faults.js";
import { createSimulator, type SimBatch, type Simulator } from "./sim.js";
import { type SparkplugOut, startSparkplugOut } from "./sparkplug-out.js";

/** The started service, with handles for the demo and tests. */
export interface PlantSimService extends Service {
  readonly simulator: Simulator;
  readonly gateway: ControlGateway;
  /** Simulated time now, epoch ms (start time + simulated seconds). */
  simNowMs(): number;
  /** The Sparkplug output, when enabled. */
  readonly sparkplug: SparkplugOut | undefined;
}

/** Starts plant-sim: loads the plant model, connects, and runs the simulation until stop(). */
export async function start(config: Readonly<PlantSimConfig>, deps: Deps = {}): Promise<PlantSimService> {
  const o = config.plantSim;
  // Model and simulator first: a config that does not fit the plant stops start-up before connecting.
  const model = await loadSiteModelFile(o.plantModel);
  const sim = createSimulator(model, simulatorOptions(o));
  const plant = sim.plant;
  const limits: Record<string, TagLimit> = {};
  for (const d of model.decisions) {
    const own = o.gateway.limits?.[d.setpointTag];
    const limit: TagLimit = { min: own?.min ?? d.min, max: own?.max ?? d.max, unit: d.unit };
    const rate = own?.maxRatePerS ?? d.rampPerS;
    if (rate !== undefined) limit.maxRatePerS = rate;
    // Senders may name the tag itself or its `.SP` member.
    limits[d.setpointTag] = limit;
    limits[`${d.setpointTag}.SP`] = limit;
  }
  const gateway = createControlGateway({
    site: config.site,
    unit: o.unit,
    keys: o.gateway.keys,
    limits,
    watchdogS: o.gateway.watchdogS,
    ...(o.gateway.maxClockSkewS !== undefined ? { maxClockSkewS: o.gateway.maxClockSkewS } : {}),
    ...(o.gateway.maxAgeS !== undefined ? { maxAgeS: o.gateway.maxAgeS } : {}),
  });

  const rt = await startRuntime("plant-sim", config, deps);
  const { clock, events, log } = rt;
  const epoch0 = clock.now();
  let wall0 = epoch0;
  const simNowMs = () => Math.round(epoch0 + plant.timeS * 1000);
  const target = { site: config.site, unit: o.unit };
  const tagUnit = new Map(model.tags.map((t) => [t.id, t.unit]));

  let sparkplug: SparkplugOut | undefined;
  if (o.sparkplug.enabled) {
    sparkplug = await startSparkplugOut({
      url: o.sparkplug.url ?? config.bus.url,
      groupId: o.sparkplug.groupId,
      edgeNodeId: o.sparkplug.edgeNodeId ?? config.site,
      tags: model.tags.map((t) => t.id),
      now: () => clock.now(),
    });
  }

  const readbackSetpoints = (clipped?: ReadonlySet<string>): ReadbackSetpoint[] =>
    plant.loops().map((l) => {
      const sp: ReadbackSetpoint = { tag: l.setpointTag, unit: l.unit, current: l.sp, target: l.target };
      if (Number.isFinite(l.rampPerS)) sp.rampPerS = l.rampPerS;
      if (clipped) sp.rampClipped = clipped.has(l.setpointTag);
      return sp;
    });

  const readback = async (
    trigger: Readback["trigger"],
    extra: Partial<Readback> = {},
    causedBy?: { id: string; cycleid?: string },
  ): Promise<void> => {
    const g = gateway.state();
    const data: Readback = {
      trigger,
      target,
      lastSeq: g.lastSeq,
      shed: g.shed,
      mode: g.shed || plant.tripped ? "local" : "remote",
      setpoints: readbackSetpoints(),
      time: clock.now(),
      ...extra,
    };
    await events.publish("readback", "rto.readback.v1", data, causedBy ? { causedBy } : {});
  };

  const publishBatch = async (b: SimBatch): Promise<void> => {
    if (b.lost || b.values.length === 0) return;
    const time = o.timestamps === "simulated" ? Math.round(epoch0 + b.timeS * 1000) : clock.now();
    const values = b.values.map((v) => ({
      tag: v.tag,
      value: v.value,
      unit: tagUnit.get(v.tag) ?? "1",
      quality: "good" as const,
      time,
    }));
    const [first, ...rest] = values;
    if (!first) return;
    await events.publish(`raw.${o.source}`, "rto.measurements.v1", {
      source: "plant-sim",
      values: [first, ...rest],
    });
    await sparkplug?.publish(b.values, time);
  };

  // Commands: the gateway's verdict, then the plant's own (a trip), then one readback per command.
  rt.track(
    await events.on(subject(config.site, "command"), ["rto.command.v1"], async (event) => {
      const cmd: SetpointCommand = event.data;
      const verdict = gateway.accept(cmd, clock.now());
      const head: Partial<Readback> = {
        commandSeq: Number.isSafeInteger(cmd.seq) && cmd.seq >= 0 ? cmd.seq : 0,
        proposalId: cmd.proposalId,
      };
      if (!verdict.accepted) {
        log.warn({ code: verdict.code, seq: cmd.seq }, "command refused");
        await readback(
          "command",
          { ...head, accepted: false, code: verdict.code, reason: verdict.reason.slice(0, 1000) },
          event,
        );
        return;
      }
      if (verdict.missedSeqs !== undefined) head.missedSeqs = verdict.missedSeqs;
      const clipped = new Set(
        verdict.setpoints.filter((s) => s.rampClipped).map((s) => s.tag.replace(/\.SP$/, "")),
      );
      for (const sp of verdict.setpoints) {
        const r = plant.setTargetByTag(sp.tag, sp.value, sp.unit, sp.rampPerS);
        if (!r.ok) {
          // The gateway checked signature and limits; the plant can still refuse (tripped).
          await readback("command", { ...head, accepted: false, code: r.code, reason: r.reason }, event);
          return;
        }
      }
      log.info({ seq: cmd.seq, setpoints: verdict.setpoints.length }, "command applied");
      await readback("command", { ...head, accepted: true, setpoints: readbackSetpoints(clipped) }, event);
    }),
  );

  rt.track(
    await events.on(
      subject(config.site, `heartbeat.${o.gateway.heartbeatFrom}`),
      ["rto.heartbeat.v1"],
      (event) => {
        if (event.data.status === "running" || event.data.status === "starting")
          gateway.heartbeat(clock.now());
      },
    ),
  );

  rt.track(
    await events.on(subject(config.site, "plant-control"), ["rto.plant-control.v1"], async (event) => {
      const c = event.data;
      if (c.action === "inject") {
        for (const f of c.faults ?? []) {
          const spec: FaultSpec = { kind: f.kind, startS: plant.timeS + (f.startInS ?? 0) };
          const full: FaultSpec = {
            ...spec,
            ...(f.tag !== undefined ? { tag: f.tag } : {}),
            ...(f.durationS !== undefined ? { durationS: f.durationS } : {}),
            ...(f.magnitude !== undefined ? { magnitude: f.magnitude } : {}),
            ...(f.ratePerS !== undefined ? { ratePerS: f.ratePerS } : {}),
            ...(f.factor !== undefined ? { factor: f.factor } : {}),
          };
          sim.faults.add(full);
        }
        log.info({ faults: c.faults?.length, note: c.note }, "faults injected");
      } else if (c.action === "clear") {
        sim.faults.clear(c.tag);
        log.info({ tag: c.tag ?? "all" }, "faults cleared");
      } else {
        plant.resetTrip();
        await readback("status", { reason: "trip reset" }, event);
      }
    }),
  );

  // The simulation loop: catch simulated time up with the scaled clock, publish what fell due, run the watchdog.
  let timer: NodeJS.Timeout | undefined;
  let stopping = false;
  let lastStatus = epoch0;
  let wasTripped = false;
  const tick = async (): Promise<void> => {
    const now = clock.now();
    const due = ((now - wall0) / 1000) * o.timeScale - plant.timeS;
    if (due > o.maxCatchUpS) {
      // Slower than timeScale: drop the debt rather than let it grow without bound.
      wall0 += ((due - o.maxCatchUpS) / o.timeScale) * 1000;
      log.warn({ behindS: due }, "simulation slower than timeScale; simulated time lags");
    }
    if (due > 0) {
      const batches = sim.step(Math.min(due, o.maxCatchUpS));
      for (const b of batches) await publishBatch(b);
    }
    if (plant.tripped && !wasTripped) {
      const t = plant.tripped;
      await readback("status", {
        reason: `plant tripped: ${t.symbol} = ${t.value.toPrecision(5)} beyond its trip limit; driving to safe setpoints`,
      });
    }
    wasTripped = plant.tripped !== undefined;
    const w = gateway.tick(now);
    if (w.changed && w.shed) {
      plant.holdAll();
      await readback("shed", {
        reason: `no heartbeat from ${o.gateway.heartbeatFrom} within ${o.gateway.watchdogS} s: optimizer shed, holding setpoints`,
      });
    } else if (w.changed) {
      await readback("recovered", { reason: `heartbeats from ${o.gateway.heartbeatFrom} resumed` });
    }
    if (now - lastStatus >= o.statusPeriodS * 1000) {
      lastStatus = now;
      await readback("status");
    }
  };
  const loop = () => {
    if (stopping) return;
    tick()
      .catch((err: Error) => log.error({ err }, "simulation tick failed"))
      .finally(() => {
        if (!stopping) timer = setTimeout(loop, o.tickMs);
      });
  };
  rt.onStop(async () => {
    stopping = true;
    if (timer) clearTimeout(timer);
    await sparkplug?.close().catch((err: Error) => log.warn({ err }, "sparkplug close"));
  });
  await readback("status", { reason: "plant-sim started" });
  loop();
  return { ...rt.ready(), simulator: sim, gateway, simNowMs, sparkplug };
}
