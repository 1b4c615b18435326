/**
 * One readable line per event, for `tail` and the demo's terminal. Typed on the generated event
 * types with an exhaustive switch, so a new message type fails the build until it has a line here.
 */
import type { AnyEvent } from "../services/kit/envelope.js";

/** A number with at most `digits` significant digits, without trailing noise. */
export function fmt(x: number | null | undefined, digits = 4): string {
  if (x === null || x === undefined || !Number.isFinite(x)) return "?";
  if (x === 0) return "0";
  return String(Number(x.toPrecision(digits)));
}

/** hh:mm:ss of an epoch-ms time, UTC. */
export function clockTime(ms: number): string {
  return Number.isFinite(ms) ? new Date(ms).toISOString().slice(11, 19) : "??:??:??";
}

const plural = (n: number, word: string) => `${n} ${word}${n === 1 ? "" : "s"}`;

/** The event's own words: what it says, without the time and type prefix. */
export function describe(event: AnyEvent): string {
  switch (event.type) {
    case "rto.measurements.v1": {
      const d = event.data;
      const bad = d.values.filter((v) => (v.status ?? "good") !== "good");
      const head = d.values
        .slice(0, 4)
        .map((v) => `${v.tag}=${fmt(v.value)}${v.unit ? ` ${v.unit}` : ""}`)
        .join(" ");
      return `${plural(d.values.length, "value")} from ${d.source}${bad.length ? `, ${bad.length} not good (${[...new Set(bad.map((v) => v.status))].join(", ")})` : ""}: ${head}${d.values.length > 4 ? " …" : ""}`;
    }
    case "rto.steady.v1": {
      const d = event.data;
      const why = d.blockedBy.length
        ? `; blocked by ${d.blockedBy.map((b) => `${b.tag} (${b.status})`).join(", ")}`
        : d.notSteady.length
          ? `; not steady: ${d.notSteady.map((t) => `${t.tag}${t.r !== null ? ` R=${fmt(t.r, 3)}` : ""}`).join(", ")}`
          : "";
      return `${d.state}${d.settleUntilMs ? `, settling until ${clockTime(d.settleUntilMs)}` : ""}${why}`;
    }
    case "rto.snapshot.v1": {
      const d = event.data;
      const keys = d.tags
        .filter((t) => t.key)
        .map((t) => `${t.tag}=${fmt(t.mean)} ${t.unit}`)
        .join(" ");
      return `steady window ${fmt(d.spanS)} s, ${plural(d.tags.length, "tag")}${d.excluded.length ? `, ${d.excluded.length} excluded` : ""}: ${keys}`;
    }
    case "rto.reconciled.v1": {
      const d = event.data;
      const g = d.globalTest;
      return `${d.method}${g ? `, global test ${g.passed ? "passed" : "failed"} (${fmt(g.statistic, 3)} vs ${fmt(g.critical, 3)})` : ""}${d.grossErrors.length ? `, gross errors: ${d.grossErrors.map((e) => e.tag).join(", ")}` : ""}`;
    }
    case "rto.model.v1": {
      const d = event.data;
      const ps = d.parameters.map(
        (p) => `${p.symbol}=${fmt(p.inForce)} ${p.unit}${p.fitted ? "" : " (fixed)"}`,
      );
      return `estimate ${d.status}${d.fit ? `, ${d.fit.converged ? "converged" : "not converged"} in ${d.fit.iterations} it.` : ""}: ${ps.join(", ")}${d.reasons.length ? `; ${d.reasons.map((r) => r.code).join(", ")}` : ""}`;
    }
    case "rto.prices.v1":
      return `prices from ${clockTime(event.data.effectiveFrom)}: ${event.data.prices.map((p) => `${p.symbol}=${fmt(p.value)} ${p.unit}`).join(", ")}`;
    case "rto.proposal.v1": {
      const d = event.data;
      const sps = d.setpoints.map((s) => `${s.decision} ${fmt(s.current)}→${fmt(s.proposed)} ${s.unit}`);
      const act = d.active.map((a) => a.name);
      return `${d.status}: ${sps.join(", ")}; objective ${fmt(d.objective.current)}→${fmt(d.objective.proposed)} ${d.objective.unit} (${d.objective.change >= 0 ? "+" : ""}${fmt(d.objective.change, 3)}); active: ${act.join(", ") || "none"}; ${d.solver.name} ${fmt(d.solver.solveTimeMs, 3)} ms`;
    }
    case "rto.validation.v1": {
      const d = event.data;
      const failed = d.checks.filter((c) => c.outcome === "fail").map((c) => `${c.name}: ${c.reason}`);
      return `${d.verdict} (${d.mode}) → ${d.next}${failed.length ? `; ${failed.join("; ")}` : ""}`;
    }
    case "rto.command.v1": {
      const d = event.data;
      return `seq ${d.seq} ${d.mode}${d.approvedBy ? ` approved by ${d.approvedBy.user}` : ""}: ${d.setpoints.map((s) => `${s.tag}→${fmt(s.value)} ${s.unit}`).join(", ")} (key ${d.keyId})`;
    }
    case "rto.readback.v1": {
      const d = event.data;
      const head =
        d.trigger === "command"
          ? `command seq ${d.commandSeq ?? "?"} ${d.accepted ? "accepted" : `refused ${d.code ?? ""}`.trim()}`
          : d.trigger;
      return `${head}, ${d.mode}${d.shed ? " (shed)" : ""}: ${d.setpoints.map((s) => `${s.tag} ${fmt(s.current)}→${fmt(s.target)} ${s.unit}`).join(", ")}${d.reason ? ` — ${d.reason}` : ""}`;
    }
    case "rto.cycle.v1": {
      const d = event.data;
      return `${d.stage ?? "cycle"} ${d.status}${d.outcome ? ` (${d.outcome})` : ""}${d.reasons?.length ? `: ${d.reasons.map((r) => `${r.code} ${r.message}`).join("; ")}` : ""}`;
    }
    case "rto.heartbeat.v1": {
      const d = event.data;
      const c = d.counts;
      return `${d.service}/${d.instance} ${d.status}${d.uptimeS !== undefined ? `, up ${fmt(d.uptimeS, 3)} s` : ""}${c ? `, in ${c.in ?? 0} out ${c.out ?? 0} dead ${c.deadLettered ?? 0}` : ""}`;
    }
    case "rto.deadletter.v1": {
      const d = event.data;
      return `${d.reason} in ${d.service} on ${d.subject}: ${d.detail.slice(0, 200)}`;
    }
    case "rto.tag-health.v1": {
      const d = event.data;
      const sick = d.tags.filter((t) => t.status !== "good").map((t) => `${t.tag} ${t.status}`);
      return `${plural(d.tags.length, "tag")}, ${sick.length ? sick.join(", ") : "all good"}${d.unknown.length ? `; ${d.unknown.length} unknown names` : ""}`;
    }
    case "rto.operator-mode.v1": {
      const d = event.data;
      return `mode ${d.mode} by ${d.user}${d.accepted === false ? " (refused)" : ""}: ${d.reason}`;
    }
    case "rto.operator-approval.v1": {
      const d = event.data;
      return `${d.decision} ${d.proposalId} by ${d.user}${d.reason ? `: ${d.reason}` : ""}`;
    }
    case "rto.plant-control.v1": {
      const d = event.data;
      return `${d.action}${d.faults ? ` ${d.faults.map((f) => `${f.kind}${f.tag ? ` on ${f.tag}` : ""}`).join(", ")}` : ""}${d.tag ? ` ${d.tag}` : ""}${d.note ? ` — ${d.note}` : ""}`;
    }
    default: {
      const _exhaustive: never = event;
      return JSON.stringify((_exhaustive as { data?: unknown }).data ?? null).slice(0, 200);
    }
  }
}

/** `hh:mm:ss kind [cycle] text`: the event type without its `rto.` prefix and version. */
export function summarizeEvent(event: AnyEvent): string {
  const kind = event.type.replace(/^rto\./, "").replace(/\.v\d+$/, "");
  const cycle = event.cycleid ? ` [${event.cycleid.slice(-8)}]` : "";
  return `${clockTime(Date.parse(event.time))} ${kind.padEnd(12)}${cycle} ${describe(event)}`;
}
