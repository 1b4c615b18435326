import { get as getSparkplugCodec } from "sparkplug-payload";
import { describe, expect, test } from "vitest";
import { sparkplugPayloads } from "./sparkplug-out.js";

const codec = getSparkplugCodec("spBv1.0");

/** uint64 fields decode as Long objects (LIBRARY-NOTES); read them as numbers. */
const num = (v: unknown): number =>
  typeof v === "number"
    ? v
    : v && typeof v === "object" && "low" in v
      ? Number((v as { low: number }).low)
      : Number.NaN;

describe("Sparkplug B payloads of the plant", () => {
  test("a birth declares every tag with an alias and the bdSeq; data carries values by alias with its seq", () => {
    // given two tags
    const p = sparkplugPayloads(["TI-101", "FI-102"]);
    // when a birth and a data message are encoded and decoded again
    const birth = codec?.decodePayload(
      codec.encodePayload(p.birth(new Map([["TI-101", 70.5]]), 3, 1000)),
    ) as {
      seq: unknown;
      metrics: { name?: string; alias?: unknown; value?: unknown }[];
    };
    const data = codec?.decodePayload(
      codec.encodePayload(p.data([{ tag: "FI-102", value: 1.8 }], 7, 2000)),
    ) as {
      seq: unknown;
      metrics: { name?: string; alias?: unknown; value?: unknown }[];
    };
    // then the birth has seq 0, bdSeq 3, and aliases 1 and 2 by name
    // Source: Eclipse Sparkplug Specification 3.0 — NBIRTH seq 0, bdSeq metric, aliases declared in the birth (from memory).
    expect(num(birth.seq)).toBe(0);
    expect(num(birth.metrics.find((m) => m.name === "bdSeq")?.value)).toBe(3);
    expect(num(birth.metrics.find((m) => m.name === "TI-101")?.alias)).toBe(1);
    expect(birth.metrics.find((m) => m.name === "TI-101")?.value).toBe(70.5);
    expect(num(birth.metrics.find((m) => m.name === "FI-102")?.alias)).toBe(2);
    // and the data message names no metric, only alias 2 with the value, at seq 7
    expect(num(data.seq)).toBe(7);
    expect(data.metrics).toHaveLength(1);
    expect(data.metrics[0]?.name ?? "").toBe("");
    expect(num(data.metrics[0]?.alias)).toBe(2);
    expect(data.metrics[0]?.value).toBe(1.8);
  });
});
