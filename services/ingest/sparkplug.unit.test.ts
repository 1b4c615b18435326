import { get } from "sparkplug-payload";
import { describe, expect, test } from "vitest";
import { IngestError } from "./errors.js";
import {
  createSparkplugHost,
  decodeSparkplugPayload,
  encodeRebirthCommand,
  parseSparkplugTopic,
  type SparkplugOutput,
  type SparkplugPayload,
} from "./sparkplug.js";

const codec = get("spBv1.0")!;
const T0 = 1_700_000_000_000;

/** A tiny protobuf reader: field number → list of raw values (bigint for varint/fixed, bytes for length-delimited). */
type Field = { wire: number; varint?: bigint; bytes?: Uint8Array };
function readFields(buf: Uint8Array): Map<number, Field[]> {
  const out = new Map<number, Field[]>();
  let p = 0;
  const varint = (): bigint => {
    let result = 0n;
    let shift = 0n;
    for (;;) {
      const b = buf[p++]!;
      result |= BigInt(b & 0x7f) << shift;
      if ((b & 0x80) === 0) return result;
      shift += 7n;
    }
  };
  while (p < buf.length) {
    const key = Number(varint());
    const field = key >>> 3;
    const wire = key & 7;
    let f: Field;
    if (wire === 0) f = { wire, varint: varint() };
    else if (wire === 2) {
      const len = Number(varint());
      f = { wire, bytes: buf.subarray(p, p + len) };
      p += len;
    } else if (wire === 1) {
      f = { wire, bytes: buf.subarray(p, p + 8) };
      p += 8;
    } else if (wire === 5) {
      f = { wire, bytes: buf.subarray(p, p + 4) };
      p += 4;
    } else throw new Error(`wire type ${wire}`);
    out.set(field, [...(out.get(field) ?? []), f]);
  }
  return out;
}
const text = (b?: Uint8Array) => new TextDecoder().decode(b);

function birth(seq: number, bdSeq: number, metrics: SparkplugPayload["metrics"] = []): SparkplugPayload {
  return {
    timestampMs: T0,
    seq,
    metrics: [
      { name: "bdSeq", datatype: "UInt64", value: bdSeq, isNull: false, isHistorical: false },
      { name: "FI-101", alias: 1, datatype: "Double", value: 10, isNull: false, isHistorical: false },
      { name: "TI-102", alias: 2, datatype: "Float", value: 80, isNull: false, isHistorical: false },
      ...metrics,
    ],
  };
}
function data(seq: number, alias: number, value: number): SparkplugPayload {
  return {
    timestampMs: T0 + seq,
    seq,
    metrics: [{ alias, datatype: "Double", value, isNull: false, isHistorical: false }],
  };
}
const kinds = (out: SparkplugOutput[]) => out.map((o) => o.kind);
const rebirths = (out: SparkplugOutput[]) => out.flatMap((o) => (o.kind === "rebirth" ? [o] : []));
const NODE = "spBv1.0/plant/NDATA/edge1";

describe("payload codec", () => {
  test("a payload encoded by sparkplug-payload decodes to the same metrics with plain-number times", () => {
    // given a birth-like payload with 64-bit fields
    const bytes = codec.encodePayload({
      timestamp: T0 + 123,
      seq: 0,
      metrics: [
        { name: "bdSeq", type: "UInt64", value: 7 },
        { name: "FI-101", alias: 1, timestamp: T0 + 100, type: "Double", value: 12.5 },
        { name: "PI-7", alias: 2, type: "Int64", value: -5 },
        { name: "CNT", alias: 3, type: "UInt32", value: 3_000_000_000 },
        { name: "ON", alias: 4, type: "Boolean", value: true },
        { name: "TI-9", alias: 5, type: "Float", value: null },
      ],
    });
    // when it is decoded
    const p = decodeSparkplugPayload(bytes);
    // then names, aliases, values and times come back as plain numbers
    expect(p.timestampMs).toBe(T0 + 123);
    expect(p.seq).toBe(0);
    expect(p.metrics.map((m) => [m.name, m.alias, m.value])).toEqual([
      ["bdSeq", undefined, 7],
      ["FI-101", 1, 12.5],
      ["PI-7", 2, -5],
      ["CNT", 3, 3_000_000_000],
      ["ON", 4, true],
      ["TI-9", 5, null],
    ]);
    expect(p.metrics[1]!.timestampMs).toBe(T0 + 100);
    expect(p.metrics[5]!.isNull).toBe(true);
  });

  test("the encoded bytes carry the field numbers the Sparkplug 3.0 specification names", () => {
    // given a payload with one metric of each common scalar kind
    const bytes = codec.encodePayload({
      timestamp: T0,
      seq: 9,
      metrics: [
        { name: "D", alias: 3, timestamp: T0 + 1, type: "Double", value: 1.5 },
        { name: "I", type: "Int32", value: 7 },
        { name: "L", type: "Int64", value: 123 },
        { name: "F", type: "Float", value: 0.5 },
        { name: "B", type: "Boolean", value: true },
        { name: "S", type: "String", value: "x" },
        { name: "N", type: "Double", value: null },
      ],
    });
    // when the raw protobuf is read field by field
    const top = readFields(bytes);
    const metrics = (top.get(2) ?? []).map((f) => readFields(f.bytes!));
    // then, Source: Eclipse Sparkplug Specification 3.0, sparkplug_b.proto — Payload: timestamp=1,
    // metrics=2, seq=3; Metric: name=1, alias=2, timestamp=3, datatype=4, is_null=7, int_value=10,
    // long_value=11, float_value=12, double_value=13, boolean_value=14, string_value=15; DataType:
    // Int32=3, Int64=4, Float=9, Double=10, Boolean=11, String=12 (from memory, not re-read).
    expect(top.get(1)![0]!.varint).toBe(BigInt(T0));
    expect(top.get(3)![0]!.varint).toBe(9n);
    expect(metrics).toHaveLength(7);
    const [d, i, l, f, b, s, n] = metrics as Map<number, Field[]>[];
    expect(text(d!.get(1)![0]!.bytes)).toBe("D");
    expect(d!.get(2)![0]!.varint).toBe(3n);
    expect(d!.get(3)![0]!.varint).toBe(BigInt(T0 + 1));
    expect(d!.get(4)![0]!.varint).toBe(10n);
    expect(Buffer.from(d!.get(13)![0]!.bytes!).readDoubleLE(0)).toBe(1.5);
    expect(i!.get(4)![0]!.varint).toBe(3n);
    expect(i!.get(10)![0]!.varint).toBe(7n);
    expect(l!.get(4)![0]!.varint).toBe(4n);
    expect(l!.get(11)![0]!.varint).toBe(123n);
    expect(f!.get(4)![0]!.varint).toBe(9n);
    expect(Buffer.from(f!.get(12)![0]!.bytes!).readFloatLE(0)).toBe(0.5);
    expect(b!.get(4)![0]!.varint).toBe(11n);
    expect(b!.get(14)![0]!.varint).toBe(1n);
    expect(s!.get(4)![0]!.varint).toBe(12n);
    expect(text(s!.get(15)![0]!.bytes)).toBe("x");
    expect(n!.get(7)![0]!.varint).toBe(1n);
    expect(n!.get(13)).toBeUndefined();
  });

  test("sparkplug-payload writes UInt32 to long_value, not the int_value the specification names", () => {
    // given a UInt32 metric encoded by the codec
    const bytes = codec.encodePayload({ metrics: [{ name: "U", type: "UInt32", value: 5 }] });
    const m = readFields(readFields(bytes).get(2)![0]!.bytes!);
    // then it sits in field 11; Source: Sparkplug 3.0 specification names int_value (10) for UInt32
    // (from memory) — this records the codec's divergence (LIBRARY-NOTES), so a change is noticed.
    expect(m.get(4)![0]!.varint).toBe(7n);
    expect(m.get(11)![0]!.varint).toBe(5n);
    expect(m.get(10)).toBeUndefined();
  });

  test("the rebirth command is an NCMD payload with Node Control/Rebirth = true", () => {
    const m = readFields(readFields(encodeRebirthCommand(T0)).get(2)![0]!.bytes!);
    // Source: Sparkplug 3.0 specification, rebirth request metric and field numbers (from memory).
    expect(text(m.get(1)![0]!.bytes)).toBe("Node Control/Rebirth");
    expect(m.get(4)![0]!.varint).toBe(11n);
    expect(m.get(14)![0]!.varint).toBe(1n);
  });

  test("undecodable bytes raise INGEST_SPARKPLUG_PAYLOAD", () => {
    expect(() => decodeSparkplugPayload(new Uint8Array([0x0a, 0xff]))).toThrow(IngestError);
  });
});

describe("topics", () => {
  test("parses node and device topics and refuses others", () => {
    expect(parseSparkplugTopic("spBv1.0/g/DDATA/n/d")).toEqual({
      groupId: "g",
      messageType: "DDATA",
      edgeNodeId: "n",
      deviceId: "d",
    });
    expect(parseSparkplugTopic("spBv1.0/STATE/host1").messageType).toBe("STATE");
    for (const bad of ["spBv1.0/g/NDATA", "spBv1.0/g/DDATA/n", "spAv1.0/g/NDATA/n", "spBv1.0/g/XDATA/n"]) {
      expect(() => parseSparkplugTopic(bad)).toThrow(IngestError);
    }
  });
});

describe("host state", () => {
  test("resolves aliases from the birth and emits values with quality", () => {
    const host = createSparkplugHost();
    host.handle("spBv1.0/plant/NBIRTH/edge1", birth(0, 1), T0);
    const out = host.handle(NODE, data(1, 2, 81.5), T0 + 10);
    expect(out).toEqual([
      {
        kind: "values",
        values: [
          {
            tag: "plant/edge1/TI-102",
            groupId: "plant",
            edgeNodeId: "edge1",
            metric: "TI-102",
            value: 81.5,
            timeMs: T0 + 1,
            quality: "good",
            datatype: "Double",
            isHistorical: false,
          },
        ],
      },
    ]);
  });

  test("holds an out-of-order message and applies both in order when the gap closes in time", () => {
    const host = createSparkplugHost({ reorderTimeoutMs: 1000 });
    host.handle("spBv1.0/plant/NBIRTH/edge1", birth(0, 1), T0);
    const early = host.handle(NODE, data(2, 1, 12), T0 + 10);
    const late = host.handle(NODE, data(1, 1, 11), T0 + 500);
    expect(early).toEqual([]);
    const vals = late.flatMap((o) => (o.kind === "values" ? o.values.map((v) => v.value) : []));
    expect(vals).toEqual([11, 12]);
    expect(host.tick(T0 + 5000)).toEqual([]);
  });

  test("a seq gap still open after the reorder timeout asks the node to rebirth", () => {
    // given a born node and a message that skips seq 1
    const host = createSparkplugHost({ reorderTimeoutMs: 1000 });
    host.handle("spBv1.0/plant/NBIRTH/edge1", birth(0, 1), T0);
    host.handle(NODE, data(2, 1, 12), T0);
    // when the timeout has not yet passed, then nothing; when it has, a rebirth request and stale values
    expect(host.tick(T0 + 999)).toEqual([]);
    const out = host.tick(T0 + 1000);
    expect(kinds(out)).toEqual(["stale", "rebirth"]);
    const r = rebirths(out)[0]!;
    expect(r.topic).toBe("spBv1.0/plant/NCMD/edge1");
    expect(r.reason).toMatch(/seq gap: expected 1/);
    expect(decodeSparkplugPayload(r.payload).metrics[0]).toMatchObject({
      name: "Node Control/Rebirth",
      value: true,
    });
  });

  test("seq wraps from 255 to 0 without a gap", () => {
    const host = createSparkplugHost();
    host.handle("spBv1.0/plant/NBIRTH/edge1", birth(254, 1), T0);
    expect(kinds(host.handle(NODE, data(255, 1, 1), T0))).toEqual(["values"]);
    expect(kinds(host.handle(NODE, data(0, 1, 2), T0))).toEqual(["values"]);
    expect(host.nodes()[0]!.expectedSeq).toBe(1);
  });

  test("an unknown alias asks for a rebirth", () => {
    const host = createSparkplugHost();
    host.handle("spBv1.0/plant/NBIRTH/edge1", birth(0, 1), T0);
    const r = rebirths(host.handle(NODE, data(1, 42, 1), T0));
    expect(r).toHaveLength(1);
    expect(r[0]!.reason).toMatch(/unknown alias 42/);
  });

  test("data before birth asks for a rebirth, at most once per hold-off", () => {
    const host = createSparkplugHost({ rebirthHoldOffMs: 5000 });
    expect(rebirths(host.handle(NODE, data(7, 1, 1), T0))[0]!.reason).toMatch(/NDATA before NBIRTH/);
    expect(rebirths(host.handle(NODE, data(8, 1, 1), T0 + 1000))).toHaveLength(0);
    expect(rebirths(host.handle(NODE, data(9, 1, 1), T0 + 5000))).toHaveLength(1);
    expect(rebirths(host.handle("spBv1.0/plant/DDATA/edge2/pump", data(0, 1, 1), T0))[0]!.reason).toMatch(
      /DDATA before NBIRTH/,
    );
  });

  test("DDATA for a device that has no DBIRTH asks for a rebirth", () => {
    const host = createSparkplugHost();
    host.handle("spBv1.0/plant/NBIRTH/edge1", birth(0, 1), T0);
    const r = rebirths(host.handle("spBv1.0/plant/DDATA/edge1/pump", data(1, 1, 1), T0));
    expect(r[0]!.reason).toMatch(/before DBIRTH for device 'pump'/);
  });

  test("an NDEATH with an old bdSeq is ignored; the matching one marks node and device metrics stale", () => {
    // given a node born with bdSeq 4 and a device born under it
    const host = createSparkplugHost();
    host.handle("spBv1.0/plant/NBIRTH/edge1", birth(0, 4), T0);
    host.handle(
      "spBv1.0/plant/DBIRTH/edge1/pump",
      {
        seq: 1,
        metrics: [
          { name: "SI-1", alias: 10, datatype: "Double", value: 3, isNull: false, isHistorical: false },
        ],
      },
      T0,
    );
    // when a late NDEATH from the previous session (bdSeq 3) arrives, then it is ignored
    const old = host.handle(
      "spBv1.0/plant/NDEATH/edge1",
      { metrics: [{ name: "bdSeq", datatype: "UInt64", value: 3, isNull: false, isHistorical: false }] },
      T0 + 1,
    );
    expect(kinds(old)).toEqual(["ignored"]);
    expect(host.nodes()[0]!.online).toBe(true);
    // when the matching NDEATH arrives, then every metric of the node and its device is stale
    const dead = host.handle(
      "spBv1.0/plant/NDEATH/edge1",
      { metrics: [{ name: "bdSeq", datatype: "UInt64", value: 4, isNull: false, isHistorical: false }] },
      T0 + 2,
    );
    expect(dead).toEqual([
      {
        kind: "stale",
        tags: ["plant/edge1/bdSeq", "plant/edge1/FI-101", "plant/edge1/TI-102", "plant/edge1/pump/SI-1"],
        reason: "NDEATH",
        timeMs: T0 + 2,
      },
    ]);
    expect(host.nodes()[0]!.online).toBe(false);
  });

  test("losing the broker marks every known metric stale", () => {
    const host = createSparkplugHost();
    host.handle("spBv1.0/plant/NBIRTH/edge1", birth(0, 1), T0);
    host.handle("spBv1.0/plant/NBIRTH/edge2", birth(0, 1), T0);
    const out = host.brokerLost(T0 + 5);
    expect(out.map((o) => (o.kind === "stale" ? o.tags.length : 0))).toEqual([3, 3]);
  });

  test("honours the Quality property and is_null", () => {
    const host = createSparkplugHost();
    const q = (code: number | undefined, isNull = false) => ({
      name: `Q${code}${isNull}`,
      datatype: "Double",
      value: isNull ? null : 1,
      isNull,
      isHistorical: false,
      ...(code === undefined ? {} : { qualityCode: code }),
    });
    const out = host.handle(
      "spBv1.0/plant/NBIRTH/edge1",
      { seq: 0, metrics: [q(192), q(0), q(500), q(undefined, true)] },
      T0,
    );
    const vals = out.flatMap((o) => (o.kind === "values" ? o.values : []));
    // Source: Sparkplug 3.0 specification, "Quality" property: 192 good, 0 bad, 500 stale (from memory).
    expect(vals.map((v) => [v.quality, v.value])).toEqual([
      ["good", 1],
      ["bad", 1],
      ["stale", 1],
      ["bad", null],
    ]);
  });

  test("reads the Quality property from real payload bytes", () => {
    const bytes = codec.encodePayload({
      seq: 0,
      metrics: [
        { name: "X", type: "Double", value: 2, properties: { Quality: { type: "Int32", value: 500 } } },
      ],
    });
    expect(decodeSparkplugPayload(bytes).metrics[0]!.qualityCode).toBe(500);
  });
});
