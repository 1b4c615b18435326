/**
 * `steadfast replay <csv> --site <site.yaml>`: a historian CSV through ingest's pipeline
 * (services/ingest/replay.ts) and the steady-state detector offline, with a progress bar and a
 * summary: batches, values, rejections by reason, steady snapshots found. `--loop` also runs each
 * snapshot through reconcile, estimate and optimize offline (what the loop would have proposed;
 * the data are not changed by it). `--report out.html` draws the key tags, the steady windows,
 * the snapshot means and, with --loop, estimated parameters, proposed setpoints and profit.
 */
import { writeFileSync } from "node:fs";
import { replayCsv } from "../../services/ingest/replay.js";
import type { Proposal, Snapshot as SnapshotData } from "../../services/kit/generated/messages.js";
import { loadSiteModelFile, type SiteModel } from "../../services/model/index.js";
import { createDetector } from "../../services/steady/detector.js";
import { detectorBatches, detectorOptions, snapshotData } from "../../services/steady/index.js";
import { numberFlag, parseCommandArgs, required, str } from "../args.js";
import { CliError } from "../errors.js";
import { fmt } from "../format.js";
import type { CommandContext } from "../io.js";
import { type Chart, renderReport, type Series } from "../report.js";

const USAGE =
  "steadfast replay <file.csv> --site <site.yaml> [--format auto|long|wide] [--tz Zone] [--loop] [--report out.html] [--speedup N] [--no-progress]";

/** One cycle of the offline loop. */
export interface OfflineCycle {
  timeMs: number;
  reconciled: boolean;
  estimate: string;
  parameters: Record<string, number>;
  proposal?: Proposal;
  reason?: string;
}

/** What a replay found. */
export interface ReplaySummary {
  batches: number;
  values: number;
  rejected: number;
  counts: Record<string, number>;
  firstMs: number;
  lastMs: number;
  snapshots: SnapshotData[];
  cycles: OfflineCycle[];
  wallMs: number;
}

/** Runs the offline loop stages on one snapshot (reconcile → estimate → optimize). */
async function offlineCycle(
  model: SiteModel,
  snapshot: SnapshotData,
  state: { inForce: Record<string, number>; n: number },
): Promise<OfflineCycle> {
  const { reconcileSnapshot } = await import("../../services/reconcile/stage.js");
  const { estimateParameters } = await import("../../services/estimate/stage.js");
  const { runOptimization } = await import("../../services/optimize/stage.js");
  const { operatingPointOf } = await import("../../services/optimize/index.js");
  const cycle: OfflineCycle = {
    timeMs: snapshot.endMs,
    reconciled: false,
    estimate: "-",
    parameters: { ...state.inForce },
  };
  const rec = reconcileSnapshot(snapshot, model);
  if (!rec.ok) {
    cycle.reason = rec.reasons.map((r) => r.code).join(", ");
    return cycle;
  }
  cycle.reconciled = true;
  const est = estimateParameters(model, [{ id: `replay-${state.n++}`, data: rec.data }], state.inForce);
  cycle.estimate = est.data.status;
  state.inForce = est.inForce;
  cycle.parameters = { ...est.inForce };
  if (est.data.status === "rejected" || est.data.status === "failed") {
    cycle.reason = est.data.reasons.map((r) => r.code).join(", ") || est.data.status;
    return cycle;
  }
  const op = operatingPointOf(model, snapshot);
  if (!op.ok) {
    cycle.reason = op.missing.join("; ");
    return cycle;
  }
  const result = runOptimization({
    model,
    context: { parameters: state.inForce, disturbances: op.disturbances, current: op.current },
  });
  if (result.status === "proposed") cycle.proposal = result.proposal;
  else cycle.reason = result.reasons.map((r) => r.code).join(", ");
  return cycle;
}

/** The report's charts from a replay. */
export function replayCharts(
  model: SiteModel,
  traces: Map<string, Array<[number, number]>>,
  summary: ReplaySummary,
): Chart[] {
  const bands = summary.snapshots.map((s) => [s.startMs, s.endMs] as const);
  const charts: Chart[] = [];
  for (const tag of model.tags.filter((t) => t.key)) {
    const means = summary.snapshots
      .map((s) => s.tags.find((t) => t.tag === tag.id))
      .map((t, i) => [summary.snapshots[i]!.endMs, t?.mean ?? Number.NaN] as [number, number])
      .filter((p) => Number.isFinite(p[1]));
    const series: Series[] = [{ name: `${tag.id} (${tag.variable})`, points: traces.get(tag.id) ?? [] }];
    if (means.length) series.push({ name: "snapshot mean", points: means, dots: true, color: "#d62728" });
    charts.push({
      title: `${tag.id}${tag.description ? ` — ${tag.description}` : ""}`,
      unit: tag.unit,
      series,
      bands,
    });
  }
  const withProposal = summary.cycles.filter((c) => c.proposal);
  if (summary.cycles.length) {
    for (const p of model.parameters) {
      charts.push({
        title: `estimated ${p.symbol}`,
        unit: p.unit,
        series: [
          {
            name: `${p.symbol} in force`,
            step: true,
            points: summary.cycles.map((c) => [c.timeMs, c.parameters[p.symbol] ?? Number.NaN]),
          },
        ],
      });
    }
  }
  if (withProposal.length) {
    for (const d of model.decisions) {
      const sp = (c: OfflineCycle) => c.proposal?.setpoints.find((s) => s.decision === d.symbol);
      charts.push({
        title: `setpoint ${d.symbol} (${d.setpointTag})`,
        unit: d.unit,
        series: [
          {
            name: "operating point",
            points: withProposal.map((c) => [c.timeMs, sp(c)?.current ?? Number.NaN]),
          },
          {
            name: "proposed",
            dots: true,
            points: withProposal.map((c) => [c.timeMs, sp(c)?.proposed ?? Number.NaN]),
          },
        ],
      });
    }
    charts.push({
      title: "profit (model prediction)",
      unit: model.objective.unit,
      series: [
        {
          name: "at the operating point",
          points: withProposal.map((c) => [c.timeMs, c.proposal!.objective.current]),
        },
        {
          name: "at the proposal",
          points: withProposal.map((c) => [c.timeMs, c.proposal!.objective.proposed]),
        },
      ],
    });
  }
  return charts;
}

/** Runs `replay`. Exit code 0 when the file was read to its end. */
export async function replayCommand(argv: string[], ctx: CommandContext): Promise<number> {
  const p = parseCommandArgs(
    argv,
    {
      site: { type: "string" },
      format: { type: "string" },
      tz: { type: "string" },
      loop: { type: "boolean" },
      report: { type: "string" },
      speedup: { type: "string" },
      "no-progress": { type: "boolean" },
      "max-trace-points": { type: "string" },
    },
    USAGE,
  );
  const file = p.positionals[0];
  if (!file || p.positionals.length > 1)
    throw new CliError("CLI_USAGE", `give one CSV file\nusage: ${USAGE}`);
  const format = str(p, "format") ?? "auto";
  if (!["auto", "long", "wide"].includes(format)) {
    throw new CliError("CLI_USAGE", `--format must be auto, long or wide, got '${format}'`);
  }
  const speedup = numberFlag(str(p, "speedup"), "speedup", { exclusiveMin: 0 });
  const model = await loadSiteModelFile(required(p, "site", USAGE));
  const { options } = detectorOptions(model.steadyState, { minSnapshotSamples: 2 });
  const detector = createDetector(
    options,
    model.tags.map((t) => ({ id: t.id, key: t.key })),
  );
  const wantTraces = str(p, "report") !== undefined;
  const traces = new Map<string, Array<[number, number]>>();
  const keyTags = new Set(model.tags.filter((t) => t.key).map((t) => t.id));
  const summary: ReplaySummary = {
    batches: 0,
    values: 0,
    rejected: 0,
    counts: {},
    firstMs: Number.NaN,
    lastMs: Number.NaN,
    snapshots: [],
    cycles: [],
    wallMs: 0,
  };
  const loopState = { inForce: Object.fromEntries(model.parameters.map((q) => [q.symbol, q.initial])), n: 0 };
  const t0 = performance.now();
  const result = await replayCsv({
    model,
    file,
    csv: { format: format as "auto" | "long" | "wide", ...(str(p, "tz") ? { timeZone: str(p, "tz") } : {}) },
    ...(speedup !== undefined ? { speedup } : {}),
    progress: ctx.io.isTTY && p.values["no-progress"] !== true,
    onBatch: async (data) => {
      if (wantTraces) {
        for (const v of data.values) {
          if (!keyTags.has(v.tag) || v.value === null || (v.status ?? "good") !== "good") continue;
          let list = traces.get(v.tag);
          if (!list) {
            list = [];
            traces.set(v.tag, list);
          }
          list.push([v.time, v.value]);
        }
      }
      for (const batch of detectorBatches(data.values)) {
        for (const out of detector.observe(batch, batch.time)) {
          if (out.kind !== "snapshot") continue;
          const snap = snapshotData(out.snapshot, model);
          summary.snapshots.push(snap);
          if (p.values.loop === true) summary.cycles.push(await offlineCycle(model, snap, loopState));
        }
      }
    },
  });
  summary.wallMs = performance.now() - t0;
  Object.assign(summary, {
    batches: result.batches,
    values: result.values,
    rejected: result.rejected,
    counts: result.counts,
    firstMs: result.firstMs,
    lastMs: result.lastMs,
  });
  for (const line of summaryLines(summary)) ctx.io.out(line);
  const reportFile = str(p, "report");
  if (reportFile) {
    const html = renderReport({
      title: `Replay of ${file} on ${model.site.id}`,
      subtitle: [
        `${model.site.name}. Site model ${model.file}.`,
        "Green bands: steady windows found by the detector. Red dots: the snapshot means.",
      ],
      summary: summaryRows(summary),
      charts: replayCharts(model, traces, summary),
      tables: summary.cycles.length
        ? [
            {
              caption: "offline cycles",
              header: [
                "snapshot end (UTC)",
                "reconciled",
                "estimate",
                ...model.decisions.map((d) => `${d.symbol} → [${d.unit}]`),
                "profit gain",
                "note",
              ],
              rows: summary.cycles.map((c) => [
                new Date(c.timeMs).toISOString().slice(0, 19),
                c.reconciled ? "yes" : "no",
                c.estimate,
                ...model.decisions.map((d) =>
                  fmt(c.proposal?.setpoints.find((s) => s.decision === d.symbol)?.proposed),
                ),
                c.proposal ? fmt(c.proposal.objective.change, 3) : "",
                c.reason ?? "",
              ]),
            },
          ]
        : [],
    });
    writeFileSync(reportFile, html);
    ctx.io.out(`report written to ${reportFile} (${(html.length / 1024).toFixed(0)} KiB)`);
  }
  return 0;
}

/** The summary as label/value rows (also the report's table). */
export function summaryRows(s: ReplaySummary): Array<readonly [string, string]> {
  const spanH = (s.lastMs - s.firstMs) / 3_600_000;
  const rows: Array<readonly [string, string]> = [
    [
      "data",
      Number.isFinite(spanH)
        ? `${new Date(s.firstMs).toISOString()} … ${new Date(s.lastMs).toISOString()} (${fmt(spanH, 4)} h)`
        : "none",
    ],
    ["batches", String(s.batches)],
    ["values", `${s.values} (${s.rejected} rejected)`],
    [
      "rejections by reason",
      Object.entries(s.counts)
        .filter(([k, n]) => k !== "good" && n > 0)
        .map(([k, n]) => `${k} ${n}`)
        .join(", ") || "none",
    ],
    ["steady snapshots", String(s.snapshots.length)],
    [
      "replay rate",
      `${fmt(s.values / Math.max(1e-3, s.wallMs / 1000), 3)} values/s (${fmt(s.batches / Math.max(1e-3, s.wallMs / 1000), 3)} batches/s, ${fmt(s.wallMs / 1000, 3)} s)`,
    ],
  ];
  if (s.cycles.length) {
    const proposed = s.cycles.filter((c) => c.proposal).length;
    rows.push(["offline cycles", `${s.cycles.length} (${proposed} with a proposal)`]);
  }
  return rows;
}

/** The summary as printed lines. */
export function summaryLines(s: ReplaySummary): string[] {
  const lines = summaryRows(s).map(([k, v]) => `${k.padEnd(22)} ${v}`);
  for (const snap of s.snapshots.slice(0, 20)) {
    const keys = snap.tags
      .filter((t) => t.key)
      .map((t) => `${t.tag}=${fmt(t.mean)}`)
      .join(" ");
    lines.push(
      `  snapshot ${new Date(snap.startMs).toISOString().slice(0, 16)} +${fmt(snap.spanS / 60, 3)} min: ${keys}`,
    );
  }
  if (s.snapshots.length > 20) lines.push(`  … ${s.snapshots.length - 20} more`);
  for (const c of s.cycles.slice(0, 20)) {
    const sp = c.proposal?.setpoints
      .map((x) => `${x.decision} ${fmt(x.current)}→${fmt(x.proposed)}`)
      .join(", ");
    lines.push(
      `  cycle ${new Date(c.timeMs).toISOString().slice(0, 16)}: estimate ${c.estimate}${sp ? `; proposal ${sp}; gain ${fmt(c.proposal?.objective.change, 3)} ${c.proposal?.objective.unit}` : ""}${c.reason ? `; ${c.reason}` : ""}`,
    );
  }
  return lines;
}
