/** Where the repository's own files are, so that the CLI works from any working directory. */
import { existsSync } from "node:fs";
import { isAbsolute, resolve } from "node:path";
import { fileURLToPath } from "node:url";

/** The repository root (the folder that holds cli/). */
export const ROOT = fileURLToPath(new URL("..", import.meta.url));

/**
 * A path from a config file: absolute as given; else relative to the working directory when it exists
 * there, else relative to the repository root (the demo's configs name repository paths).
 */
export function resolvePath(path: string, cwd = process.cwd()): string {
  if (isAbsolute(path)) return path;
  const here = resolve(cwd, path);
  return existsSync(here) ? here : resolve(ROOT, path);
}
