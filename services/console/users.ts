/**
 * Local users, their roles and their sessions: pure (no clock, no environment; time is passed in
 * and randomness is injected). Passwords are stored as scrypt hashes (RFC 7914) in the form
 * `scrypt$N$r$p$<salt base64>$<hash base64>` and compared in constant time.
 */
import { randomBytes as nodeRandomBytes, scryptSync, timingSafeEqual } from "node:crypto";
import { ConsoleError } from "./errors.js";

/** What a user may do: viewer reads; operator also approves or rejects proposals; engineer also changes the mode. */
export type Role = "viewer" | "operator" | "engineer";

/** The roles in order of what they may do. */
export const ROLES: readonly Role[] = ["viewer", "operator", "engineer"];

/** True when `role` may do what `needed` may. */
export function roleAllows(role: Role, needed: Role): boolean {
  return ROLES.indexOf(role) >= ROLES.indexOf(needed);
}

/** scrypt cost parameters. */
export interface ScryptParams {
  /** CPU/memory cost, a power of two. Default 16384 (2^14). */
  N: number;
  /** Block size. Default 8. */
  r: number;
  /** Parallelism. Default 1. */
  p: number;
  /** Derived key length, bytes. Default 32. */
  keyLen: number;
}

// N = 2^14, r = 8, p = 1: the interactive-login figure of the scrypt paper (Percival 2009, §7),
// about 16 MiB and tens of milliseconds per try on this machine.
/** Default scrypt cost. */
export const DEFAULT_SCRYPT: Readonly<ScryptParams> = Object.freeze({ N: 16384, r: 8, p: 1, keyLen: 32 });

// Refuse stored hashes whose cost is too low to matter or so high one login could exhaust memory.
const MIN_N = 1024;
const MAX_N = 1 << 20;

function derive(password: string, salt: Buffer, params: ScryptParams): Buffer {
  return scryptSync(password.normalize("NFC"), salt, params.keyLen, {
    N: params.N,
    r: params.r,
    p: params.p,
    maxmem: 256 * params.N * params.r + 1024 * 1024,
  });
}

/** Hashes `password` with `salt` (at least 16 bytes). Returns the stored form `scrypt$N$r$p$salt$hash`. */
export function hashPassword(password: string, salt: Buffer, params: ScryptParams = DEFAULT_SCRYPT): string {
  if (salt.length < 16) throw new ConsoleError("CONSOLE_HASH_INVALID", "the salt must be at least 16 bytes");
  const key = derive(password, salt, params);
  return ["scrypt", params.N, params.r, params.p, salt.toString("base64"), key.toString("base64")].join("$");
}

/** A stored hash taken apart. */
interface ParsedHash {
  params: ScryptParams;
  salt: Buffer;
  key: Buffer;
}

/** Parses a stored hash; throws ConsoleError CONSOLE_HASH_INVALID when malformed or of unsafe cost. */
export function parseHash(encoded: string): ParsedHash {
  const parts = encoded.split("$");
  const [scheme, n, r, p, salt, key] = parts;
  const num = (s: string | undefined) => (s !== undefined && /^[0-9]{1,8}$/.test(s) ? Number(s) : Number.NaN);
  const N = num(n);
  const R = num(r);
  const P = num(p);
  const b64 = /^[A-Za-z0-9+/]+={0,2}$/;
  if (parts.length !== 6 || scheme !== "scrypt" || !salt || !key || !b64.test(salt) || !b64.test(key)) {
    throw new ConsoleError(
      "CONSOLE_HASH_INVALID",
      "a password hash must read scrypt$N$r$p$<salt>$<hash> (base64)",
    );
  }
  if (!(N >= MIN_N && N <= MAX_N && (N & (N - 1)) === 0) || !(R >= 1 && R <= 32) || !(P >= 1 && P <= 16)) {
    throw new ConsoleError(
      "CONSOLE_HASH_INVALID",
      `scrypt parameters N=${n} r=${r} p=${p} are outside N 2^10..2^20 (a power of two), r 1..32, p 1..16`,
    );
  }
  const saltBuf = Buffer.from(salt, "base64");
  const keyBuf = Buffer.from(key, "base64");
  if (saltBuf.length < 16 || keyBuf.length < 16 || keyBuf.length > 128) {
    throw new ConsoleError("CONSOLE_HASH_INVALID", "salt must be ≥ 16 bytes and hash 16–128 bytes");
  }
  return { params: { N, r: R, p: P, keyLen: keyBuf.length }, salt: saltBuf, key: keyBuf };
}

/** True when `password` matches the stored hash; compares the derived keys in constant time. */
export function verifyPassword(password: string, encoded: string): boolean {
  const h = parseHash(encoded);
  const key = derive(password, h.salt, h.params);
  return key.length === h.key.length && timingSafeEqual(key, h.key);
}

/** One user of the console. */
export interface User {
  username: string;
  role: Role;
  /** Name shown on the page; default the username. */
  displayName: string;
}

interface StoredUser extends User {
  passwordHash: string;
}

/** Why a login failed. Unknown user and wrong password are one answer on purpose. */
export type LoginResult = { ok: true; user: User } | { ok: false; reason: "unknown-or-wrong" };

/** The users file, checked. */
export interface UserDirectory {
  /** Number of users. */
  readonly size: number;
  /** Checks a username and password. Takes as long for an unknown user as for a wrong password. */
  authenticate(username: string, password: string): LoginResult;
  /** The user by name, without the hash. */
  get(username: string): User | undefined;
}

const USERNAME = /^[A-Za-z0-9_.@-]{1,64}$/;

/**
 * Builds the directory from a parsed users file `{ users: [{ username, role, passwordHash, displayName? }] }`.
 * `where` names the file in errors. Throws ConsoleError CONSOLE_USERS_INVALID naming the entry at fault.
 */
export function createUserDirectory(doc: unknown, where = "users file"): UserDirectory {
  const fail = (msg: string): never => {
    throw new ConsoleError("CONSOLE_USERS_INVALID", `${where}: ${msg}`);
  };
  if (!doc || typeof doc !== "object" || !Array.isArray((doc as { users?: unknown }).users)) {
    fail("expected a top-level 'users' list");
  }
  const list = (doc as { users: unknown[] }).users;
  if (list.length > 1000) fail("more than 1000 users");
  const users = new Map<string, StoredUser>();
  for (const [i, raw] of list.entries()) {
    const at = `users[${i}]`;
    if (!raw || typeof raw !== "object") fail(`${at} is not a mapping`);
    const u = raw as Record<string, unknown>;
    for (const k of Object.keys(u)) {
      if (!["username", "role", "passwordHash", "displayName"].includes(k))
        fail(`${at}: unknown field '${k}'`);
    }
    if (typeof u.username !== "string" || !USERNAME.test(u.username)) {
      fail(`${at}.username must be 1–64 characters of A–Z a–z 0–9 _ . @ -`);
    }
    const username = u.username as string;
    if (users.has(username)) fail(`${at}: user '${username}' appears twice`);
    if (typeof u.role !== "string" || !ROLES.includes(u.role as Role)) {
      fail(`${at} (${username}).role must be one of ${ROLES.join(", ")}`);
    }
    if (typeof u.passwordHash !== "string") fail(`${at} (${username}).passwordHash is missing`);
    try {
      parseHash(u.passwordHash as string);
    } catch (err) {
      fail(`${at} (${username}).passwordHash: ${(err as Error).message}`);
    }
    if (u.displayName !== undefined && (typeof u.displayName !== "string" || u.displayName.length > 80)) {
      fail(`${at} (${username}).displayName must be a string of at most 80 characters`);
    }
    users.set(username, {
      username,
      role: u.role as Role,
      passwordHash: u.passwordHash as string,
      displayName: (u.displayName as string | undefined) ?? username,
    });
  }
  // A fixed hash of the default cost to spend the same time on an unknown user as on a known one.
  const dummy = hashPassword("steadfast-no-such-user", Buffer.alloc(16, 7));
  const strip = (u: StoredUser): User => ({ username: u.username, role: u.role, displayName: u.displayName });
  return {
    size: users.size,
    authenticate(username, password) {
      const u = users.get(username);
      const ok = verifyPassword(password, u?.passwordHash ?? dummy);
      return u && ok ? { ok: true, user: strip(u) } : { ok: false, reason: "unknown-or-wrong" };
    },
    get(username) {
      const u = users.get(username);
      return u ? strip(u) : undefined;
    },
  };
}

/** A logged-in session. */
export interface Session {
  /** The cookie value: 32 random bytes, hex. */
  id: string;
  /** The CSRF token the page must send back on state-changing requests: 32 random bytes, hex. */
  csrf: string;
  user: User;
  createdAtMs: number;
  /** The session ends at this instant unless used before, epoch ms. */
  expiresAtMs: number;
}

/** Options of the session store. */
export interface SessionOptions {
  /** Idle lifetime, ms. */
  ttlMs: number;
  /** Most sessions kept; the least recently used goes first. */
  maxSessions: number;
  /** Source of random bytes. Default node:crypto randomBytes. */
  randomBytes?: (n: number) => Buffer;
}

/** Sessions in memory (a restart logs everyone out, which is the safe side). */
export interface SessionStore {
  create(user: User, nowMs: number): Session;
  /** The live session with this id, its expiry pushed forward; undefined when unknown or expired. */
  touch(id: string, nowMs: number): Session | undefined;
  delete(id: string): void;
  readonly size: number;
}

/** Creates a session store. */
export function createSessionStore(options: SessionOptions): SessionStore {
  const random = options.randomBytes ?? nodeRandomBytes;
  const sessions = new Map<string, Session>();
  return {
    create(user, nowMs) {
      const s: Session = {
        id: random(32).toString("hex"),
        csrf: random(32).toString("hex"),
        user,
        createdAtMs: nowMs,
        expiresAtMs: nowMs + options.ttlMs,
      };
      sessions.set(s.id, s);
      while (sessions.size > options.maxSessions) {
        const oldest = sessions.keys().next().value;
        if (oldest === undefined) break;
        sessions.delete(oldest);
      }
      return s;
    },
    touch(id, nowMs) {
      if (!/^[0-9a-f]{64}$/.test(id)) return undefined;
      const s = sessions.get(id);
      if (!s) return undefined;
      if (nowMs >= s.expiresAtMs) {
        sessions.delete(id);
        return undefined;
      }
      s.expiresAtMs = nowMs + options.ttlMs;
      // Re-insert so the map's order stays least-recently-used first.
      sessions.delete(id);
      sessions.set(id, s);
      return s;
    },
    delete(id) {
      sessions.delete(id);
    },
    get size() {
      return sessions.size;
    },
  };
}

/** Constant-time comparison of a presented token with the expected one. */
export function tokensEqual(presented: string | undefined, expected: string): boolean {
  if (typeof presented !== "string") return false;
  const a = Buffer.from(presented);
  const b = Buffer.from(expected);
  return a.length === b.length && timingSafeEqual(a, b);
}

/** Counts failed logins per username so a password cannot be guessed at speed. */
export interface LoginLimiter {
  /** True when further tries for `username` are refused now. */
  blocked(username: string, nowMs: number): boolean;
  fail(username: string, nowMs: number): void;
  succeed(username: string): void;
}

/** Creates a limiter: at most `maxFailures` failures per user within `windowMs`; bounded to `maxUsers` names. */
export function createLoginLimiter(maxFailures: number, windowMs: number, maxUsers = 10_000): LoginLimiter {
  const failures = new Map<string, number[]>();
  const recent = (username: string, nowMs: number) =>
    (failures.get(username) ?? []).filter((t) => nowMs - t < windowMs);
  return {
    blocked(username, nowMs) {
      return recent(username, nowMs).length >= maxFailures;
    },
    fail(username, nowMs) {
      const list = recent(username, nowMs);
      list.push(nowMs);
      failures.delete(username);
      failures.set(username, list.slice(-maxFailures));
      while (failures.size > maxUsers) {
        const oldest = failures.keys().next().value;
        if (oldest === undefined) break;
        failures.delete(oldest);
      }
    },
    succeed(username) {
      failures.delete(username);
    },
  };
}
