/** `steadfast check <site.yaml>`: loads a site model and says OK with a summary, or where and why it is refused. */
import { SiteModelError } from "../../services/model/errors.js";
import { loadSiteModelFile, type SiteModel } from "../../services/model/index.js";
import { parseCommandArgs } from "../args.js";
import { CliError } from "../errors.js";
import type { CommandContext } from "../io.js";

const USAGE = "steadfast check <site.yaml> [--quiet]";

/** The summary lines of a loaded model. */
export function modelSummary(model: SiteModel): string[] {
  const keys = model.tags.filter((t) => t.key).length;
  const lines = [
    `site ${model.site.id}: ${model.site.name}`,
    `  tags ${model.tags.length} (${keys} key), decisions ${model.decisions.length}, parameters ${model.parameters.length}, disturbances ${model.disturbances.length}, prices ${model.prices.length}`,
    `  model: ${model.unknowns.length} unknowns, ${model.equations.length} equations, ${model.outputs.length} outputs; ${model.constraints.length} constraints, ${model.balances.length} balances`,
    `  objective: ${model.objective.sense} ${model.objective.expression} [${model.objective.unit}]`,
  ];
  for (const d of model.decisions) {
    lines.push(
      `  decision ${d.symbol} (${d.setpointTag}): ${d.min} … ${d.max} ${d.unit}${d.maxMovePerCycle !== undefined ? `, move ≤ ${d.maxMovePerCycle} per cycle` : ""}`,
    );
  }
  if (model.numericDerivatives.length > 0) {
    lines.push(`  note: numeric derivatives for ${model.numericDerivatives.join(", ")}`);
  }
  return lines;
}

/** One line for a refused model: file:line, JSON path, reason and code. */
export function modelErrorLine(err: SiteModelError): string {
  const where = `${err.at.line > 0 ? `${err.at.file}:${err.at.line}` : err.at.file}: ${err.at.path || "/"}`;
  // The model library usually starts its message with the same spot; do not say it twice.
  const reason = err.message.startsWith(err.at.file)
    ? err.message.replace(/^[^:]*(?::\d+)?: (?:\/[^:\s]*: )?/, "")
    : err.message;
  return `${where}: ${reason} [${err.code}]`;
}

/** Runs `check`. Exit code 0 when the model loads, 1 when it is refused. */
export async function checkCommand(argv: string[], ctx: CommandContext): Promise<number> {
  const p = parseCommandArgs(argv, { quiet: { type: "boolean", short: "q" } }, USAGE);
  const file = p.positionals[0];
  if (!file || p.positionals.length > 1)
    throw new CliError("CLI_USAGE", `give one site-model file\nusage: ${USAGE}`);
  try {
    const model = await loadSiteModelFile(file);
    ctx.io.out(`OK ${file}`);
    if (p.values.quiet !== true) for (const line of modelSummary(model)) ctx.io.out(line);
    return 0;
  } catch (err) {
    if (err instanceof SiteModelError) {
      ctx.io.err(`REFUSED ${modelErrorLine(err)}`);
      return 1;
    }
    throw err;
  }
}
