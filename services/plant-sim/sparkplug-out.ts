/**
 * Optional Sparkplug B output of the simulated plant: the plant as one edge node publishing its tags
 * as node metrics, so ingest's Sparkplug host path can be exercised against a live source.
 *
 * Sources (from memory, not re-read): Eclipse Sparkplug Specification 3.0 — topics
 * `spBv1.0/<group>/<type>/<edge node>`; the NDEATH is registered as the MQTT Will before connecting
 * and carries the same `bdSeq` metric as the NBIRTH that follows; NBIRTH declares every metric with
 * its name, alias and datatype; NDATA then sends metrics by alias only; `seq` runs 0–255 over every
 * message of the node but NDEATH, NBIRTH having seq 0; a host asks for a new birth with the NCMD
 * metric "Node Control/Rebirth" = true. A separate mqtt.js client, because the Will and the
 * `spBv1.0/…` namespace belong to the edge node, not to the service's bus connection.
 */
import mqtt, { type MqttClient } from "mqtt";
import { get as getSparkplugCodec } from "sparkplug-payload";
import { PlantSimError } from "./errors.js";
import type { MeasuredValue } from "./faults.js";

type Codec = NonNullable<ReturnType<typeof getSparkplugCodec>>;
type Payload = Parameters<Codec["encodePayload"]>[0];

/** Options of the Sparkplug B output. */
export interface SparkplugOutOptions {
  /** MQTT broker URL. */
  url: string;
  /** Sparkplug group id. */
  groupId: string;
  /** Edge node id. */
  edgeNodeId: string;
  /** Tag ids in alias order (alias = index + 1). */
  tags: readonly string[];
  /** Starting bdSeq (0–255). Default 0. */
  bdSeq?: number;
  /** Clock for birth timestamps, epoch ms. */
  now: () => number;
}

/** The running Sparkplug output. */
export interface SparkplugOut {
  /** Publishes NDATA for one batch (values in tag units, `timeMs` epoch ms). */
  publish(values: readonly MeasuredValue[], timeMs: number): Promise<void>;
  /** Messages published since start, by type. */
  readonly counts: { nbirth: number; ndata: number };
  /** Publishes nothing more and disconnects cleanly (the broker then drops the Will: send NDEATH ourselves first). */
  close(): Promise<void>;
}

const REBIRTH = "Node Control/Rebirth";

/** Builds NBIRTH, NDATA and NDEATH payloads, pure (no I/O). */
export function sparkplugPayloads(tags: readonly string[]) {
  const alias = new Map(tags.map((t, i) => [t, i + 1]));
  return {
    birth(values: ReadonlyMap<string, number>, bdSeq: number, timeMs: number): Payload {
      return {
        timestamp: timeMs,
        seq: 0,
        metrics: [
          { name: "bdSeq", type: "UInt64", value: bdSeq },
          { name: REBIRTH, type: "Boolean", value: false },
          ...tags.map((t) => ({
            name: t,
            alias: alias.get(t) as number,
            type: "Double" as const,
            value: values.get(t) ?? 0,
            isNull: !values.has(t),
          })),
        ],
      } as Payload;
    },
    data(values: readonly MeasuredValue[], seq: number, timeMs: number): Payload {
      return {
        timestamp: timeMs,
        seq,
        metrics: values
          .filter((v) => alias.has(v.tag))
          .map((v) => ({
            alias: alias.get(v.tag) as number,
            type: "Double" as const,
            value: v.value,
            timestamp: timeMs,
          })),
      } as Payload;
    },
    death(bdSeq: number): Payload {
      return { metrics: [{ name: "bdSeq", type: "UInt64", value: bdSeq }] } as Payload;
    },
  };
}

/** Connects the edge node (Will = NDEATH), publishes NBIRTH, and answers rebirth requests. */
export async function startSparkplugOut(options: SparkplugOutOptions): Promise<SparkplugOut> {
  const codec = getSparkplugCodec("spBv1.0");
  if (!codec) throw new PlantSimError("PLANT_SIM_CONFIG_INVALID", "sparkplug-payload has no spBv1.0 codec");
  const p = sparkplugPayloads(options.tags);
  const topic = (type: string) => `spBv1.0/${options.groupId}/${type}/${options.edgeNodeId}`;
  const bdSeq = (options.bdSeq ?? 0) % 256;
  let seq = 0;
  const last = new Map<string, number>();
  const counts = { nbirth: 0, ndata: 0 };
  const client: MqttClient = await mqtt.connectAsync(options.url, {
    clientId: `${options.groupId}-${options.edgeNodeId}-spb`,
    clean: true,
    reconnectPeriod: 0,
    will: {
      topic: topic("NDEATH"),
      payload: Buffer.from(codec.encodePayload(p.death(bdSeq))),
      qos: 1,
      retain: false,
    },
  });
  const birth = async (timeMs: number) => {
    seq = 0;
    await client.publishAsync(
      topic("NBIRTH"),
      Buffer.from(codec.encodePayload(p.birth(last, bdSeq, timeMs))),
      { qos: 0 },
    );
    counts.nbirth += 1;
  };
  await client.subscribeAsync(topic("NCMD"), { qos: 1 });
  client.on("message", (_t, payload) => {
    try {
      const msg = codec.decodePayload(payload) as { metrics?: { name?: string; value?: unknown }[] };
      if (msg.metrics?.some((m) => m.name === REBIRTH && m.value === true)) void birth(options.now());
    } catch {
      // A malformed NCMD is not ours to answer.
    }
  });
  await birth(options.now());
  return {
    counts,
    async publish(values, timeMs) {
      for (const v of values) last.set(v.tag, v.value);
      seq = (seq + 1) % 256;
      await client.publishAsync(
        topic("NDATA"),
        Buffer.from(codec.encodePayload(p.data(values, seq, timeMs))),
        { qos: 0 },
      );
      counts.ndata += 1;
    },
    async close() {
      await client.publishAsync(topic("NDEATH"), Buffer.from(codec.encodePayload(p.death(bdSeq))), {
        qos: 1,
      });
      await client.endAsync();
    },
  };
}
