import { describe, expect, test } from "vitest";
import { loadSiteModelFile, type SiteModel } from "../model/index.js";
import { createPipeline } from "./pipeline.js";

const MODEL_FILE = new URL("../../test/fixtures/sites/ingest-demo.yaml", import.meta.url).pathname;
const model: SiteModel = await loadSiteModelFile(MODEL_FILE);
const T0 = Date.UTC(2026, 0, 5);

describe("ingest pipeline", () => {
  test("converts a value named by its source mapping from kg/h to the tag's kg/s", () => {
    // given the demo site, whose FI-101 arrives as feed_flow in kg/h
    const p = createPipeline(model);
    // when 36 000 kg/h arrive
    const out = p.process("sim", [{ name: "feed_flow", value: 36_000, timeMs: T0 }], T0);
    // then FI-101 carries 10 kg/s, judged good.
    // Source: common practice, no source — 36 000 kg/h ÷ 3600 s/h = 10 kg/s.
    expect(out.values).toEqual([
      { tag: "FI-101", value: 10, unit: "kg/s", quality: "good", time: T0, status: "good" },
    ]);
  });

  test("converts a value whose unit field differs from the tag's unit", () => {
    // given TI-102 in degC; when a value arrives tagged with its own id but in K
    const p = createPipeline(model);
    const out = p.process("sim", [{ name: "TI-102", value: 353.15, unit: "K", timeMs: T0 }], T0);
    // then it is converted to degC.
    // Source: common practice, no source — T[°C] = T[K] − 273.15.
    expect(out.values[0]?.value).toBeCloseTo(80, 10);
    expect(out.values[0]?.status).toBe("good");
  });

  test("judges a unit that cannot be converted as bad quality and explains why", () => {
    const p = createPipeline(model);
    const out = p.process("sim", [{ name: "TI-102", value: 3, unit: "kg", timeMs: T0 }], T0);
    expect(out.values[0]?.status).toBe("bad-quality");
    const h = p.health(T0, 10).tags.find((t) => t.tag === "TI-102");
    expect(h?.lastRejection?.detail).toMatch(/cannot be converted to the tag unit 'degC'/);
  });

  test("publishes an unknown name with status unknown-tag and lists it in the health report", () => {
    const p = createPipeline(model);
    const out = p.process("sim", [{ name: "XX-1", value: 5, timeMs: T0 }], T0);
    expect(out.values).toEqual([{ tag: "XX-1", value: 5, quality: "good", time: T0, status: "unknown-tag" }]);
    expect(out.rejected).toBe(1);
    const h = p.health(T0, 10);
    expect(h.unknown).toEqual([{ name: "XX-1", source: "sim", count: 1, lastTimeMs: T0 }]);
    expect(h.totals["unknown-tag"]).toBe(1);
  });

  test("explains an out-of-range value with the tag's range and unit", () => {
    const p = createPipeline(model);
    p.process("sim", [{ name: "TI-102", value: 151, timeMs: T0 }], T0);
    const h = p.health(T0, 10).tags.find((t) => t.tag === "TI-102");
    expect(h?.lastRejection).toEqual({
      status: "out-of-range",
      value: 151,
      timeMs: T0,
      detail: "151 degC is outside [0, 150]",
    });
  });

  test("explains a spike with the rate against the last good value", () => {
    const p = createPipeline(model);
    p.process("sim", [{ name: "TI-102", value: 80, timeMs: T0 }], T0);
    const out = p.process("sim", [{ name: "TI-102", value: 90, timeMs: T0 + 2000 }], T0 + 2000);
    expect(out.values[0]?.status).toBe("spike");
    // (90 − 80) °C / 2 s = 5 °C/s against the demo site's limit of 3 °C/s
    expect(p.health(T0 + 2000, 10).tags.find((t) => t.tag === "TI-102")?.lastRejection?.detail).toBe(
      "changed 5 degC/s since the last good value; limit 3 degC/s",
    );
  });

  test("sends one stale marker for a tag that falls silent, and none again until it speaks", () => {
    // given all three tags at T0, then only FI-101 for 20 s (TI-102 and LI-103 go quiet; staleAfterS 15)
    const p = createPipeline(model, { sweepEveryMs: 1000 });
    p.process(
      "sim",
      [
        { name: "feed_flow", value: 36_000, timeMs: T0 },
        { name: "TI-102", value: 80, timeMs: T0 },
        { name: "LI-103", value: 20, timeMs: T0 },
      ],
      T0,
    );
    const markers: string[] = [];
    for (let s = 1; s <= 20; s++) {
      const out = p.process(
        "sim",
        [{ name: "feed_flow", value: 36_000 + s, timeMs: T0 + s * 1000 }],
        T0 + s * 1000,
      );
      for (const v of out.values) if (v.status === "stale") markers.push(`${v.tag}@${(v.time - T0) / 1000}`);
    }
    // then each silent tag gets exactly one marker, at the first sweep past 15 s
    expect(markers).toEqual(["TI-102@16", "LI-103@16"]);
    const h = p.health(T0 + 20_000, 10);
    expect(h.tags.find((t) => t.tag === "TI-102")).toMatchObject({ status: "stale", healthy: false });
    expect(h.tags.find((t) => t.tag === "FI-101")).toMatchObject({ status: "good", healthy: true });
    // when TI-102 speaks again it is good, and its health recovers
    p.process("sim", [{ name: "TI-102", value: 80.1, timeMs: T0 + 21_000 }], T0 + 21_000);
    expect(p.health(T0 + 21_000, 10).tags.find((t) => t.tag === "TI-102")?.status).toBe("good");
  });

  test("counts per window reset at each health report while totals keep growing", () => {
    const p = createPipeline(model);
    p.process("sim", [{ name: "LI-103", value: 20, timeMs: T0 }], T0);
    const a = p.health(T0, 10);
    p.process("sim", [{ name: "LI-103", value: 21, timeMs: T0 + 1000 }], T0 + 1000);
    const b = p.health(T0 + 1000, 10);
    expect(a.window.good).toBe(1);
    expect(b.window.good).toBe(1);
    expect(b.totals.good).toBe(2);
    expect(b.sinceMs).toBe(T0);
    expect(b.tags.find((t) => t.tag === "LI-103")?.counts.good).toBe(2);
  });

  test("marks named tags stale on request (a Sparkplug death) once", () => {
    const p = createPipeline(model);
    p.process("g/n", [{ name: "TI-102", value: 80, timeMs: T0 }], T0);
    const first = p.markStale("g/n", ["TI-102", "nope"], "NDEATH", T0 + 1);
    const again = p.markStale("g/n", ["TI-102"], "NDEATH", T0 + 2);
    expect(first.map((v) => [v.tag, v.status, v.value])).toEqual([["TI-102", "stale", null]]);
    expect(again).toEqual([]);
  });
});
