/**
 * `steadfast explain <cycleid|latest> --db file.sqlite`: why a setpoint moved (or not). Reads the
 * recorder's audit store and prints the chain of one cycle (services/recorder explain): snapshot →
 * reconciled → model → prices → proposal → validation → command → readback, with every reason.
 */
import { existsSync } from "node:fs";
import { explain } from "../../services/recorder/explain.js";
import { EventStore } from "../../services/recorder/store.js";
import { flag, parseCommandArgs, required } from "../args.js";
import { CliError } from "../errors.js";
import type { CommandContext } from "../io.js";

const USAGE = "steadfast explain <cycleid|latest> --db <audit.sqlite> [--json]";

/** Runs `explain`. Exit code 0 when the cycle was found, 1 when not. */
export async function explainCommand(argv: string[], ctx: CommandContext): Promise<number> {
  const p = parseCommandArgs(argv, { db: { type: "string" }, json: { type: "boolean" } }, USAGE);
  const wanted = p.positionals[0];
  if (!wanted || p.positionals.length > 1)
    throw new CliError("CLI_USAGE", `give one cycle id or 'latest'\nusage: ${USAGE}`);
  const db = required(p, "db", USAGE);
  if (!existsSync(db)) throw new CliError("CLI_DB_MISSING", `no audit database at ${db}`);
  const store = new EventStore({ path: db });
  try {
    let cycleid = wanted;
    if (wanted === "latest") {
      // The latest cycle that reached a proposal; else the latest that opened at all.
      const last =
        store.latest("rto.proposal.v1", Number.MAX_SAFE_INTEGER) ??
        store.latest("rto.cycle.v1", Number.MAX_SAFE_INTEGER);
      if (!last?.cycleid) {
        ctx.io.out(`no cycle recorded in ${db}`);
        return 1;
      }
      cycleid = last.cycleid;
    }
    const x = explain(store, cycleid);
    if (!x.found) {
      ctx.io.out(`cycle ${cycleid} is not in ${db}`);
      return 1;
    }
    if (flag(p, "json")) ctx.io.out(JSON.stringify({ ...x, text: undefined }, null, 2));
    else for (const line of x.text.split("\n")) ctx.io.out(line);
    return 0;
  } finally {
    store.close();
  }
}
