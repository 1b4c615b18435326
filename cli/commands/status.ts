/**
 * `steadfast status [--bus url] [--site id] [--wait S]`: listens to every service's heartbeat for a
 * while and prints each one's last word: status, age, uptime, counts. Ages are taken from when the
 * heartbeat arrived here, not from its envelope time, so a demo on an accelerated clock reads right.
 * A service whose heartbeat is overdue (older than twice its own interval), that said "lost" or
 * "stopping", or that was not heard at all, is marked; the exit code is then 1.
 */
import { type AnyEvent, decodeEvent } from "../../services/kit/envelope.js";
import type { Heartbeat } from "../../services/kit/generated/messages.js";
import { schemaRegistry } from "../../services/kit/schemas.js";
import { numberFlag, parseCommandArgs, siteFlag, str } from "../args.js";
import { fmt } from "../format.js";
import type { CommandContext } from "../io.js";
import { SERVICE_NAMES } from "../services.js";
import { cliBus, defaultTarget } from "./tail.js";

const USAGE = "steadfast status [--bus mqtt://host:1883|nats://host:4222] [--site id] [--wait S] [--all]";

/** The last heartbeat heard from one service instance, and when (wall ms, here). */
export interface Heard {
  data: Heartbeat;
  receivedMs: number;
}

/** One row of the status table. */
export interface StatusRow {
  service: string;
  instance: string;
  status: string;
  ageS: number | undefined;
  stale: boolean;
  note: string;
}

/**
 * The status table: one row per instance heard, plus a "not heard" row for each expected service
 * that said nothing. Stale = overdue by more than twice its own heartbeat interval, or gone.
 */
export function statusRows(
  heard: ReadonlyMap<string, Heard>,
  nowMs: number,
  expected: readonly string[] = [],
): StatusRow[] {
  const rows: StatusRow[] = [];
  for (const h of heard.values()) {
    const ageS = (nowMs - h.receivedMs) / 1000;
    const overdue = ageS > 2 * h.data.intervalS;
    const gone = h.data.status === "lost" || h.data.status === "stopping";
    const c = h.data.counts;
    rows.push({
      service: h.data.service,
      instance: h.data.instance,
      status: h.data.status,
      ageS,
      stale: overdue || gone,
      note: [
        h.data.uptimeS !== undefined ? `up ${fmt(h.data.uptimeS, 3)} s` : "",
        c ? `in ${c.in ?? 0} out ${c.out ?? 0} dead-lettered ${c.deadLettered ?? 0}` : "",
        overdue ? `overdue (every ${fmt(h.data.intervalS)} s)` : "",
      ]
        .filter(Boolean)
        .join(", "),
    });
  }
  const seen = new Set(rows.map((r) => r.service));
  for (const name of expected) {
    if (!seen.has(name))
      rows.push({
        service: name,
        instance: "-",
        status: "not heard",
        ageS: undefined,
        stale: true,
        note: "",
      });
  }
  return rows.sort((a, b) => a.service.localeCompare(b.service) || a.instance.localeCompare(b.instance));
}

/** The rows as aligned text lines. */
export function statusLines(rows: readonly StatusRow[]): string[] {
  const lines = [
    `${"service".padEnd(12)} ${"instance".padEnd(10)} ${"status".padEnd(10)} ${"age".padStart(7)}  details`,
  ];
  for (const r of rows) {
    lines.push(
      `${r.service.padEnd(12)} ${r.instance.padEnd(10)} ${r.status.padEnd(10)} ${(r.ageS === undefined ? "-" : `${r.ageS.toFixed(1)} s`).padStart(7)}  ${r.stale ? "STALE " : ""}${r.note}`,
    );
  }
  return lines;
}

/** Runs `status`. Exit code 0 when every service heard is running and none is stale. */
export async function statusCommand(argv: string[], ctx: CommandContext): Promise<number> {
  const p = parseCommandArgs(
    argv,
    { bus: { type: "string" }, site: { type: "string" }, wait: { type: "string" }, all: { type: "boolean" } },
    USAGE,
  );
  const d = defaultTarget();
  const site = siteFlag(str(p, "site"), d.site);
  const waitS = numberFlag(str(p, "wait"), "wait", { exclusiveMin: 0, max: 3600 }) ?? 6;
  const busUrl = str(p, "bus") ?? d.bus;
  const bus = await cliBus(busUrl, site, "status");
  const registry = schemaRegistry();
  const heard = new Map<string, Heard>();
  try {
    await bus.subscribe(`rto.${site}.heartbeat.>`, (msg) => {
      const decoded = decodeEvent(registry, msg.payload, 1 << 20);
      if (!decoded.ok) return;
      const e = decoded.event as AnyEvent;
      if (e.type !== "rto.heartbeat.v1") return;
      heard.set(`${e.data.service}/${e.data.instance}`, { data: e.data, receivedMs: Date.now() });
    });
    ctx.io.err(`listening to rto.${site}.heartbeat.* on ${busUrl} for ${waitS} s…`);
    await new Promise<void>((done) => {
      const t = setTimeout(done, waitS * 1000);
      ctx.signal.addEventListener("abort", () => {
        clearTimeout(t);
        done();
      });
    });
  } finally {
    await bus.close();
  }
  // Only the suite's own services are expected; --all lists whatever answered.
  const rows = statusRows(heard, Date.now(), p.values.all === true || heard.size === 0 ? [] : SERVICE_NAMES);
  if (rows.length === 0) {
    ctx.io.out(
      `no heartbeat on rto.${site}.heartbeat.* within ${waitS} s: is the suite running on ${busUrl}?`,
    );
    return 1;
  }
  for (const line of statusLines(rows)) ctx.io.out(line);
  return rows.some((r) => r.stale) ? 1 : 0;
}
