import { describe, expect, it } from "vitest";
import {
  createLoginLimiter,
  createSessionStore,
  createUserDirectory,
  hashPassword,
  parseHash,
  roleAllows,
  tokensEqual,
  verifyPassword,
} from "./users.js";

// A low scrypt cost keeps the tests fast; the format and the comparison are the same at any cost.
const FAST = { N: 1024, r: 8, p: 1, keyLen: 32 };
const salt = (byte: number) => Buffer.alloc(16, byte);

function directory() {
  return createUserDirectory({
    users: [
      { username: "vera", role: "viewer", passwordHash: hashPassword("vera-pass", salt(1), FAST) },
      {
        username: "otto",
        role: "operator",
        passwordHash: hashPassword("otto-pass", salt(2), FAST),
        displayName: "Otto K.",
      },
      { username: "erin", role: "engineer", passwordHash: hashPassword("erin-pass", salt(3), FAST) },
    ],
  });
}

describe("password hashes", () => {
  it("derives the same key as another scrypt implementation for the same inputs", () => {
    // given a 16-byte salt and N=1024, r=8, p=1, 32 bytes
    const stored = hashPassword("correct horse", Buffer.from("steadfast-salt-0"), FAST);
    // then the stored key is scrypt's
    // Source: reproduced (Python 3 hashlib.scrypt over OpenSSL, same password, salt and parameters).
    expect(stored).toBe(
      "scrypt$1024$8$1$c3RlYWRmYXN0LXNhbHQtMA==$FFSXY3MqrA9+/2w5MFz7xEF7nIKFjSsYFaHh4n0Fciw=",
    );
  });

  it("verifies the right password and refuses a wrong one", () => {
    const stored = hashPassword("s3cret", salt(9), FAST);
    expect(verifyPassword("s3cret", stored)).toBe(true);
    expect(verifyPassword("s3cret ", stored)).toBe(false);
    expect(verifyPassword("", stored)).toBe(false);
  });

  it("gives different hashes for the same password under different salts", () => {
    expect(hashPassword("same", salt(1), FAST)).not.toBe(hashPassword("same", salt(2), FAST));
  });

  it("refuses malformed hashes and unsafe costs with CONSOLE_HASH_INVALID", () => {
    expect(() => parseHash("plain-text-password")).toThrow(
      expect.objectContaining({ code: "CONSOLE_HASH_INVALID" }),
    );
    const weak = hashPassword("x", salt(1), FAST).replace("scrypt$1024$", "scrypt$16$");
    expect(() => parseHash(weak)).toThrow(/outside N/);
    expect(() => hashPassword("x", Buffer.alloc(8))).toThrow(/at least 16 bytes/);
  });
});

describe("the users file", () => {
  it("logs a known user in with the right password and gives their role", () => {
    const users = directory();
    const r = users.authenticate("otto", "otto-pass");
    expect(r).toEqual({ ok: true, user: { username: "otto", role: "operator", displayName: "Otto K." } });
  });

  it("gives the same answer for a wrong password and an unknown user", () => {
    const users = directory();
    expect(users.authenticate("otto", "vera-pass")).toEqual({ ok: false, reason: "unknown-or-wrong" });
    expect(users.authenticate("mallory", "otto-pass")).toEqual({ ok: false, reason: "unknown-or-wrong" });
  });

  it("names the entry at fault in a bad file", () => {
    const good = hashPassword("p", salt(1), FAST);
    expect(() =>
      createUserDirectory({ users: [{ username: "a", role: "admin", passwordHash: good }] }),
    ).toThrow(/users\[0\] \(a\)\.role must be one of viewer, operator, engineer/);
    expect(() =>
      createUserDirectory({
        users: [
          { username: "a", role: "viewer", passwordHash: good },
          { username: "a", role: "viewer", passwordHash: good },
        ],
      }),
    ).toThrow(/users\[1\]: user 'a' appears twice/);
    expect(() => createUserDirectory({ users: [{ username: "b", role: "viewer", password: "p" }] })).toThrow(
      /unknown field 'password'/,
    );
    expect(() => createUserDirectory({})).toThrow(expect.objectContaining({ code: "CONSOLE_USERS_INVALID" }));
  });
});

describe("roles", () => {
  it("lets an operator approve but not change the mode, and an engineer do both", () => {
    expect(roleAllows("viewer", "viewer")).toBe(true);
    expect(roleAllows("viewer", "operator")).toBe(false);
    expect(roleAllows("operator", "operator")).toBe(true);
    expect(roleAllows("operator", "engineer")).toBe(false);
    expect(roleAllows("engineer", "operator")).toBe(true);
    expect(roleAllows("engineer", "engineer")).toBe(true);
  });
});

describe("sessions", () => {
  let n = 0;
  const counter = (size: number) => Buffer.alloc(size, ++n);
  const user = { username: "otto", role: "operator" as const, displayName: "otto" };

  it("keeps a session alive while it is used and ends it after the idle lifetime", () => {
    const store = createSessionStore({ ttlMs: 1000, maxSessions: 10, randomBytes: counter });
    const s = store.create(user, 0);
    expect(s.id).toMatch(/^[0-9a-f]{64}$/);
    expect(s.csrf).not.toBe(s.id);
    expect(store.touch(s.id, 900)?.user.username).toBe("otto");
    expect(store.touch(s.id, 1800)?.expiresAtMs).toBe(2800);
    expect(store.touch(s.id, 2800)).toBeUndefined();
  });

  it("drops the least recently used session beyond the cap", () => {
    const store = createSessionStore({ ttlMs: 10_000, maxSessions: 2, randomBytes: counter });
    const a = store.create(user, 0);
    const b = store.create(user, 1);
    store.touch(a.id, 2);
    store.create(user, 3);
    expect(store.size).toBe(2);
    expect(store.touch(a.id, 4)).toBeDefined();
    expect(store.touch(b.id, 4)).toBeUndefined();
  });

  it("compares CSRF tokens exactly", () => {
    expect(tokensEqual("abc", "abc")).toBe(true);
    expect(tokensEqual("abd", "abc")).toBe(false);
    expect(tokensEqual("ab", "abc")).toBe(false);
    expect(tokensEqual(undefined, "abc")).toBe(false);
  });
});

describe("the failed-login limiter", () => {
  it("refuses a user after too many failures within the window and forgives after it", () => {
    const limiter = createLoginLimiter(3, 60_000);
    for (const t of [0, 1000, 2000]) limiter.fail("otto", t);
    expect(limiter.blocked("otto", 3000)).toBe(true);
    expect(limiter.blocked("vera", 3000)).toBe(false);
    expect(limiter.blocked("otto", 60_500)).toBe(false);
  });

  it("clears the count on a successful login", () => {
    const limiter = createLoginLimiter(2, 60_000);
    limiter.fail("otto", 0);
    limiter.succeed("otto");
    limiter.fail("otto", 1);
    expect(limiter.blocked("otto", 2)).toBe(false);
  });
});
