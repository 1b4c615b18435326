/**
 * `steadfast whatif --site site.yaml [--price sym=v ...] [--param sym=v ...] [--disturbance sym=v ...]
 * [--current sym=v ...]`: one offline optimization (services/optimize optimizeOffline), printed as
 * the optimum, the active constraints and their shadow prices.
 */
import { loadSiteModelFile, type SiteModel } from "../../services/model/index.js";
import { optimizeOffline, type StageResult } from "../../services/optimize/stage.js";
import { flag, list, parseAssignments, parseCommandArgs, required } from "../args.js";
import { CliError } from "../errors.js";
import { fmt } from "../format.js";
import type { CommandContext } from "../io.js";

const USAGE =
  "steadfast whatif --site <site.yaml> [--price sym=value ...] [--param sym=value ...] [--disturbance sym=value ...] [--current sym=value ...] [--move-limits] [--json]";

/** Refuses symbols the model does not declare in the block they were given for. */
function checkSymbols(
  model: SiteModel,
  given: Record<string, number>,
  block: "prices" | "parameters" | "disturbances" | "decisions",
  flagName: string,
) {
  const known = model.layout.blocks[block].symbols;
  for (const s of Object.keys(given)) {
    if (!known.includes(s)) {
      throw new CliError(
        "CLI_USAGE",
        `--${flagName} ${s}: the site model has no such ${block.replace(/s$/, "")} (it has ${known.join(", ") || "none"})`,
      );
    }
  }
}

/** Readable lines of an offline optimization result. */
export function whatifLines(model: SiteModel, result: StageResult): string[] {
  if (result.status === "aborted") {
    return [
      "no optimum:",
      ...result.reasons.map((r) => `  ${r.code}: ${r.message}`),
      ...(result.conflicting.length ? [`  conflicting: ${result.conflicting.join(", ")}`] : []),
    ];
  }
  const p = result.proposal;
  const lines = [
    `optimum (${p.status}, ${p.solver.name} ${p.solver.status}${p.solver.iterations !== undefined ? `, ${p.solver.iterations} iterations` : ""}):`,
  ];
  for (const s of p.setpoints) {
    lines.push(
      `  ${s.decision.padEnd(10)} ${fmt(s.proposed, 6).padStart(10)} ${s.unit.padEnd(6)} (from ${fmt(s.current, 6)}; bounds ${fmt(s.lower)} … ${fmt(s.upper)})`,
    );
  }
  lines.push(
    `  objective  ${fmt(p.objective.proposed, 6).padStart(10)} ${p.objective.unit} (${model.objective.sense}; at the current point ${fmt(p.objective.current, 6)})`,
  );
  lines.push(
    p.active.length ? "active constraints (shadow price):" : "active constraints: none (interior optimum)",
  );
  for (const a of p.active) {
    lines.push(`  ${a.name.padEnd(22)} ${a.kind.padEnd(12)} ${fmt(a.shadowPrice, 4).padStart(10)} ${a.unit}`);
  }
  lines.push("constraints:");
  for (const c of p.constraints) {
    lines.push(
      `  ${c.name.padEnd(22)} g = ${fmt(c.value, 4).padStart(10)}${c.unit ? ` ${c.unit}` : ""}${c.active ? `  active, shadow price ${fmt(c.shadowPrice, 4)} ${c.shadowPriceUnit}` : ""}`,
    );
  }
  return lines;
}

/** Runs `whatif`. Exit code 0 with an optimum, 1 without. */
export async function whatifCommand(argv: string[], ctx: CommandContext): Promise<number> {
  const p = parseCommandArgs(
    argv,
    {
      site: { type: "string" },
      price: { type: "string", multiple: true },
      param: { type: "string", multiple: true },
      disturbance: { type: "string", multiple: true },
      current: { type: "string", multiple: true },
      "move-limits": { type: "boolean" },
      json: { type: "boolean" },
    },
    USAGE,
  );
  const model = await loadSiteModelFile(required(p, "site", USAGE));
  const prices = parseAssignments(list(p, "price"), "price");
  const parameters = parseAssignments(list(p, "param"), "param");
  const disturbances = parseAssignments(list(p, "disturbance"), "disturbance");
  const current = parseAssignments(list(p, "current"), "current");
  checkSymbols(model, prices, "prices", "price");
  checkSymbols(model, parameters, "parameters", "param");
  checkSymbols(model, disturbances, "disturbances", "disturbance");
  checkSymbols(model, current, "decisions", "current");
  // A what-if asks where the optimum is, not where one cycle may move: move limits are off unless asked.
  const result = await optimizeOffline(
    { model, prices, parameters, disturbances, current },
    { moveLimits: flag(p, "move-limits") },
  );
  if (flag(p, "json")) {
    ctx.io.out(JSON.stringify(result.status === "proposed" ? result.proposal : result, null, 2));
  } else {
    for (const line of whatifLines(model, result)) ctx.io.out(line);
  }
  return result.status === "proposed" ? 0 : 1;
}
