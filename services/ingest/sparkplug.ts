/**
 * Sparkplug B host-application state, pure: alias maps from births, sequence checks with a reorder
 * window, rebirth decisions, death handling by bdSeq, staleness on death or broker loss, and quality.
 *
 * Sources (from memory, not re-read): Eclipse Sparkplug Specification 3.0 — topics
 * `spBv1.0/<group>/<type>/<edge node>[/<device>]`; seq runs 0–255 and wraps on every message of an edge
 * node except NDEATH; NBIRTH and NDEATH carry a `bdSeq` metric that pairs them; a host that sees a
 * gap, an unknown alias or data before birth asks for a rebirth with the NCMD metric
 * "Node Control/Rebirth" = true; a metric property "Quality" (192 good, 0 bad, 500 stale).
 *
 * No bus, no clock: messages and time come in as arguments (epoch ms), actions go out as data.
 */
import { get as getSparkplugCodec } from "sparkplug-payload";
import { IngestError } from "./errors.js";

type Codec = NonNullable<ReturnType<typeof getSparkplugCodec>>;
let codec: Codec | null = null;
function sparkplugCodec(): Codec {
  codec ??= getSparkplugCodec("spBv1.0");
  if (codec === null)
    throw new IngestError("INGEST_SPARKPLUG_PAYLOAD", "sparkplug-payload has no spBv1.0 codec");
  return codec;
}

/** Sparkplug B message types (the third topic level). */
export type SparkplugMessageType =
  | "NBIRTH"
  | "NDEATH"
  | "DBIRTH"
  | "DDEATH"
  | "NDATA"
  | "DDATA"
  | "NCMD"
  | "DCMD"
  | "STATE";

const MESSAGE_TYPES = new Set<string>([
  "NBIRTH",
  "NDEATH",
  "DBIRTH",
  "DDEATH",
  "NDATA",
  "DDATA",
  "NCMD",
  "DCMD",
]);

/** A parsed Sparkplug B topic. For STATE topics (`spBv1.0/STATE/<host id>`), `edgeNodeId` holds the host id. */
export interface SparkplugTopic {
  groupId: string;
  messageType: SparkplugMessageType;
  edgeNodeId: string;
  deviceId?: string;
}

/** Parses `spBv1.0/<group>/<type>/<edge node>[/<device>]`; throws INGEST_SPARKPLUG_TOPIC otherwise. */
export function parseSparkplugTopic(topic: string): SparkplugTopic {
  const parts = topic.split("/");
  if (parts[0] === "spBv1.0" && parts[1] === "STATE" && parts.length === 3 && parts[2] !== "") {
    return { groupId: "", messageType: "STATE", edgeNodeId: parts[2]! };
  }
  const [ns, groupId, type, edgeNodeId, deviceId] = parts;
  const deviceType = type === "DBIRTH" || type === "DDEATH" || type === "DDATA" || type === "DCMD";
  if (
    ns !== "spBv1.0" ||
    !groupId ||
    type === undefined ||
    !MESSAGE_TYPES.has(type) ||
    !edgeNodeId ||
    parts.length !== (deviceType ? 5 : 4) ||
    (deviceType && !deviceId)
  ) {
    throw new IngestError("INGEST_SPARKPLUG_TOPIC", `'${topic}' is not a Sparkplug B topic`);
  }
  const out: SparkplugTopic = { groupId, messageType: type as SparkplugMessageType, edgeNodeId };
  if (deviceType) out.deviceId = deviceId;
  return out;
}

/** A metric value after normalisation: 64-bit integers become numbers (exact up to 2⁵³). */
export type SparkplugValue = number | boolean | string | null;

/** A decoded metric with plain-number fields. */
export interface SparkplugMetric {
  name?: string;
  alias?: number;
  /** Metric time, epoch ms. */
  timestampMs?: number;
  /** Sparkplug datatype name ("Double", "Int32", ...). */
  datatype: string;
  /** Scalar value; null when is_null is set or the type is not a scalar (DataSet, Template, Bytes, ...). */
  value: SparkplugValue;
  isNull: boolean;
  isHistorical: boolean;
  /** The "Quality" property when present (192 good, 0 bad, 500 stale; Sparkplug 3.0, from memory). */
  qualityCode?: number;
}

/** A decoded payload with plain-number fields. */
export interface SparkplugPayload {
  /** Payload time, epoch ms. */
  timestampMs?: number;
  /** Sequence number 0–255. */
  seq?: number;
  metrics: SparkplugMetric[];
}

interface LongLike {
  low: number;
  high: number;
  unsigned: boolean;
}

function isLong(v: unknown): v is LongLike {
  return typeof v === "object" && v !== null && "low" in v && "high" in v && "unsigned" in v;
}

/** A protobuf uint64/int64 as decoded by sparkplug-payload (a Long object) or a number, as a number. */
function toNumber(v: unknown): number | undefined {
  if (typeof v === "number") return v;
  if (isLong(v)) return (v.unsigned ? v.high >>> 0 : v.high) * 4294967296 + (v.low >>> 0);
  return undefined;
}

const SCALAR_TYPES = new Set([
  "Int8",
  "Int16",
  "Int32",
  "Int64",
  "UInt8",
  "UInt16",
  "UInt32",
  "UInt64",
  "Float",
  "Double",
  "Boolean",
  "String",
  "DateTime",
  "Text",
  "UUID",
]);

/**
 * Decodes Sparkplug B payload bytes with sparkplug-payload's spBv1.0 codec and normalises Long
 * fields (timestamp, seq, alias, 64-bit values) to numbers. Throws INGEST_SPARKPLUG_PAYLOAD.
 *
 * Trap: sparkplug-payload reads a UInt32 metric from long_value (field 11) and converts it with
 * Long.toInt(), which is signed; values ≥ 2³¹ are mapped back to unsigned here. A device that
 * writes UInt32 to int_value (field 10, as the specification names it) decodes as 0 through this
 * codec — a known disagreement between devices and the codec (LIBRARY-NOTES).
 */
export function decodeSparkplugPayload(bytes: Uint8Array): SparkplugPayload {
  let raw: ReturnType<Codec["decodePayload"]>;
  try {
    raw = sparkplugCodec().decodePayload(bytes);
  } catch (e) {
    throw new IngestError(
      "INGEST_SPARKPLUG_PAYLOAD",
      `undecodable Sparkplug B payload: ${(e as Error).message}`,
      undefined,
      {
        cause: e,
      },
    );
  }
  const out: SparkplugPayload = { metrics: [] };
  const ts = toNumber(raw.timestamp);
  if (ts !== undefined) out.timestampMs = ts;
  const seq = toNumber(raw.seq);
  if (seq !== undefined) out.seq = seq;
  for (const m of raw.metrics ?? []) {
    const isNull = m.value === null || m.value === undefined;
    let value: SparkplugValue = null;
    if (!isNull && SCALAR_TYPES.has(m.type)) {
      const v = m.value;
      value =
        typeof v === "number" || typeof v === "boolean" || typeof v === "string" ? v : (toNumber(v) ?? null);
      if (m.type === "UInt32" && typeof value === "number" && value < 0) value = value >>> 0;
    }
    const metric: SparkplugMetric = {
      datatype: m.type,
      value,
      isNull,
      isHistorical: m.isHistorical === true,
    };
    if (typeof m.name === "string") metric.name = m.name;
    const alias = toNumber(m.alias);
    if (alias !== undefined) metric.alias = alias;
    const mts = toNumber(m.timestamp);
    if (mts !== undefined) metric.timestampMs = mts;
    const q = m.properties?.Quality;
    const qv = q === undefined ? undefined : toNumber(q.value);
    if (qv !== undefined) metric.qualityCode = qv;
    out.metrics.push(metric);
  }
  return out;
}

/** The NCMD metric that asks an edge node to republish its births (Sparkplug 3.0, from memory). */
export const REBIRTH_METRIC = "Node Control/Rebirth";

/** Encodes the NCMD payload "Node Control/Rebirth = true" stamped `timestampMs` (epoch ms). */
export function encodeRebirthCommand(timestampMs: number): Uint8Array {
  return sparkplugCodec().encodePayload({
    timestamp: timestampMs,
    metrics: [{ name: REBIRTH_METRIC, type: "Boolean", value: true }],
  });
}

/** Quality of a value as the host sees it. "stale": the source or the host says the value is old. */
export type SparkplugQuality = "good" | "bad" | "stale";

/** One metric value, ready for the data checks. */
export interface SparkplugTagValue {
  /** `<group>/<edge node>[/<device>]/<metric name>`. */
  tag: string;
  groupId: string;
  edgeNodeId: string;
  deviceId?: string;
  metric: string;
  value: SparkplugValue;
  /** Metric time, else payload time, else the time the host received it (epoch ms). */
  timeMs: number;
  quality: SparkplugQuality;
  datatype: string;
  isHistorical: boolean;
}

/** What the host state asks the caller to do or publish. */
export type SparkplugOutput =
  | { kind: "values"; values: SparkplugTagValue[] }
  | { kind: "stale"; tags: string[]; reason: string; timeMs: number }
  | {
      kind: "rebirth";
      groupId: string;
      edgeNodeId: string;
      /** The NCMD topic to publish on. */
      topic: string;
      /** NCMD payload bytes: Node Control/Rebirth = true. */
      payload: Uint8Array;
      reason: string;
    }
  | { kind: "ignored"; topic: string; reason: string };

/** Host options; all optional, defaults in the docs. */
export interface SparkplugHostOptions {
  /** How long an out-of-order message is held waiting for the missing seq, in ms. Default 2000 ms (common practice, no source). */
  reorderTimeoutMs?: number;
  /** Least time between two rebirth requests to the same node, in ms. Default 5000 ms (common practice, no source). */
  rebirthHoldOffMs?: number;
  /** Most messages held per node while waiting for a missing seq; beyond this the gap is declared at once. Default 64. */
  maxHeldMessages?: number;
}

/** Status of one edge node, for health. */
export interface SparkplugNodeStatus {
  groupId: string;
  edgeNodeId: string;
  online: boolean;
  bdSeq: number | null;
  /** Next seq expected, or null when not born. */
  expectedSeq: number | null;
  held: number;
  devices: { deviceId: string; online: boolean; metrics: number }[];
  metrics: number;
  rebirthsRequested: number;
}

/** The host-application state over all edge nodes seen. */
export interface SparkplugHost {
  /** Handles one decoded message received at `nowMs` (epoch ms). Throws INGEST_SPARKPLUG_TOPIC on a bad topic. */
  handle(topic: string, payload: SparkplugPayload, nowMs: number): SparkplugOutput[];
  /** Expires reorder windows at `nowMs`: a gap still open after the timeout becomes a rebirth request. */
  tick(nowMs: number): SparkplugOutput[];
  /** The broker connection was lost: every known metric is stale and every node must be born again. */
  brokerLost(nowMs: number): SparkplugOutput[];
  /** Per-node status, for health. */
  nodes(): SparkplugNodeStatus[];
}

interface DeviceState {
  online: boolean;
  aliases: Map<number, string>;
  names: Set<string>;
}

interface HeldMessage {
  topic: SparkplugTopic;
  topicText: string;
  payload: SparkplugPayload;
}

interface NodeState {
  groupId: string;
  edgeNodeId: string;
  online: boolean;
  bdSeq: number | null;
  expectedSeq: number | null;
  aliases: Map<number, string>;
  names: Set<string>;
  devices: Map<string, DeviceState>;
  held: Map<number, HeldMessage>;
  waitingSinceMs: number | null;
  lastRebirthMs: number | null;
  rebirthsRequested: number;
}

function bdSeqOf(payload: SparkplugPayload): number | null {
  const m = payload.metrics.find((x) => x.name === "bdSeq");
  return typeof m?.value === "number" ? m.value : null;
}

function qualityOf(m: SparkplugMetric): SparkplugQuality {
  if (m.isNull) return "bad";
  if (m.qualityCode === undefined || m.qualityCode === 192) return "good";
  return m.qualityCode === 500 ? "stale" : "bad";
}

/**
 * Creates the host state. Rules (Sparkplug 3.0, from memory):
 * - NBIRTH resets the node: new alias map, bdSeq, seq base; every device must be born again.
 * - Every other node message except NDEATH must carry seq = previous + 1 (mod 256). A message ahead
 *   of the expected seq is held up to `reorderTimeoutMs`; when the gap closes the held messages are
 *   applied in order; when it does not, the node is asked to rebirth. A message behind is dropped as
 *   a duplicate.
 * - Data before birth, an unknown alias, or a metric name absent from the birth asks for a rebirth.
 * - NDEATH counts only when its bdSeq equals the current birth's; an old one is ignored.
 * - On death, a rebirth request, or broker loss, all the node's metrics are reported stale, and the
 *   node counts as not born until its next NBIRTH.
 * Rebirth requests to one node are spaced by at least `rebirthHoldOffMs`.
 */
export function createSparkplugHost(options: SparkplugHostOptions = {}): SparkplugHost {
  const reorderTimeoutMs = options.reorderTimeoutMs ?? 2000;
  const holdOffMs = options.rebirthHoldOffMs ?? 5000;
  const maxHeld = options.maxHeldMessages ?? 64;
  const nodes = new Map<string, NodeState>();

  function nodeOf(groupId: string, edgeNodeId: string): NodeState {
    const key = `${groupId}/${edgeNodeId}`;
    let n = nodes.get(key);
    if (n === undefined) {
      n = {
        groupId,
        edgeNodeId,
        online: false,
        bdSeq: null,
        expectedSeq: null,
        aliases: new Map(),
        names: new Set(),
        devices: new Map(),
        held: new Map(),
        waitingSinceMs: null,
        lastRebirthMs: null,
        rebirthsRequested: 0,
      };
      nodes.set(key, n);
    }
    return n;
  }

  const prefix = (n: NodeState, deviceId?: string) =>
    deviceId === undefined ? `${n.groupId}/${n.edgeNodeId}/` : `${n.groupId}/${n.edgeNodeId}/${deviceId}/`;

  function allTags(n: NodeState): string[] {
    const tags = [...n.names].map((name) => prefix(n) + name);
    for (const [id, d] of n.devices) for (const name of d.names) tags.push(prefix(n, id) + name);
    return tags;
  }

  /** Marks the node not born and its metrics stale; returns the stale output (if any tags). */
  function takeOffline(n: NodeState, reason: string, nowMs: number): SparkplugOutput[] {
    const tags = allTags(n);
    n.online = false;
    n.expectedSeq = null;
    n.held.clear();
    n.waitingSinceMs = null;
    for (const d of n.devices.values()) d.online = false;
    return tags.length > 0 ? [{ kind: "stale", tags, reason, timeMs: nowMs }] : [];
  }

  function rebirth(n: NodeState, reason: string, nowMs: number): SparkplugOutput[] {
    const out = n.online ? takeOffline(n, `rebirth requested: ${reason}`, nowMs) : [];
    n.held.clear();
    n.waitingSinceMs = null;
    if (n.lastRebirthMs !== null && nowMs - n.lastRebirthMs < holdOffMs) return out;
    n.lastRebirthMs = nowMs;
    n.rebirthsRequested++;
    out.push({
      kind: "rebirth",
      groupId: n.groupId,
      edgeNodeId: n.edgeNodeId,
      topic: `spBv1.0/${n.groupId}/NCMD/${n.edgeNodeId}`,
      payload: encodeRebirthCommand(nowMs),
      reason,
    });
    return out;
  }

  /** Resolves metric names, emitting values; returns a rebirth reason when a metric is unknown. */
  function values(
    n: NodeState,
    deviceId: string | undefined,
    aliases: Map<number, string>,
    names: Set<string>,
    payload: SparkplugPayload,
    nowMs: number,
    out: SparkplugOutput[],
  ): string | null {
    const vals: SparkplugTagValue[] = [];
    let problem: string | null = null;
    for (const m of payload.metrics) {
      let name = m.name;
      if (name === undefined && m.alias !== undefined) {
        name = aliases.get(m.alias);
        if (name === undefined) {
          problem ??= `unknown alias ${m.alias}`;
          continue;
        }
      }
      if (name === undefined || !names.has(name)) {
        problem ??= name === undefined ? "metric without name or alias" : `metric '${name}' not in birth`;
        continue;
      }
      const v: SparkplugTagValue = {
        tag: prefix(n, deviceId) + name,
        groupId: n.groupId,
        edgeNodeId: n.edgeNodeId,
        metric: name,
        value: m.value,
        timeMs: m.timestampMs ?? payload.timestampMs ?? nowMs,
        quality: qualityOf(m),
        datatype: m.datatype,
        isHistorical: m.isHistorical,
      };
      if (deviceId !== undefined) v.deviceId = deviceId;
      vals.push(v);
    }
    if (vals.length > 0) out.push({ kind: "values", values: vals });
    return problem;
  }

  function learnBirth(aliases: Map<number, string>, names: Set<string>, payload: SparkplugPayload): void {
    aliases.clear();
    names.clear();
    for (const m of payload.metrics) {
      if (m.name === undefined) continue;
      names.add(m.name);
      if (m.alias !== undefined) aliases.set(m.alias, m.name);
    }
  }

  /** Applies an in-sequence node message (not NBIRTH/NDEATH). */
  function apply(n: NodeState, msg: HeldMessage, nowMs: number, out: SparkplugOutput[]): void {
    const { topic, payload } = msg;
    const deviceId = topic.deviceId;
    if (topic.messageType === "NDATA") {
      const problem = values(n, undefined, n.aliases, n.names, payload, nowMs, out);
      if (problem !== null) out.push(...rebirth(n, `${problem} in NDATA`, nowMs));
      return;
    }
    if (deviceId === undefined) return;
    let d = n.devices.get(deviceId);
    if (topic.messageType === "DBIRTH") {
      if (d === undefined) {
        d = { online: true, aliases: new Map(), names: new Set() };
        n.devices.set(deviceId, d);
      }
      d.online = true;
      learnBirth(d.aliases, d.names, payload);
      values(n, deviceId, d.aliases, d.names, payload, nowMs, out);
      return;
    }
    if (d === undefined || !d.online) {
      out.push(...rebirth(n, `${topic.messageType} before DBIRTH for device '${deviceId}'`, nowMs));
      return;
    }
    if (topic.messageType === "DDEATH") {
      d.online = false;
      const tags = [...d.names].map((name) => prefix(n, deviceId) + name);
      if (tags.length > 0)
        out.push({ kind: "stale", tags, reason: `DDEATH of device '${deviceId}'`, timeMs: nowMs });
      return;
    }
    if (topic.messageType === "DDATA") {
      const problem = values(n, deviceId, d.aliases, d.names, payload, nowMs, out);
      if (problem !== null) out.push(...rebirth(n, `${problem} in DDATA of device '${deviceId}'`, nowMs));
    }
  }

  /** Applies held messages that have become in sequence. */
  function drain(n: NodeState, nowMs: number, out: SparkplugOutput[]): void {
    while (n.online && n.expectedSeq !== null) {
      const next = n.held.get(n.expectedSeq);
      if (next === undefined) break;
      n.held.delete(n.expectedSeq);
      n.expectedSeq = (n.expectedSeq + 1) % 256;
      apply(n, next, nowMs, out);
    }
    if (n.held.size === 0) n.waitingSinceMs = null;
  }

  function expire(n: NodeState, nowMs: number, out: SparkplugOutput[]): void {
    if (n.waitingSinceMs !== null && nowMs - n.waitingSinceMs >= reorderTimeoutMs) {
      const heldSeqs = [...n.held.keys()].sort((a, b) => a - b).join(", ");
      out.push(
        ...rebirth(
          n,
          `seq gap: expected ${n.expectedSeq}, held ${heldSeqs} for ${reorderTimeoutMs} ms`,
          nowMs,
        ),
      );
    }
  }

  function handle(topicText: string, payload: SparkplugPayload, nowMs: number): SparkplugOutput[] {
    const topic = parseSparkplugTopic(topicText);
    const out: SparkplugOutput[] = [];
    if (topic.messageType === "STATE" || topic.messageType === "NCMD" || topic.messageType === "DCMD") {
      return out;
    }
    const n = nodeOf(topic.groupId, topic.edgeNodeId);
    switch (topic.messageType) {
      case "NBIRTH": {
        if (n.online) out.push(...takeOffline(n, "NBIRTH replaced the previous birth", nowMs));
        n.online = true;
        n.bdSeq = bdSeqOf(payload);
        n.expectedSeq = payload.seq === undefined ? null : (payload.seq + 1) % 256;
        n.held.clear();
        n.waitingSinceMs = null;
        n.devices.clear();
        learnBirth(n.aliases, n.names, payload);
        values(n, undefined, n.aliases, n.names, payload, nowMs, out);
        return out;
      }
      case "NDEATH": {
        const bd = bdSeqOf(payload);
        if (n.bdSeq === null || bd !== n.bdSeq) {
          out.push({
            kind: "ignored",
            topic: topicText,
            reason: `NDEATH bdSeq ${bd} does not match birth bdSeq ${n.bdSeq}`,
          });
          return out;
        }
        out.push(...takeOffline(n, "NDEATH", nowMs));
        return out;
      }
      default: {
        if (!n.online) {
          out.push(...rebirth(n, `${topic.messageType} before NBIRTH`, nowMs));
          return out;
        }
        const msg: HeldMessage = { topic, topicText, payload };
        if (payload.seq === undefined || n.expectedSeq === null) {
          // Without a seq there is nothing to order by: apply as it comes.
          apply(n, msg, nowMs, out);
          return out;
        }
        const ahead = (payload.seq - n.expectedSeq + 256) % 256;
        if (ahead === 0) {
          n.expectedSeq = (n.expectedSeq + 1) % 256;
          apply(n, msg, nowMs, out);
          drain(n, nowMs, out);
        } else if (ahead < 128) {
          n.held.set(payload.seq, msg);
          n.waitingSinceMs ??= nowMs;
          if (n.held.size > maxHeld) {
            out.push(
              ...rebirth(n, `seq gap: expected ${n.expectedSeq}, more than ${maxHeld} messages held`, nowMs),
            );
          } else expire(n, nowMs, out);
        } else {
          out.push({
            kind: "ignored",
            topic: topicText,
            reason: `seq ${payload.seq} is behind the expected ${n.expectedSeq} (duplicate or late)`,
          });
        }
        return out;
      }
    }
  }

  return {
    handle,
    tick(nowMs: number): SparkplugOutput[] {
      const out: SparkplugOutput[] = [];
      for (const n of nodes.values()) expire(n, nowMs, out);
      return out;
    },
    brokerLost(nowMs: number): SparkplugOutput[] {
      const out: SparkplugOutput[] = [];
      for (const n of nodes.values()) out.push(...takeOffline(n, "broker connection lost", nowMs));
      return out;
    },
    nodes: () =>
      [...nodes.values()].map((n) => ({
        groupId: n.groupId,
        edgeNodeId: n.edgeNodeId,
        online: n.online,
        bdSeq: n.bdSeq,
        expectedSeq: n.online ? n.expectedSeq : null,
        held: n.held.size,
        devices: [...n.devices].map(([deviceId, d]) => ({
          deviceId,
          online: d.online,
          metrics: d.names.size,
        })),
        metrics: n.names.size,
        rebirthsRequested: n.rebirthsRequested,
      })),
  };
}
