#!/usr/bin/env tsx
/**
 * `steadfast`: the one command-line tool of the suite, and its composition root (it may import every
 * service; services never import each other). `steadfast help` lists the subcommands.
 */
import { pathToFileURL } from "node:url";
import { SteadfastError } from "../services/kit/errors.js";
import { CliError } from "./errors.js";
import { type Command, type CommandContext, processIo } from "./io.js";

/** Subcommands: a line of help and a loader (each loads only what it needs). */
export const COMMANDS: Record<string, { help: string; load: () => Promise<Command> }> = {
  demo: {
    help: "demo [--time-scale N] [--mode advisory|closed-loop] [--port N] [--console-port N] [--bus URL]   the whole loop on the demo site",
    load: async () => (await import("./demo.js")).demoCommand,
  },
  start: {
    help: "start <service|all> [--config file] [--bus URL]   run one service (or the suite) against a broker",
    load: async () => (await import("./commands/start.js")).startCommand,
  },
  check: {
    help: "check <site.yaml>   load a site model: OK and a summary, or the error with file:line and JSON path",
    load: async () => (await import("./commands/check.js")).checkCommand,
  },
  replay: {
    help: "replay <csv> --site <site.yaml> [--format long|wide] [--tz Zone] [--loop] [--report out.html]   historian CSV through ingest and steady offline",
    load: async () => (await import("./commands/replay.js")).replayCommand,
  },
  simulate: {
    help: "simulate --config <plant-sim config> --days N --out file.csv [--moves-every-h H]   write simulated plant data as CSV",
    load: async () => (await import("./commands/simulate.js")).simulateCommand,
  },
  tail: {
    help: "tail <stream> [--json] [--site id] [--bus URL]   follow a stream (e.g. proposal, cycle, 'heartbeat.*', '>')",
    load: async () => (await import("./commands/tail.js")).tailCommand,
  },
  status: {
    help: "status [--bus URL] [--site id] [--wait S]   every service's last heartbeat; stale ones marked",
    load: async () => (await import("./commands/status.js")).statusCommand,
  },
  explain: {
    help: "explain <cycleid|latest> --db <file.sqlite>   why a setpoint moved (or not): the chain of one cycle",
    load: async () => (await import("./commands/explain.js")).explainCommand,
  },
  whatif: {
    help: "whatif --site <site.yaml> [--price s=v ...] [--param s=v ...] [--disturbance s=v ...]   offline optimum, active constraints, shadow prices",
    load: async () => (await import("./commands/whatif.js")).whatifCommand,
  },
};

/** The help text. */
export function helpText(): string {
  return [
    "steadfast — real-time optimization of continuous plants",
    "",
    "usage: steadfast <command> [options]",
    "",
    ...Object.values(COMMANDS).map((c) => `  ${c.help}`),
    "",
    "Steadfast is not a safety system: the plant's own protection must stay in place.",
  ].join("\n");
}

/** Runs one command line (without `node` and the script). Returns the exit code; never exits itself. */
export async function run(argv: string[], ctx: CommandContext): Promise<number> {
  const [name, ...rest] = argv;
  if (name === undefined || name === "help" || name === "--help" || name === "-h") {
    ctx.io.out(helpText());
    return name === undefined ? 2 : 0;
  }
  const entry = COMMANDS[name];
  if (!entry) {
    ctx.io.err(`unknown command '${name}'\n\n${helpText()}`);
    return 2;
  }
  try {
    const command = await entry.load();
    return await command(rest, ctx);
  } catch (err) {
    if (err instanceof CliError && err.code === "CLI_USAGE") {
      ctx.io.err(err.message);
      return 2;
    }
    if (err instanceof SteadfastError) {
      ctx.io.err(`${name} failed [${err.code}]: ${err.message}`);
      return 1;
    }
    throw err;
  }
}

async function main(): Promise<void> {
  // `steadfast tail … | head` closes the pipe early: that is the reader's choice, not an error.
  process.stdout.on("error", (err: NodeJS.ErrnoException) => {
    if (err.code === "EPIPE") process.exit(0);
  });
  const controller = new AbortController();
  let interrupts = 0;
  const onSignal = () => {
    interrupts++;
    if (interrupts === 1) {
      processIo.err("stopping… (Ctrl-C again to force)");
      controller.abort();
    } else {
      process.exit(130);
    }
  };
  process.on("SIGINT", onSignal);
  process.on("SIGTERM", onSignal);
  const code = await run(process.argv.slice(2), { io: processIo, signal: controller.signal });
  process.exitCode = code;
  // Libraries (broker clients, timers) may keep the event loop alive after a clean stop.
  setTimeout(() => process.exit(code), 500).unref();
}

if (process.argv[1] && import.meta.url === pathToFileURL(process.argv[1]).href) {
  await main();
}
