import { describe, expect, test } from "vitest";
import { escapeXml, niceTicks, renderLineChart, renderReport, thin, timeTicks } from "./report.js";

/** The x, y pairs of every M/L command in an SVG path. */
const pathPoints = (svg: string): number[][] =>
  [...svg.matchAll(/<path d="([^"]+)"/g)].flatMap((m) =>
    [...(m[1] ?? "").matchAll(/[ML](-?[\d.]+) (-?[\d.]+)/g)].map((p) => [Number(p[1]), Number(p[2])]),
  );

describe("axis ticks", () => {
  test("steps are 1, 2 or 5 times a power of ten and cover the range", () => {
    // common practice, no source: the 1-2-5 rule of axis labelling
    expect(niceTicks(0, 10, 5)).toEqual([0, 2, 4, 6, 8, 10]);
    expect(niceTicks(0.13, 0.91, 4)).toEqual([0.2, 0.4, 0.6, 0.8]);
    expect(niceTicks(-3, 3, 6)).toEqual([-3, -2, -1, 0, 1, 2, 3]);
    expect(niceTicks(5, 5)).toEqual([5]);
  });

  test("time ticks fall on whole hours for a day of data", () => {
    const t0 = Date.UTC(2026, 0, 5);
    const ticks = timeTicks(t0, t0 + 86_400_000, 6);
    expect(ticks.length).toBeGreaterThanOrEqual(4);
    for (const t of ticks) expect(t % 3_600_000).toBe(0);
  });
});

describe("the SVG line chart", () => {
  test("draws each point inside the plot frame, higher values higher up", () => {
    // given a rising line
    const svg = renderLineChart(
      {
        title: "rise",
        timeAxis: false,
        series: [
          {
            name: "y",
            points: [
              [0, 0],
              [1, 1],
              [2, 4],
            ],
          },
        ],
      },
      { width: 400, height: 200 },
    );
    // when its path is read back
    const pts = pathPoints(svg);
    // then three points, left to right, each higher on screen (smaller y) than the last, inside the frame
    expect(pts).toHaveLength(3);
    expect(pts[0]![0]).toBeLessThan(pts[1]![0]!);
    expect(pts[1]![1]).toBeLessThan(pts[0]![1]!);
    expect(pts[2]![1]).toBeLessThan(pts[1]![1]!);
    for (const [x, y] of pts) {
      expect(x).toBeGreaterThanOrEqual(64);
      expect(x).toBeLessThanOrEqual(400 - 16);
      expect(y).toBeGreaterThanOrEqual(28);
      expect(y).toBeLessThanOrEqual(200 - 36);
    }
  });

  test("a missing value breaks the line instead of joining across it", () => {
    const svg = renderLineChart({
      title: "gap",
      timeAxis: false,
      series: [
        {
          name: "y",
          points: [
            [0, 1],
            [1, 2],
            [2, Number.NaN],
            [3, 2],
            [4, 1],
          ],
        },
      ],
    });
    const d = /<path d="([^"]+)"/.exec(svg)?.[1] ?? "";
    expect(d.match(/M/g)).toHaveLength(2);
  });

  test("escapes titles and names, and says 'no data' for an empty chart", () => {
    const svg = renderLineChart({ title: "a<b & 'c'", series: [{ name: "<x>", points: [] }] });
    expect(svg).toContain("a&lt;b &amp; &#39;c&#39;");
    expect(svg).toContain("no data");
    expect(svg).not.toContain("<x>");
  });

  test("a constant series still gets a usable vertical range", () => {
    const svg = renderLineChart({
      title: "flat",
      timeAxis: false,
      series: [
        {
          name: "y",
          points: [
            [0, 5],
            [1, 5],
          ],
        },
      ],
    });
    const pts = pathPoints(svg);
    expect(pts).toHaveLength(2);
    expect(Number.isFinite(pts[0]![1])).toBe(true);
  });

  test("thinning keeps a spike that a plain stride would drop", () => {
    const points: Array<[number, number]> = Array.from({ length: 10_000 }, (_, i) => [
      i,
      i === 4321 ? 100 : 0,
    ]);
    const kept = thin(points, 300);
    expect(kept.length).toBeLessThanOrEqual(310);
    expect(kept.some((p) => p[1] === 100)).toBe(true);
  });
});

describe("the HTML report", () => {
  test("is one self-contained page: inline SVG, no script, no external reference", () => {
    const html = renderReport({
      title: "Replay <test>",
      summary: [["batches", "12"]],
      charts: [
        {
          title: "x",
          timeAxis: false,
          series: [
            {
              name: "s",
              points: [
                [0, 1],
                [1, 2],
              ],
            },
          ],
        },
      ],
      tables: [{ caption: "t", header: ["a"], rows: [["1"]] }],
    });
    expect(html).toContain("<svg");
    expect(html).toContain(escapeXml("Replay <test>"));
    expect(html).not.toMatch(/<script|src=|href=/);
  });
});
