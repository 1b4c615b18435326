/**
 * A small SVG line-chart renderer and a self-contained HTML report (no scripts, no external files),
 * for `replay --report`. Pure: data in, text out.
 */

/** One line of a chart: points (x, y); a non-finite y breaks the line. */
export interface Series {
  name: string;
  points: ReadonlyArray<readonly [number, number]>;
  /** CSS colour; default from the palette. */
  color?: string;
  /** Draw as steps (a value holds until the next), e.g. setpoints. Default false. */
  step?: boolean;
  /** Draw dots only (sparse events such as snapshot means). Default false. */
  dots?: boolean;
}

/** A chart. */
export interface Chart {
  title: string;
  /** Unit of the y axis, shown beside the title. */
  unit?: string;
  series: Series[];
  /** x is epoch milliseconds: the axis shows times. Default true. */
  timeAxis?: boolean;
  /** Vertical bands [x0, x1], e.g. the steady windows. */
  bands?: ReadonlyArray<readonly [number, number]>;
}

/** Size of one chart, px. */
export interface ChartSize {
  /** Default 880. */
  width?: number;
  /** Default 240. */
  height?: number;
}

const PALETTE = ["#1f77b4", "#d62728", "#2ca02c", "#ff7f0e", "#9467bd", "#8c564b", "#e377c2", "#17becf"];
const MARGIN = { left: 64, right: 16, top: 28, bottom: 36 };

/** Escapes text for HTML and SVG. */
export function escapeXml(text: string): string {
  return text
    .replace(/&/g, "&amp;")
    .replace(/</g, "&lt;")
    .replace(/>/g, "&gt;")
    .replace(/"/g, "&quot;")
    .replace(/'/g, "&#39;");
}

/**
 * "Nice" tick values covering [lo, hi]: steps of 1, 2 or 5 × 10^k, about `count` of them
 * (the usual axis-labelling rule; common practice, no source).
 */
export function niceTicks(lo: number, hi: number, count = 5): number[] {
  if (!Number.isFinite(lo) || !Number.isFinite(hi)) return [];
  if (hi < lo) [lo, hi] = [hi, lo];
  if (hi === lo) return [lo];
  const raw = (hi - lo) / Math.max(1, count);
  const mag = 10 ** Math.floor(Math.log10(raw));
  const norm = raw / mag;
  const step = (norm < 1.5 ? 1 : norm < 3 ? 2 : norm < 7 ? 5 : 10) * mag;
  const first = Math.ceil(lo / step - 1e-9) * step;
  const ticks: number[] = [];
  // Multiples of the step, rounded to 12 digits so 0.1 + 0.2 style round-off does not show in labels.
  for (let i = 0; first + i * step <= hi + step * 1e-9; i++) {
    const v = first + i * step;
    ticks.push(Math.abs(v) < step * 1e-9 ? 0 : Number(v.toPrecision(12)));
  }
  return ticks;
}

/** Tick times for a time axis: whole minutes, hours or days, about `count` of them. */
export function timeTicks(lo: number, hi: number, count = 6): number[] {
  if (!(hi > lo)) return Number.isFinite(lo) ? [lo] : [];
  const steps = [
    60e3, 300e3, 900e3, 1800e3, 3600e3, 7200e3, 10800e3, 21600e3, 43200e3, 86400e3, 172800e3, 604800e3,
  ];
  const step = steps.find((s) => (hi - lo) / s <= count) ?? steps[steps.length - 1]!;
  const ticks: number[] = [];
  for (let t = Math.ceil(lo / step) * step; t <= hi; t += step) ticks.push(t);
  return ticks;
}

function tickLabel(v: number, step: number): string {
  const decimals = Math.max(0, Math.min(6, -Math.floor(Math.log10(Math.abs(step) || 1) + 1e-9)));
  return v.toFixed(decimals);
}

function timeLabel(ms: number, spanMs: number): string {
  const iso = new Date(ms).toISOString();
  if (spanMs > 2 * 86_400_000) return `${iso.slice(5, 10)} ${iso.slice(11, 16)}`;
  return iso.slice(11, 16);
}

/** Keeps at most about `max` points: per x bucket, the first, lowest and highest point (spikes survive). */
export function thin(
  points: ReadonlyArray<readonly [number, number]>,
  max: number,
): Array<readonly [number, number]> {
  if (points.length <= max) return [...points];
  const buckets = Math.max(1, Math.floor(max / 3));
  const x0 = points[0]![0];
  const span = points[points.length - 1]![0] - x0 || 1;
  const out: Array<readonly [number, number]> = [];
  let bucket = -1;
  let lo: readonly [number, number] | undefined;
  let hi: readonly [number, number] | undefined;
  const flush = () => {
    if (lo && hi) {
      if (lo[0] <= hi[0]) out.push(lo, ...(hi !== lo ? [hi] : []));
      else out.push(hi, lo);
    }
  };
  for (const p of points) {
    const b = Math.min(buckets - 1, Math.floor(((p[0] - x0) / span) * buckets));
    if (b !== bucket || !Number.isFinite(p[1])) {
      flush();
      bucket = b;
      lo = hi = undefined;
      if (!Number.isFinite(p[1])) {
        out.push(p);
        continue;
      }
    }
    if (!lo || p[1] < lo[1]) lo = p;
    if (!hi || p[1] > hi[1]) hi = p;
  }
  flush();
  return out;
}

/** Renders one chart as an SVG element (a string). Empty data give an empty frame saying "no data". */
export function renderLineChart(chart: Chart, size: ChartSize = {}): string {
  const width = size.width ?? 880;
  const height = size.height ?? 240;
  const plotW = width - MARGIN.left - MARGIN.right;
  const plotH = height - MARGIN.top - MARGIN.bottom;
  const timeAxis = chart.timeAxis ?? true;
  const finite = chart.series.flatMap((s) =>
    s.points.filter((p) => Number.isFinite(p[0]) && Number.isFinite(p[1])),
  );
  const title = `${escapeXml(chart.title)}${chart.unit ? ` <tspan fill="#666">[${escapeXml(chart.unit)}]</tspan>` : ""}`;
  const head = `<svg xmlns="http://www.w3.org/2000/svg" width="${width}" height="${height}" viewBox="0 0 ${width} ${height}" role="img" aria-label="${escapeXml(chart.title)}" font-family="sans-serif" font-size="11">`;
  const titleEl = `<text x="${MARGIN.left}" y="16" font-size="13" font-weight="bold">${title}</text>`;
  if (finite.length === 0) {
    return `${head}${titleEl}<rect x="${MARGIN.left}" y="${MARGIN.top}" width="${plotW}" height="${plotH}" fill="none" stroke="#ccc"/><text x="${MARGIN.left + plotW / 2}" y="${MARGIN.top + plotH / 2}" text-anchor="middle" fill="#999">no data</text></svg>`;
  }
  let xMin = Math.min(...finite.map((p) => p[0]));
  let xMax = Math.max(...finite.map((p) => p[0]));
  let yMin = Math.min(...finite.map((p) => p[1]));
  let yMax = Math.max(...finite.map((p) => p[1]));
  if (xMax === xMin) {
    xMin -= 1;
    xMax += 1;
  }
  if (yMax === yMin) {
    const pad = Math.abs(yMin) * 0.01 || 1;
    yMin -= pad;
    yMax += pad;
  } else {
    const pad = (yMax - yMin) * 0.05;
    yMin -= pad;
    yMax += pad;
  }
  const sx = (x: number) => MARGIN.left + ((x - xMin) / (xMax - xMin)) * plotW;
  const sy = (y: number) => MARGIN.top + (1 - (y - yMin) / (yMax - yMin)) * plotH;
  const r = (v: number) => v.toFixed(1);
  const parts: string[] = [head, titleEl];
  for (const [a, b] of chart.bands ?? []) {
    const x0 = Math.max(MARGIN.left, sx(a));
    const x1 = Math.min(MARGIN.left + plotW, sx(b));
    if (x1 > x0)
      parts.push(
        `<rect x="${r(x0)}" y="${MARGIN.top}" width="${r(x1 - x0)}" height="${plotH}" fill="#2ca02c" fill-opacity="0.12"/>`,
      );
  }
  const yt = niceTicks(yMin, yMax, 5);
  const yStep = yt.length > 1 ? yt[1]! - yt[0]! : Math.abs(yMax - yMin);
  for (const v of yt) {
    const y = sy(v);
    parts.push(
      `<line x1="${MARGIN.left}" x2="${MARGIN.left + plotW}" y1="${r(y)}" y2="${r(y)}" stroke="#eee"/>`,
    );
    parts.push(
      `<text x="${MARGIN.left - 6}" y="${r(y + 4)}" text-anchor="end">${escapeXml(tickLabel(v, yStep))}</text>`,
    );
  }
  const xt = timeAxis ? timeTicks(xMin, xMax, 6) : niceTicks(xMin, xMax, 6);
  const xStep = xt.length > 1 ? xt[1]! - xt[0]! : xMax - xMin;
  for (const v of xt) {
    const x = sx(v);
    parts.push(
      `<line x1="${r(x)}" x2="${r(x)}" y1="${MARGIN.top}" y2="${MARGIN.top + plotH}" stroke="#f3f3f3"/>`,
    );
    const label = timeAxis ? timeLabel(v, xMax - xMin) : tickLabel(v, xStep);
    parts.push(
      `<text x="${r(x)}" y="${MARGIN.top + plotH + 14}" text-anchor="middle">${escapeXml(label)}</text>`,
    );
  }
  if (timeAxis) {
    parts.push(
      `<text x="${MARGIN.left + plotW}" y="${height - 4}" text-anchor="end" fill="#666">UTC, ${escapeXml(new Date(xMin).toISOString().slice(0, 10))} …</text>`,
    );
  }
  parts.push(
    `<rect x="${MARGIN.left}" y="${MARGIN.top}" width="${plotW}" height="${plotH}" fill="none" stroke="#999"/>`,
  );
  chart.series.forEach((s, i) => {
    const color = escapeXml(s.color ?? PALETTE[i % PALETTE.length]!);
    const pts = thin(s.points, Math.max(50, plotW * 2));
    if (s.dots) {
      for (const [x, y] of pts) {
        if (Number.isFinite(x) && Number.isFinite(y))
          parts.push(`<circle cx="${r(sx(x))}" cy="${r(sy(y))}" r="2.5" fill="${color}"/>`);
      }
    } else {
      let d = "";
      let pen = false;
      for (const [x, y] of pts) {
        if (!Number.isFinite(x) || !Number.isFinite(y)) {
          pen = false;
          continue;
        }
        if (!pen) d += `M${r(sx(x))} ${r(sy(y))}`;
        else if (s.step) d += `H${r(sx(x))}V${r(sy(y))}`;
        else d += `L${r(sx(x))} ${r(sy(y))}`;
        pen = true;
      }
      if (d) parts.push(`<path d="${d}" fill="none" stroke="${color}" stroke-width="1.3"/>`);
    }
    const lx = MARGIN.left + 8 + (i % 4) * 200;
    const ly = MARGIN.top + 12 + Math.floor(i / 4) * 13;
    parts.push(`<rect x="${lx}" y="${ly - 8}" width="10" height="3" fill="${color}"/>`);
    parts.push(`<text x="${lx + 14}" y="${ly - 3}">${escapeXml(s.name)}</text>`);
  });
  parts.push("</svg>");
  return parts.join("");
}

/** The content of a report. */
export interface Report {
  title: string;
  /** Lines under the title. */
  subtitle?: string[];
  /** Key figures as label/value rows. */
  summary?: Array<readonly [string, string]>;
  charts: Chart[];
  /** Free tables: a caption, a header row and rows. */
  tables?: Array<{ caption: string; header: string[]; rows: string[][] }>;
}

/** Renders a report as one self-contained HTML page with inline SVG. */
export function renderReport(report: Report): string {
  const rows = (report.summary ?? [])
    .map(([k, v]) => `<tr><th>${escapeXml(k)}</th><td>${escapeXml(v)}</td></tr>`)
    .join("");
  const tables = (report.tables ?? [])
    .map(
      (t) =>
        `<table><caption>${escapeXml(t.caption)}</caption><tr>${t.header.map((h) => `<th>${escapeXml(h)}</th>`).join("")}</tr>${t.rows
          .map((r) => `<tr>${r.map((c) => `<td>${escapeXml(c)}</td>`).join("")}</tr>`)
          .join("")}</table>`,
    )
    .join("");
  return `<!doctype html>
<html lang="en"><head><meta charset="utf-8"><title>${escapeXml(report.title)}</title>
<style>body{font-family:sans-serif;margin:24px;color:#222;max-width:920px}h1{font-size:20px}
table{border-collapse:collapse;margin:12px 0}th,td{text-align:left;padding:2px 10px;border-bottom:1px solid #eee;font-size:13px}
caption{text-align:left;font-weight:bold;padding:6px 0}figure{margin:16px 0}p.sub{color:#555;margin:2px 0}</style></head>
<body><h1>${escapeXml(report.title)}</h1>${(report.subtitle ?? []).map((s) => `<p class="sub">${escapeXml(s)}</p>`).join("")}
${rows ? `<table>${rows}</table>` : ""}
${report.charts.map((c) => `<figure>${renderLineChart(c)}</figure>`).join("\n")}
${tables}
</body></html>
`;
}
