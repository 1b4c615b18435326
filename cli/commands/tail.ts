/**
 * `steadfast tail <stream> [--json] [--site id] [--bus url]`: follows one of a site's streams and
 * prints a readable line per event (cli/format.ts), or the raw JSON envelope with --json. The stream
 * may use wildcards: `heartbeat.*`, `>` (everything). `--count N` / `--for S` stop it on their own.
 */
import type { Bus } from "../../services/kit/bus.js";
import { connectBus } from "../../services/kit/connect.js";
import { type AnyEvent, decodeEvent } from "../../services/kit/envelope.js";
import { schemaRegistry } from "../../services/kit/schemas.js";
import { assertSubject } from "../../services/kit/subjects.js";
import { flag, numberFlag, parseBusUrl, parseCommandArgs, siteFlag, str } from "../args.js";
import { CliError } from "../errors.js";
import { summarizeEvent } from "../format.js";
import type { CommandContext } from "../io.js";

const USAGE =
  "steadfast tail <stream> [--json] [--site id] [--bus mqtt://host:1883|nats://host:4222] [--count N] [--for S]";

/** The default broker and site (the demo's), overridable by STEADFAST_BUS__URL / STEADFAST_SITE. */
export function defaultTarget(env: Record<string, string | undefined> = process.env): {
  bus: string;
  site: string;
} {
  return { bus: env.STEADFAST_BUS__URL ?? "mqtt://127.0.0.1:1883", site: env.STEADFAST_SITE ?? "kestrel-r1" };
}

/** Connects a plain client (no heartbeat, no will) for the CLI. */
export async function cliBus(busUrl: string, site: string, name: string): Promise<Bus> {
  const target = parseBusUrl(busUrl);
  const options = { name: `${site}-cli-${name}-${process.pid}` };
  try {
    return await connectBus({ site, bus: target }, options);
  } catch (err) {
    // The demo's embedded broker speaks MQTT 3.1.1 only and refuses an MQTT 5 CONNECT: say so again in 3.1.1.
    if (target.transport !== "mqtt" || !/protocol version/i.test((err as Error).message)) throw err;
    return connectBus({ site, bus: { transport: "embedded", url: target.url } }, options);
  }
}

/** Runs `tail`. Returns 0 when stopped by Ctrl-C, --count or --for. */
export async function tailCommand(argv: string[], ctx: CommandContext): Promise<number> {
  const p = parseCommandArgs(
    argv,
    {
      json: { type: "boolean" },
      site: { type: "string" },
      bus: { type: "string" },
      count: { type: "string" },
      for: { type: "string" },
    },
    USAGE,
  );
  const stream = p.positionals[0];
  if (!stream || p.positionals.length > 1)
    throw new CliError("CLI_USAGE", `give one stream\nusage: ${USAGE}`);
  const d = defaultTarget();
  const site = siteFlag(str(p, "site"), d.site);
  const filter = `rto.${site}.${stream}`;
  try {
    assertSubject(filter, true);
  } catch (err) {
    throw new CliError("CLI_USAGE", `stream '${stream}': ${(err as Error).message}`, { cause: err });
  }
  const count = numberFlag(str(p, "count"), "count", { integer: true, min: 1 });
  const forS = numberFlag(str(p, "for"), "for", { exclusiveMin: 0 });
  const json = flag(p, "json");
  const bus = await cliBus(str(p, "bus") ?? d.bus, site, "tail");
  const registry = schemaRegistry();
  let seen = 0;
  let finish!: () => void;
  const done = new Promise<void>((r) => (finish = r));
  try {
    await bus.subscribe(filter, (msg) => {
      if (count !== undefined && seen >= count) return;
      seen++;
      if (json) {
        ctx.io.out(Buffer.from(msg.payload).toString("utf8"));
      } else {
        const decoded = decodeEvent(registry, msg.payload, 1 << 22);
        ctx.io.out(
          decoded.ok
            ? summarizeEvent(decoded.event as AnyEvent)
            : `(unreadable on ${msg.subject}: ${decoded.reason} ${decoded.detail.slice(0, 160)})`,
        );
      }
      if (count !== undefined && seen >= count) finish();
    });
    ctx.io.err(`following ${filter} on ${str(p, "bus") ?? d.bus} (Ctrl-C to stop)`);
    if (ctx.signal.aborted) finish();
    ctx.signal.addEventListener("abort", () => finish(), { once: true });
    if (forS !== undefined) setTimeout(finish, forS * 1000).unref();
    await done;
  } finally {
    await bus.close();
  }
  return 0;
}
