/**
 * The ingest service: wiring only. Raw JSON batches (rto.<site>.raw.<source>) and Sparkplug B
 * (spBv1.0/<group>/#) go through the pure pipeline; validated values with a per-value status go out
 * on rto.<site>.measurements, and a tag-health summary on rto.<site>.tag-health.
 *
 * Sparkplug B does not live on the neutral rto.* namespace — its topics start with `spBv1.0`, whose
 * dot the neutral subject syntax would split — so ingest speaks it on an MQTT connection of its own
 * (mqtt.js, MQTT 3.1.1, so that the embedded broker works too), as the site's Sparkplug host
 * application: it subscribes to spBv1.0/<group>/#, publishes NCMD rebirth requests, and, with a
 * hostId, its STATE. Only ingest speaks Sparkplug; every other service sees rto.* events only.
 */
import mqtt, { type MqttClient } from "mqtt";
import { SerialQueue } from "../kit/bus.js";
import type { Event } from "../kit/envelope.js";
import type { Measurements } from "../kit/generated/messages.js";
import { type Deps, type Service, startRuntime } from "../kit/service.js";
import { loadSiteModelFile, type SiteModel } from "../model/index.js";
import type { IngestConfig } from "./config.js";
import { IngestError } from "./errors.js";
import { createPipeline, type MeasuredValue, type RawInput } from "./pipeline.js";
import {
  createSparkplugHost,
  decodeSparkplugPayload,
  type SparkplugOutput,
  type SparkplugTagValue,
} from "./sparkplug.js";

/** What ingest may be given besides the kit's dependencies. */
export interface IngestDeps extends Deps {
  /** An already loaded site model (tests, the demo); default: loaded from `ingest.siteModelFile`. */
  model?: SiteModel;
}

/** Largest batch the measurements schema accepts. */
const MAX_BATCH = 5000;

/** Sparkplug metric value → the pipeline's raw value. */
function sparkplugInput(v: SparkplugTagValue): RawInput {
  return {
    name: v.metric,
    value: typeof v.value === "number" || typeof v.value === "boolean" ? v.value : null,
    timeMs: v.timeMs,
    // Sparkplug's "stale" quality (500) has no measurement-quality twin; it is bad for our purpose.
    quality: v.quality === "good" ? "good" : "bad",
  };
}

function sourceKeyOf(v: { groupId: string; edgeNodeId: string; deviceId?: string }): string {
  return v.deviceId === undefined
    ? `${v.groupId}/${v.edgeNodeId}`
    : `${v.groupId}/${v.edgeNodeId}/${v.deviceId}`;
}

/** Starts ingest. Throws on a bad site model or when the broker cannot be reached. */
export async function start(config: Readonly<IngestConfig>, deps: IngestDeps = {}): Promise<Service> {
  const o = config.ingest;
  const model = deps.model ?? (await loadSiteModelFile(o.siteModelFile));
  const pipeline = createPipeline(model, {
    acceptUncertain: o.acceptUncertain,
    maxClockSkewS: o.maxClockSkewS,
    sweepEveryMs: o.staleCheckIntervalS * 1000,
  });
  const rt = await startRuntime("ingest", config, deps);
  if (model.site.id !== config.site) {
    rt.log.info({ modelSite: model.site.id, site: config.site }, "site model written for another site id");
  }

  async function publishValues(
    source: string,
    values: MeasuredValue[],
    causedBy?: Event<"rto.measurements.v1">,
  ): Promise<void> {
    for (let k = 0; k < values.length; k += MAX_BATCH) {
      // minItems 1 in the schema: the loop bound guarantees a non-empty slice.
      const chunk = values.slice(k, k + MAX_BATCH) as Measurements["values"];
      const data: Measurements = { source: source.slice(0, 80), values: chunk };
      await rt.events.publish("measurements", "rto.measurements.v1", data, causedBy ? { causedBy } : {});
    }
  }

  if (o.raw.enabled) {
    const prefix = `${rt.events.subject("raw")}.`;
    rt.track(
      await rt.events.on(
        `${prefix}>`,
        ["rto.measurements.v1"],
        async (event, ctx) => {
          const sourceKey = ctx.subject.slice(prefix.length) || event.data.source;
          const inputs: RawInput[] = event.data.values.map((v) => {
            const r: RawInput = { name: v.tag, value: v.value, timeMs: v.time, quality: v.quality };
            if (v.unit !== undefined) r.unit = v.unit;
            return r;
          });
          const out = pipeline.process(sourceKey, inputs, rt.clock.now());
          await publishValues(event.data.source, out.values, event);
        },
        o.raw.group ? { group: o.raw.group } : {},
      ),
    );
  }

  // Silent tags: swept on a timer too, since a silent source sends nothing that would trigger it.
  const queue = new SerialQueue();
  const sweepTimer = setInterval(() => {
    queue
      .push(async () => {
        const markers = pipeline.sweep(rt.clock.now());
        if (markers.length > 0) await publishValues("ingest", markers);
      })
      .catch((err: Error) => rt.log.warn({ err }, "stale sweep failed"));
  }, o.staleCheckIntervalS * 1000);
  sweepTimer.unref();

  let sparkplug:
    | { client: MqttClient; nodes: () => ReturnType<ReturnType<typeof createSparkplugHost>["nodes"]> }
    | undefined;
  if (o.sparkplug.enabled) sparkplug = await startSparkplug();

  const healthTimer = setInterval(() => {
    queue
      .push(async () => {
        const data = pipeline.health(rt.clock.now(), o.tagHealthIntervalS);
        if (sparkplug) {
          data.sparkplug = sparkplug
            .nodes()
            .slice(0, 500)
            .map((n) => ({
              groupId: n.groupId.slice(0, 200),
              edgeNodeId: n.edgeNodeId.slice(0, 200),
              online: n.online,
              rebirthsRequested: n.rebirthsRequested,
              held: n.held,
            }));
        }
        await rt.events.publish("tag-health", "rto.tag-health.v1", data);
      })
      .catch((err: Error) => rt.log.warn({ err }, "tag-health report failed"));
  }, o.tagHealthIntervalS * 1000);
  healthTimer.unref();

  rt.onStop(async () => {
    clearInterval(sweepTimer);
    clearInterval(healthTimer);
    await queue.idle();
    if (sparkplug) await sparkplug.client.endAsync().catch(() => undefined);
  });
  return rt.ready();

  async function startSparkplug() {
    const sp = o.sparkplug;
    const url = sp.url ?? (config.bus.transport === "nats" ? undefined : config.bus.url);
    if (url === undefined) {
      throw new IngestError(
        "INGEST_SPARKPLUG_CONFIG",
        "ingest.sparkplug.url is required when the bus is NATS (Sparkplug B needs an MQTT broker)",
      );
    }
    const host = createSparkplugHost({
      reorderTimeoutMs: sp.reorderTimeoutMs,
      rebirthHoldOffMs: sp.rebirthHoldOffMs,
    });
    const stateTopic = sp.hostId === undefined ? undefined : `spBv1.0/STATE/${sp.hostId}`;
    const client = await mqtt.connectAsync(url, {
      protocolVersion: 4,
      clean: true,
      reconnectPeriod: 1000,
      clientId: `${config.site}-ingest-spb-${config.instance}`.slice(0, 64),
      ...(sp.username ? { username: sp.username } : {}),
      ...(sp.password ? { password: sp.password } : {}),
      // Sparkplug 3.0 (from memory): the host's death certificate is a retained STATE {online:false}.
      ...(stateTopic
        ? {
            will: {
              topic: stateTopic,
              payload: Buffer.from(JSON.stringify({ online: false, timestamp: rt.clock.now() })),
              qos: 1 as const,
              retain: true,
            },
          }
        : {}),
    });
    const spQueue = new SerialQueue();

    async function act(outputs: SparkplugOutput[]): Promise<void> {
      const batches = new Map<string, MeasuredValue[]>();
      const now = rt.clock.now();
      for (const out of outputs) {
        switch (out.kind) {
          case "values": {
            const bySource = new Map<string, RawInput[]>();
            for (const v of out.values) {
              const key = sourceKeyOf(v);
              const list = bySource.get(key) ?? [];
              list.push(sparkplugInput(v));
              bySource.set(key, list);
            }
            for (const [key, inputs] of bySource) {
              const list = batches.get(key) ?? [];
              list.push(...pipeline.process(key, inputs, now).values);
              batches.set(key, list);
            }
            break;
          }
          case "stale": {
            // Tags come as <group>/<node>[/<device>]/<metric>: split the metric name off the source key.
            const byKey = new Map<string, string[]>();
            for (const tag of out.tags) {
              const cut = tag.lastIndexOf("/");
              const key = tag.slice(0, cut);
              const list = byKey.get(key) ?? [];
              list.push(tag.slice(cut + 1));
              byKey.set(key, list);
            }
            for (const [key, names] of byKey) {
              const markers = pipeline.markStale(key, names, `Sparkplug: ${out.reason}`, now);
              if (markers.length > 0) batches.set(key, [...(batches.get(key) ?? []), ...markers]);
            }
            break;
          }
          case "rebirth":
            rt.log.info(
              { node: `${out.groupId}/${out.edgeNodeId}`, reason: out.reason },
              "Sparkplug rebirth requested",
            );
            // Sparkplug 3.0 (from memory): NCMD is published with QoS 0, not retained.
            await client.publishAsync(out.topic, Buffer.from(out.payload), { qos: 0, retain: false });
            break;
          case "ignored":
            rt.log.debug({ topic: out.topic, reason: out.reason }, "Sparkplug message ignored");
            break;
          default: {
            const _exhaustive: never = out;
            void _exhaustive;
          }
        }
      }
      for (const [key, values] of batches) if (values.length > 0) await publishValues(`spb:${key}`, values);
    }

    client.on("message", (topic, payload) => {
      spQueue
        .push(async () => {
          if (topic.startsWith("spBv1.0/STATE/")) return;
          let decoded: ReturnType<typeof decodeSparkplugPayload>;
          try {
            decoded = decodeSparkplugPayload(payload);
          } catch (err) {
            await rt.events.deadLetter(topic, payload, {
              ok: false,
              reason: "parse-error",
              detail: `Sparkplug B: ${(err as Error).message}`,
            });
            return;
          }
          let outputs: SparkplugOutput[];
          try {
            outputs = host.handle(topic, decoded, rt.clock.now());
          } catch (err) {
            await rt.events.deadLetter(topic, payload, {
              ok: false,
              reason: "schema-invalid",
              detail: `Sparkplug B: ${(err as Error).message}`,
            });
            return;
          }
          await act(outputs);
        })
        .catch((err: Error) => rt.log.warn({ err, topic }, "Sparkplug message failed"));
    });
    client.on("offline", () => {
      spQueue
        .push(() => act(host.brokerLost(rt.clock.now())))
        .catch((err: Error) => rt.log.warn({ err }, "Sparkplug broker loss"));
    });
    client.on("connect", () => {
      if (stateTopic) {
        client
          .publishAsync(stateTopic, JSON.stringify({ online: true, timestamp: rt.clock.now() }), {
            qos: 1,
            retain: true,
          })
          .catch((err: Error) => rt.log.warn({ err }, "Sparkplug STATE publish failed"));
      }
    });
    client.on("error", (err) => rt.log.warn({ err }, "Sparkplug connection error"));
    await client.subscribeAsync(
      sp.groups.map((g) => `spBv1.0/${g}/#`),
      { qos: 1 },
    );
    if (stateTopic) {
      await client.publishAsync(stateTopic, JSON.stringify({ online: true, timestamp: rt.clock.now() }), {
        qos: 1,
        retain: true,
      });
    }
    const tick = setInterval(() => {
      spQueue
        .push(() => act(host.tick(rt.clock.now())))
        .catch((err: Error) => rt.log.warn({ err }, "Sparkplug tick"));
    }, sp.tickMs);
    tick.unref();
    rt.onStop(async () => {
      clearInterval(tick);
      await spQueue.idle();
      if (stateTopic && client.connected) {
        await client
          .publishAsync(stateTopic, JSON.stringify({ online: false, timestamp: rt.clock.now() }), {
            qos: 1,
            retain: true,
          })
          .catch(() => undefined);
      }
    });
    return { client, nodes: () => host.nodes() };
  }
}
