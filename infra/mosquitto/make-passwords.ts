/**
 * Hashes broker users for Mosquitto 2's password_file without needing mosquitto_passwd: each line
 * `user:$7$<iterations>$<salt base64>$<hash base64>`, PBKDF2-HMAC-SHA512 with a 12-byte random
 * salt and a 64-byte hash (the format mosquitto_passwd writes; checked against it in
 * test/broker-security.int.test.ts).
 *
 *   npx tsx infra/mosquitto/make-passwords.ts <plain user:password file> <output password_file>
 *
 * The plain file has one `user:password` a line; '#' starts a comment. The output is written 0600.
 */
import { pbkdf2Sync, randomBytes, timingSafeEqual } from "node:crypto";
import { readFileSync, writeFileSync } from "node:fs";
import { pathToFileURL } from "node:url";

/**
 * PBKDF2 rounds. mosquitto_passwd writes 101; more makes a stolen file harder to crack at a small
 * cost per client connect (about 5 ms at 10 000 rounds on this machine's class of CPU).
 */
export const DEFAULT_ITERATIONS = 10_000;

/** Mosquitto's $7$ hash of `password`. `salt` (12 bytes) is random unless given (tests). */
export function mosquittoHash(
  password: string,
  options: { salt?: Buffer; iterations?: number } = {},
): string {
  const salt = options.salt ?? randomBytes(12);
  const iterations = options.iterations ?? DEFAULT_ITERATIONS;
  const hash = pbkdf2Sync(Buffer.from(password, "utf8"), salt, iterations, 64, "sha512");
  return `$7$${iterations}$${salt.toString("base64")}$${hash.toString("base64")}`;
}

/** True when `password` matches a $7$ hash (constant-time compare). */
export function verifyMosquittoHash(password: string, encoded: string): boolean {
  const m = /^\$7\$(\d+)\$([A-Za-z0-9+/=]+)\$([A-Za-z0-9+/=]+)$/.exec(encoded);
  if (!m) return false;
  const expected = Buffer.from(m[3] as string, "base64");
  const got = pbkdf2Sync(
    Buffer.from(password, "utf8"),
    Buffer.from(m[2] as string, "base64"),
    Number(m[1]),
    expected.length,
    "sha512",
  );
  return got.length === expected.length && timingSafeEqual(got, expected);
}

/** Turns `user:password` lines into a Mosquitto password file. Throws on a malformed line or a repeated user. */
export function hashPasswordFile(plain: string, options: { iterations?: number } = {}): string {
  const seen = new Set<string>();
  const out: string[] = [];
  plain.split(/\r?\n/).forEach((raw, i) => {
    const line = raw.trim();
    if (!line || line.startsWith("#")) return;
    const at = line.indexOf(":");
    const user = line.slice(0, at);
    const password = line.slice(at + 1);
    if (at <= 0 || !password) throw new Error(`line ${i + 1}: expected user:password`);
    if (seen.has(user)) throw new Error(`line ${i + 1}: user '${user}' appears twice`);
    seen.add(user);
    out.push(`${user}:${mosquittoHash(password, options)}`);
  });
  return `${out.join("\n")}\n`;
}

if (process.argv[1] && import.meta.url === pathToFileURL(process.argv[1]).href) {
  const [input, output] = process.argv.slice(2);
  if (!input || !output) {
    process.stderr.write(
      "usage: npx tsx infra/mosquitto/make-passwords.ts <plain user:password file> <output password_file>\n",
    );
    process.exit(2);
  }
  writeFileSync(output, hashPasswordFile(readFileSync(input, "utf8")), { mode: 0o600 });
  process.stdout.write(`wrote ${output}\n`);
}
