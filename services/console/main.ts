/**
 * Process entry of the console: reads STEADFAST_CONFIG (JSON or YAML) and STEADFAST_* overrides,
 * then starts. `main.ts hash-password` instead reads a password from standard input and prints its
 * scrypt hash for a users file (a fresh random salt each time).
 */
import { randomBytes } from "node:crypto";
import { envOverrides, loadConfig, readConfigFile } from "../kit/config.js";
import { runMain } from "../kit/service.js";
import { type ConsoleConfig, consoleConfigSchema } from "./config.js";
import { start } from "./index.js";
import { hashPassword } from "./users.js";

if (process.argv[2] === "hash-password") {
  const chunks: Buffer[] = [];
  for await (const chunk of process.stdin) chunks.push(chunk as Buffer);
  const password = Buffer.concat(chunks)
    .toString("utf8")
    .replace(/\r?\n$/, "");
  if (!password) {
    process.stderr.write("give the password on standard input, e.g. printf %s 'secret' | … hash-password\n");
    process.exit(2);
  }
  process.stdout.write(`${hashPassword(password, randomBytes(16))}\n`);
} else {
  await runMain(() => {
    const file = process.env.STEADFAST_CONFIG;
    const config = loadConfig<ConsoleConfig>(
      consoleConfigSchema,
      file ? readConfigFile(file) : {},
      envOverrides(process.env),
    );
    return start(config);
  });
}
