/**
 * Signing of setpoint commands: HMAC-SHA256 (RFC 2104, FIPS 198-1) over the RFC 8785 canonical
 * JSON (JCS) of the command without its `signature` member. Sender (validate) and receiver (a
 * control gateway) must hash the same bytes however each one ordered keys or wrote numbers, hence
 * the canonical form. Pure: no clock, no bus; keys are passed in.
 */
import { createHmac, timingSafeEqual } from "node:crypto";
import canonicalizeModule from "canonicalize";
import { SteadfastError } from "./errors.js";
import type { SetpointCommand } from "./generated/messages.js";

/** Registry of the command-signing error codes, with the one-line meaning shown in the docs. */
export const COMMAND_ERROR_CODES = {
  COMMAND_KEY_INVALID:
    "a signing key is unusable: shorter than 32 bytes, badly encoded, or its id disagrees with the command's keyId",
  COMMAND_CANONICAL_INVALID:
    "a value cannot be put in RFC 8785 canonical form (NaN, Infinity, a lone surrogate, a non-JSON type)",
} as const;

export type CommandErrorCode = keyof typeof COMMAND_ERROR_CODES;

/** An error raised while signing or canonicalising a command. */
export class CommandSigningError extends SteadfastError {
  override readonly name = "CommandSigningError";
  constructor(
    readonly code: CommandErrorCode,
    message: string,
    options?: ErrorOptions,
  ) {
    super(message, options);
  }
}

/** The command as built before signing. `keyId` is filled from the key when absent. */
export type UnsignedCommand = Omit<SetpointCommand, "signature" | "keyId"> & { keyId?: string };

/** A secret as configured: raw bytes, or a string `base64:<…>`, `hex:<…>`, or plain text (its UTF-8 bytes). */
export type Secret = Uint8Array | string;

/** A named HMAC key. */
export interface SigningKey {
  /** Key id written into the command's `keyId`, so receivers can hold several keys while they rotate. */
  id: string;
  /** The shared secret, at least MIN_KEY_BYTES bytes once decoded. */
  secret: Secret;
}

/**
 * Smallest accepted key, bytes. RFC 2104 §3 discourages keys shorter than the hash output
 * (L = 32 bytes for SHA-256): they weaken the MAC.
 */
export const MIN_KEY_BYTES = 32;

/** Length of an HMAC-SHA256 tag, bytes. */
export const MAC_BYTES = 32;

/**
 * Decodes a configured secret to bytes: `base64:<…>` and `hex:<…>` are decoded, any other string
 * is taken as its UTF-8 bytes, bytes are copied. Throws COMMAND_KEY_INVALID on a bad encoding.
 */
export function decodeSecret(secret: Secret): Uint8Array {
  if (typeof secret !== "string") return Uint8Array.from(secret);
  if (secret.startsWith("base64:")) {
    const text = secret.slice(7);
    if (!/^[A-Za-z0-9+/]*={0,2}$/.test(text) || text.length % 4 !== 0) {
      throw new CommandSigningError("COMMAND_KEY_INVALID", "secret 'base64:…' is not padded base64");
    }
    return Uint8Array.from(Buffer.from(text, "base64"));
  }
  if (secret.startsWith("hex:")) {
    const text = secret.slice(4);
    if (!/^(?:[0-9a-fA-F]{2})*$/.test(text)) {
      throw new CommandSigningError(
        "COMMAND_KEY_INVALID",
        "secret 'hex:…' is not an even number of hex digits",
      );
    }
    return Uint8Array.from(Buffer.from(text, "hex"));
  }
  return Uint8Array.from(Buffer.from(secret, "utf8"));
}

/** Decodes a secret and checks its length (MIN_KEY_BYTES); `label` names it in the error. */
export function signingKeyBytes(secret: Secret, label: string): Uint8Array {
  const bytes = decodeSecret(secret);
  if (bytes.byteLength < MIN_KEY_BYTES) {
    throw new CommandSigningError(
      "COMMAND_KEY_INVALID",
      `key '${label}' has ${bytes.byteLength} bytes; at least ${MIN_KEY_BYTES} are needed (RFC 2104 §3)`,
    );
  }
  return bytes;
}

/** HMAC-SHA256 of `message` (UTF-8 when a string) under `key` (raw bytes, or UTF-8 of a string). No length rule: the primitive. */
export function hmacSha256(key: Uint8Array | string, message: Uint8Array | string): Buffer {
  return createHmac("sha256", key).update(message).digest();
}

// canonicalize is CommonJS with an `export default` typing; under NodeNext its default import is
// the function itself at run time, which the typings call the module object.
const canonicalize = canonicalizeModule as unknown as (input: unknown) => string | undefined;

// With the u flag a surrogate pair is one code point, so this matches only an unpaired half.
const LONE_SURROGATE = /[\uD800-\uDFFF]/u;

function checkCanonicalizable(value: unknown, path: string): void {
  if (value === null || typeof value === "boolean") return;
  if (typeof value === "number") {
    if (!Number.isFinite(value)) {
      throw new CommandSigningError(
        "COMMAND_CANONICAL_INVALID",
        `${path || "/"}: ${value} is not a JSON number`,
      );
    }
    return;
  }
  if (typeof value === "string") {
    // RFC 8785 §3.1 restricts input to I-JSON (RFC 7493 §2.1), which forbids unpaired surrogates;
    // JSON.stringify would escape them and another implementation might not.
    if (LONE_SURROGATE.test(value)) {
      throw new CommandSigningError(
        "COMMAND_CANONICAL_INVALID",
        `${path || "/"}: a string holds a lone surrogate`,
      );
    }
    return;
  }
  if (Array.isArray(value)) {
    value.forEach((v, i) => {
      if (v === undefined) {
        throw new CommandSigningError("COMMAND_CANONICAL_INVALID", `${path}/${i}: undefined in an array`);
      }
      checkCanonicalizable(v, `${path}/${i}`);
    });
    return;
  }
  if (typeof value === "object") {
    const proto = Object.getPrototypeOf(value);
    if (proto !== Object.prototype && proto !== null) {
      throw new CommandSigningError(
        "COMMAND_CANONICAL_INVALID",
        `${path || "/"}: only plain objects can be canonicalised (got ${proto?.constructor?.name ?? "?"})`,
      );
    }
    for (const [k, v] of Object.entries(value)) {
      if (LONE_SURROGATE.test(k)) {
        throw new CommandSigningError("COMMAND_CANONICAL_INVALID", `${path}: a key holds a lone surrogate`);
      }
      // An undefined member is left out, as JSON.stringify leaves it out on the wire.
      if (v !== undefined) checkCanonicalizable(v, `${path}/${k}`);
    }
    return;
  }
  throw new CommandSigningError("COMMAND_CANONICAL_INVALID", `${path || "/"}: a ${typeof value} is not JSON`);
}

/**
 * The RFC 8785 (JCS) canonical JSON of `value`: members sorted by UTF-16 code units, no white
 * space, numbers as ECMAScript writes them (so -0 → 0, 1e21 → 1e+21). Throws COMMAND_CANONICAL_INVALID
 * for what JCS does not allow (non-finite numbers, lone surrogates, non-plain objects).
 */
export function canonicalJson(value: unknown): string {
  checkCanonicalizable(value, "");
  const text = canonicalize(value);
  if (text === undefined) {
    throw new CommandSigningError("COMMAND_CANONICAL_INVALID", "nothing to canonicalise");
  }
  return text;
}

/** The exact text that is signed: the canonical JSON of the command without its `signature` member. */
export function commandSigningInput(command: UnsignedCommand | SetpointCommand): string {
  const { signature: _signature, ...rest } = command as SetpointCommand;
  return canonicalJson(rest);
}

/**
 * Signs a command with `key`: fills `keyId` (or checks that it names `key.id`) and adds
 * `signature: { alg: "HMAC-SHA256", value: <base64> }`. Any previous signature is replaced.
 * Throws COMMAND_KEY_INVALID for a short key or a keyId that names another key.
 */
export function signCommand(data: UnsignedCommand | SetpointCommand, key: SigningKey): SetpointCommand {
  if (data.keyId !== undefined && data.keyId !== key.id) {
    throw new CommandSigningError(
      "COMMAND_KEY_INVALID",
      `command names key '${data.keyId}' but is being signed with key '${key.id}'`,
    );
  }
  const secret = signingKeyBytes(key.secret, key.id);
  const { signature: _old, ...rest } = data as SetpointCommand;
  const unsigned = { ...rest, keyId: key.id };
  const mac = hmacSha256(secret, canonicalJson(unsigned));
  return { ...unsigned, signature: { alg: "HMAC-SHA256", value: mac.toString("base64") } };
}

/** Why a signature did not verify. */
export type SignatureFault =
  | "key-unknown"
  | "alg-unsupported"
  | "signature-malformed"
  | "signature-mismatch"
  | "not-canonicalizable";

/** Outcome of a signature check. */
export type SignatureCheck =
  | { ok: true; keyId: string }
  | { ok: false; fault: SignatureFault; detail: string };

/** Decodes a MAC written as 64 hex digits or padded base64; undefined when it is neither or not 32 bytes. */
export function decodeMac(text: string): Buffer | undefined {
  if (/^[0-9a-fA-F]{64}$/.test(text)) return Buffer.from(text, "hex");
  if (/^[A-Za-z0-9+/]{43}=$/.test(text)) {
    const mac = Buffer.from(text, "base64");
    return mac.byteLength === MAC_BYTES ? mac : undefined;
  }
  return undefined;
}

/**
 * Checks a command's signature against the receiver's keys (id → secret). The comparison is
 * constant-time (timingSafeEqual), so the time taken does not reveal how many bytes matched.
 * Never throws for a bad command; a configured key shorter than MIN_KEY_BYTES throws COMMAND_KEY_INVALID.
 */
export function verifyCommandSignature(
  command: SetpointCommand,
  keys: Record<string, Secret>,
): SignatureCheck {
  const keyId = command.keyId;
  // Object.hasOwn, not keys[keyId]: a keyId such as "constructor" must not find Object.prototype's members.
  if (typeof keyId !== "string" || !Object.hasOwn(keys, keyId)) {
    return { ok: false, fault: "key-unknown", detail: `no key with id '${String(keyId)}'` };
  }
  const sig = command.signature as Partial<SetpointCommand["signature"]> | undefined;
  if (!sig || typeof sig !== "object") {
    return { ok: false, fault: "signature-malformed", detail: "the command has no signature" };
  }
  if (sig.alg !== "HMAC-SHA256") {
    return {
      ok: false,
      fault: "alg-unsupported",
      detail: `signature algorithm '${String(sig.alg)}' is not HMAC-SHA256`,
    };
  }
  const given = typeof sig.value === "string" ? decodeMac(sig.value) : undefined;
  if (!given) {
    return {
      ok: false,
      fault: "signature-malformed",
      detail: "signature value is not 32 bytes of hex or base64",
    };
  }
  const secret = signingKeyBytes(keys[keyId] as Secret, keyId);
  let input: string;
  try {
    input = commandSigningInput(command);
  } catch (err) {
    return { ok: false, fault: "not-canonicalizable", detail: (err as Error).message };
  }
  const expected = hmacSha256(secret, input);
  if (!timingSafeEqual(expected, given)) {
    return { ok: false, fault: "signature-mismatch", detail: `signature does not match key '${keyId}'` };
  }
  return { ok: true, keyId };
}
