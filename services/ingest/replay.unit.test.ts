import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { describe, expect, test } from "vitest";
import type { Measurements } from "../kit/generated/messages.js";
import { loadSiteModelFile } from "../model/index.js";
import { IngestError } from "./errors.js";
import { replayCsv } from "./replay.js";

const model = await loadSiteModelFile(
  new URL("../../test/fixtures/sites/ingest-demo.yaml", import.meta.url).pathname,
);

async function* text(s: string): AsyncGenerator<string> {
  yield s;
}

describe("historian CSV replay", () => {
  test("a wide file in local time replays through the pipeline with conversions and verdicts", async () => {
    // given a wide CSV written in New York local time, flow in kg/h under its source name
    const csv = [
      "time,feed_flow,TI-102,LI-103",
      "2026-01-05 08:00:00,36000,80.0,20",
      "2026-01-05 08:00:01,36036,80.1,20.2",
      "2026-01-05 08:00:02,36000,181.0,20.1",
    ].join("\n");
    const seen: Measurements[] = [];
    // when it is replayed offline
    const r = await replayCsv({
      model,
      input: text(csv),
      csv: { timeZone: "America/New_York" },
      onBatch: (d) => void seen.push(d),
    });
    // then three batches come out, times shifted by the EST offset, flow in kg/s, one value out of range.
    // Source: common practice, no source — New York is UTC−5 in January; 36 036 kg/h = 10.01 kg/s.
    expect(seen.map((d) => d.values[0]?.time)).toEqual([0, 1, 2].map((s) => Date.UTC(2026, 0, 5, 13, 0, s)));
    expect(seen[1]?.values[0]).toMatchObject({ tag: "FI-101", status: "good" });
    expect(seen[1]?.values[0]?.value).toBeCloseTo(10.01, 12);
    expect(seen[2]?.values.find((v) => v.tag === "TI-102")?.status).toBe("out-of-range");
    expect(r).toMatchObject({ batches: 3, values: 9, rejected: 1 });
    expect(r.counts).toMatchObject({ good: 8, "out-of-range": 1 });
    expect(r.health.tags.find((t) => t.tag === "TI-102")?.lastRejection?.status).toBe("out-of-range");
  });

  test("a long file with quality reads bad quality as rejected and an unknown tag as unknown", async () => {
    const dir = mkdtempSync(join(tmpdir(), "sf-replay-"));
    try {
      const file = join(dir, "long.csv");
      writeFileSync(
        file,
        [
          "timestamp,tag,value,quality",
          "2026-01-05T08:00:00Z,TI-102,80,good",
          "2026-01-05T08:00:00Z,XX-9,1,good",
          "2026-01-05T08:00:10Z,TI-102,80.2,bad",
        ].join("\n"),
      );
      const out: string[] = [];
      const r = await replayCsv({
        model,
        file,
        progress: false,
        onBatch: (d) => void out.push(...d.values.map((v) => `${v.tag}:${v.status}`)),
      });
      expect(out).toEqual(["TI-102:good", "XX-9:unknown-tag", "TI-102:bad-quality"]);
      expect(r.rejected).toBe(2);
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  });

  test("runs at a chosen speed-up instead of as fast as it can", async () => {
    // given two batches 2 s apart in plant time, when replayed at 20× speed
    const csv = "time,TI-102\n2026-01-05T08:00:00Z,80\n2026-01-05T08:00:02Z,80.1\n";
    const t0 = performance.now();
    await replayCsv({ model, input: text(csv), speedup: 20, onBatch: () => undefined });
    // then it takes at least 2 s / 20 = 100 ms of wall time (a lower bound only: no timing assertion upward)
    expect(performance.now() - t0).toBeGreaterThanOrEqual(90);
  });

  test("refuses to run with nowhere for the results to go", async () => {
    await expect(replayCsv({ model, input: text("time,TI-102\n") })).rejects.toMatchObject({
      code: "INGEST_REPLAY_OPTIONS",
    });
    await expect(replayCsv({ model, input: text("time,TI-102\n") })).rejects.toBeInstanceOf(IngestError);
  });
});
