/**
 * The receiving end of the command channel: what a control gateway (the demo plant, or an adapter
 * in front of a real control system) checks before it lets a setpoint command through. Pure: the
 * caller passes the time in and does the I/O.
 *
 * The checks cover the communication errors that a safety-related channel must detect (IEC 61784-3
 * lists corruption, unintended repetition, incorrect sequence, loss, unacceptable delay,
 * insertion, masquerade and addressing): an HMAC over the canonical command (corruption,
 * insertion, masquerade), a per-site sequence number (repetition, incorrect sequence, loss as a
 * flagged gap), issue and expiry times (delay), and the target site/unit (addressing). On top sit
 * the plant's own limits, which a command may never move a setpoint beyond, and a watchdog: when the
 * optimizer's heartbeats stop for `watchdogS`, the gateway sheds it and holds its own setpoints.
 * Steadfast is not a safety system: these limits sit inside the plant's safety-system limits.
 */
import {
  type Secret,
  type SignatureFault,
  signingKeyBytes,
  verifyCommandSignature,
} from "./command-signing.js";
import { SteadfastError } from "./errors.js";
import type { SetpointCommand } from "./generated/messages.js";

/** Registry of the gateway's refusal codes (they travel in rto.readback.v1 `code`), with their meaning. */
export const GATEWAY_CODES = {
  GATEWAY_COMMAND_MALFORMED:
    "the command lacks a field or holds a value of the wrong type (e.g. a non-finite number)",
  GATEWAY_KEY_UNKNOWN:
    "the command names a key id the gateway does not hold (insertion by an unknown sender)",
  GATEWAY_SIGNATURE_UNSUPPORTED: "the signature algorithm is not HMAC-SHA256",
  GATEWAY_SIGNATURE_INVALID:
    "the signature does not match the command (corrupted, altered, or signed with another key)",
  GATEWAY_TARGET_MISMATCH: "the command is addressed to another site or process unit",
  GATEWAY_EXPIRY_INVALID: "the command expires before or when it was issued",
  GATEWAY_ISSUED_IN_FUTURE:
    "the command's issue time lies further ahead of the gateway's clock than the allowed skew",
  GATEWAY_EXPIRED: "the command's expiry time has passed (it was delayed on the way)",
  GATEWAY_TOO_OLD:
    "the command was issued longer ago than the gateway's maximum age (it was delayed on the way)",
  GATEWAY_SEQ_REPEATED: "the command repeats the sequence number last accepted (a replay or duplicate)",
  GATEWAY_SEQ_OUT_OF_ORDER:
    "the command's sequence number is below the last accepted one (stale or reordered)",
  GATEWAY_SHED:
    "the gateway has shed the optimizer (no heartbeat within its watchdog) and holds its own setpoints",
  GATEWAY_TAG_UNKNOWN: "a setpoint names a tag the gateway has no limits for",
  GATEWAY_TAG_DUPLICATE: "the command sets the same tag twice",
  GATEWAY_UNIT_MISMATCH: "a setpoint is given in another unit than the gateway's limit for that tag",
  GATEWAY_LIMIT_VIOLATION:
    "a setpoint lies outside the plant's own limits for that tag; the whole command is refused",
} as const;

/** A refusal code of the gateway. */
export type GatewayCode = keyof typeof GATEWAY_CODES;

/** The plant's own limits of one setpoint tag. */
export interface TagLimit {
  /** Lowest setpoint the plant accepts, in the tag's unit. */
  min: number;
  /** Highest setpoint the plant accepts, in the tag's unit. */
  max: number;
  /** Fastest ramp the plant allows, tag unit per second; a faster requested ramp is clipped. Default: no limit. */
  maxRatePerS?: number;
  /** The tag's unit; when given, a setpoint in another unit is refused. Default: not checked. */
  unit?: string;
}

/** Options of a control gateway. */
export interface ControlGatewayOptions {
  /** Site id this gateway serves; commands for another site are refused. */
  site: string;
  /** Process unit id this gateway serves (e.g. "R-1"). */
  unit: string;
  /** Keys it trusts, id → secret (bytes, or `base64:…` / `hex:…` / plain text); each ≥ 32 bytes. */
  keys: Record<string, Secret>;
  /** The plant's own limits per setpoint tag; a tag not listed cannot be commanded. */
  limits: Record<string, TagLimit>;
  /** Heartbeat watchdog, s: with no heartbeat for this long the gateway sheds the optimizer. */
  watchdogS: number;
  /** Tolerated lead of a command's issue time over the gateway clock, s. Default 2. */
  maxClockSkewS?: number;
  /** Oldest command (now − issuedAt) the gateway accepts, s. Default 60. */
  maxAgeS?: number;
  /**
   * Last sequence number accepted before a restart, kept by the caller; commands at or below it
   * are refused, so a recorded command cannot be replayed after the gateway restarts. Default 0 (none).
   */
  lastSeq?: number;
  /**
   * Start shed (holding the plant's own setpoints) until the first heartbeat arrives.
   * Default true: a gateway that has not heard from the optimizer does not follow it. When false,
   * the watchdog runs from the first accept() or tick().
   */
  startShed?: boolean;
}

/** A setpoint that passed the checks, with the ramp the gateway will use. */
export interface AcceptedSetpoint {
  tag: string;
  /** Target value, in `unit`. */
  value: number;
  unit: string;
  /** Ramp to use, unit per second: the requested one clipped to the tag's maxRatePerS; absent for a step. */
  rampPerS?: number;
  /** The ramp that was asked for, unit per second, when one was. */
  requestedRampPerS?: number;
  /** True when the requested ramp (or a step) was slowed to the tag's maxRatePerS. */
  rampClipped: boolean;
}

/** The gateway's verdict on one command. */
export type GatewayDecision =
  | {
      accepted: true;
      seq: number;
      setpoints: AcceptedSetpoint[];
      /** Present when sequence numbers were skipped (commands lost on the way): how many. */
      missedSeqs?: number;
    }
  | {
      accepted: false;
      code: GatewayCode;
      reason: string;
      /** The setpoint tag at fault, for limit and tag refusals. */
      tag?: string;
    };

/** The gateway's state, for readbacks and persistence. */
export interface GatewayState {
  /** True while the optimizer is shed and the plant holds its own setpoints. */
  shed: boolean;
  /** Highest sequence number accepted (0: none); persist it to refuse replays across restarts. */
  lastSeq: number;
  /** Time of the last heartbeat, epoch ms; absent before the first. */
  lastHeartbeatMs?: number;
  /** Time of the last accepted command, epoch ms; absent before the first. */
  lastAcceptedMs?: number;
}

/** A control gateway created by createControlGateway. */
export interface ControlGateway {
  /** Checks a command at `nowMs` (epoch ms); on acceptance the sequence number advances. */
  accept(command: SetpointCommand, nowMs: number): GatewayDecision;
  /** Records a heartbeat from the optimizer at `nowMs`; the next check un-sheds a shed gateway. */
  heartbeat(nowMs: number): void;
  /** Runs the watchdog at `nowMs`; `changed` is true when `shed` differs from the previous tick's. */
  tick(nowMs: number): { shed: boolean; changed: boolean };
  /** The current state. */
  state(): GatewayState;
}

/** Registry of the gateway's configuration errors. */
export const GATEWAY_ERROR_CODES = {
  GATEWAY_OPTIONS_INVALID: "a gateway option is missing or out of range; the message names it",
} as const;

/** Error thrown by createControlGateway for bad options (a configuration bug, not a bad command). */
export class GatewayOptionsError extends SteadfastError {
  override readonly name = "GatewayOptionsError";
  readonly code = "GATEWAY_OPTIONS_INVALID" as const;
}

const SIGNATURE_CODES: Record<SignatureFault, GatewayCode> = {
  "key-unknown": "GATEWAY_KEY_UNKNOWN",
  "alg-unsupported": "GATEWAY_SIGNATURE_UNSUPPORTED",
  "signature-malformed": "GATEWAY_SIGNATURE_INVALID",
  "signature-mismatch": "GATEWAY_SIGNATURE_INVALID",
  "not-canonicalizable": "GATEWAY_COMMAND_MALFORMED",
};

function isFiniteNumber(x: unknown): x is number {
  return typeof x === "number" && Number.isFinite(x);
}

function malformation(c: unknown): string | undefined {
  if (!c || typeof c !== "object") return "the command is not an object";
  const cmd = c as Partial<SetpointCommand>;
  if (!cmd.target || typeof cmd.target.site !== "string" || typeof cmd.target.unit !== "string")
    return "target {site, unit} is missing";
  if (!Number.isSafeInteger(cmd.seq) || (cmd.seq as number) < 1) return "seq must be an integer ≥ 1";
  if (!Number.isSafeInteger(cmd.issuedAt) || !Number.isSafeInteger(cmd.expiresAt))
    return "issuedAt and expiresAt must be integer epoch milliseconds";
  if (typeof cmd.keyId !== "string") return "keyId is missing";
  if (cmd.mode !== "closed-loop" && cmd.mode !== "advisory-approved")
    return "mode must be closed-loop or advisory-approved";
  if (cmd.mode === "advisory-approved" && !cmd.approvedBy)
    return "an advisory-approved command needs approvedBy";
  if (!Array.isArray(cmd.setpoints) || cmd.setpoints.length === 0 || cmd.setpoints.length > 50)
    return "setpoints must hold 1 to 50 entries";
  for (const [i, sp] of cmd.setpoints.entries()) {
    if (!sp || typeof sp.tag !== "string" || typeof sp.unit !== "string" || !isFiniteNumber(sp.value))
      return `setpoints/${i} needs a tag, a unit and a finite value`;
    if (sp.rampPerS !== undefined && !(isFiniteNumber(sp.rampPerS) && sp.rampPerS > 0))
      return `setpoints/${i}: rampPerS must be a finite number > 0`;
  }
  return undefined;
}

function checkOptions(o: ControlGatewayOptions): void {
  const bad = (msg: string) => {
    throw new GatewayOptionsError(`control gateway option ${msg}`);
  };
  if (!o.site) bad("site is empty");
  if (!o.unit) bad("unit is empty");
  if (!(isFiniteNumber(o.watchdogS) && o.watchdogS > 0)) bad(`watchdogS must be > 0 s (got ${o.watchdogS})`);
  if (o.maxClockSkewS !== undefined && !(isFiniteNumber(o.maxClockSkewS) && o.maxClockSkewS >= 0))
    bad(`maxClockSkewS must be ≥ 0 s (got ${o.maxClockSkewS})`);
  if (o.maxAgeS !== undefined && !(isFiniteNumber(o.maxAgeS) && o.maxAgeS > 0))
    bad(`maxAgeS must be > 0 s (got ${o.maxAgeS})`);
  if (o.lastSeq !== undefined && !(Number.isSafeInteger(o.lastSeq) && o.lastSeq >= 0))
    bad(`lastSeq must be an integer ≥ 0 (got ${o.lastSeq})`);
  if (Object.keys(o.keys).length === 0) bad("keys is empty: the gateway could accept nothing");
  // Checks every key's length now, so a short key stops start-up rather than the first command.
  for (const [id, secret] of Object.entries(o.keys)) signingKeyBytes(secret, id);
  for (const [tag, l] of Object.entries(o.limits)) {
    if (!(isFiniteNumber(l.min) && isFiniteNumber(l.max) && l.min <= l.max))
      bad(`limits.${tag}: min ${l.min} and max ${l.max} must be finite with min ≤ max`);
    if (l.maxRatePerS !== undefined && !(isFiniteNumber(l.maxRatePerS) && l.maxRatePerS > 0))
      bad(`limits.${tag}.maxRatePerS must be > 0 (got ${l.maxRatePerS})`);
  }
}

/**
 * Creates a control gateway (see the module comment for what it checks, in this order: form,
 * key, signature, target, times, sequence, watchdog, tags and limits). Throws GatewayOptionsError
 * (code GATEWAY_OPTIONS_INVALID), or CommandSigningError (COMMAND_KEY_INVALID) for a short or badly
 * encoded key.
 */
export function createControlGateway(options: ControlGatewayOptions): ControlGateway {
  checkOptions(options);
  const keys: Record<string, Secret> = { ...options.keys };
  const limits = new Map(Object.entries(options.limits));
  const watchdogMs = options.watchdogS * 1000;
  const skewMs = (options.maxClockSkewS ?? 2) * 1000;
  const maxAgeMs = (options.maxAgeS ?? 60) * 1000;
  let lastSeq = options.lastSeq ?? 0;
  let lastHeartbeatMs: number | undefined;
  let lastAcceptedMs: number | undefined;
  const startShed = options.startShed ?? true;
  let shed = startShed;
  let tickedShed = shed;
  // Without startShed, the watchdog runs from the first time the gateway is asked about the time.
  let watchFromMs: number | undefined;

  const evaluate = (nowMs: number): boolean => {
    if (lastHeartbeatMs !== undefined) shed = nowMs - lastHeartbeatMs > watchdogMs;
    else if (!startShed) {
      watchFromMs ??= nowMs;
      shed = nowMs - watchFromMs > watchdogMs;
    }
    return shed;
  };

  const refuse = (code: GatewayCode, reason: string, tag?: string): GatewayDecision =>
    tag === undefined ? { accepted: false, code, reason } : { accepted: false, code, reason, tag };

  return {
    accept(command, nowMs) {
      const malformed = malformation(command);
      if (malformed) return refuse("GATEWAY_COMMAND_MALFORMED", malformed);

      const sig = verifyCommandSignature(command, keys);
      if (!sig.ok) return refuse(SIGNATURE_CODES[sig.fault], sig.detail);

      const { site, unit } = command.target;
      if (site !== options.site || unit !== options.unit) {
        return refuse(
          "GATEWAY_TARGET_MISMATCH",
          `command is for ${site}/${unit}; this gateway serves ${options.site}/${options.unit}`,
        );
      }

      if (command.expiresAt <= command.issuedAt) {
        return refuse(
          "GATEWAY_EXPIRY_INVALID",
          `expiresAt ${command.expiresAt} ≤ issuedAt ${command.issuedAt}`,
        );
      }
      if (command.issuedAt - nowMs > skewMs) {
        return refuse(
          "GATEWAY_ISSUED_IN_FUTURE",
          `issued ${command.issuedAt - nowMs} ms ahead of the gateway clock (skew allowed: ${skewMs} ms)`,
        );
      }
      // No skew allowance on expiry: a gateway clock that runs ahead only makes it stricter.
      if (nowMs >= command.expiresAt) {
        return refuse("GATEWAY_EXPIRED", `expired ${nowMs - command.expiresAt} ms ago`);
      }
      if (nowMs - command.issuedAt > maxAgeMs) {
        return refuse(
          "GATEWAY_TOO_OLD",
          `issued ${nowMs - command.issuedAt} ms ago; the gateway accepts at most ${maxAgeMs} ms`,
        );
      }

      if (command.seq === lastSeq) {
        return refuse("GATEWAY_SEQ_REPEATED", `seq ${command.seq} was already accepted`);
      }
      if (command.seq < lastSeq) {
        return refuse(
          "GATEWAY_SEQ_OUT_OF_ORDER",
          `seq ${command.seq} is below the last accepted seq ${lastSeq}`,
        );
      }

      if (evaluate(nowMs)) {
        return refuse(
          "GATEWAY_SHED",
          lastHeartbeatMs === undefined
            ? "no heartbeat received yet; holding the plant's own setpoints"
            : `no heartbeat for ${nowMs - lastHeartbeatMs} ms (watchdog ${watchdogMs} ms); holding the plant's own setpoints`,
        );
      }

      const seen = new Set<string>();
      const accepted: AcceptedSetpoint[] = [];
      for (const sp of command.setpoints) {
        if (seen.has(sp.tag)) return refuse("GATEWAY_TAG_DUPLICATE", `tag ${sp.tag} is set twice`, sp.tag);
        seen.add(sp.tag);
        const limit = limits.get(sp.tag);
        if (!limit)
          return refuse("GATEWAY_TAG_UNKNOWN", `tag ${sp.tag} has no limits at this gateway`, sp.tag);
        if (limit.unit !== undefined && limit.unit !== sp.unit) {
          return refuse(
            "GATEWAY_UNIT_MISMATCH",
            `tag ${sp.tag} is given in '${sp.unit}'; the gateway's limits are in '${limit.unit}'`,
            sp.tag,
          );
        }
        if (sp.value < limit.min || sp.value > limit.max) {
          return refuse(
            "GATEWAY_LIMIT_VIOLATION",
            `tag ${sp.tag} = ${sp.value} ${sp.unit} is outside the plant's limits [${limit.min}, ${limit.max}]`,
            sp.tag,
          );
        }
        const out: AcceptedSetpoint = { tag: sp.tag, value: sp.value, unit: sp.unit, rampClipped: false };
        if (sp.rampPerS !== undefined) out.requestedRampPerS = sp.rampPerS;
        if (limit.maxRatePerS !== undefined) {
          // A step (no ramp asked for) is infinitely fast, so it too is slowed to the plant's rate.
          out.rampClipped = sp.rampPerS === undefined || sp.rampPerS > limit.maxRatePerS;
          out.rampPerS = out.rampClipped ? limit.maxRatePerS : sp.rampPerS;
        } else if (sp.rampPerS !== undefined) {
          out.rampPerS = sp.rampPerS;
        }
        accepted.push(out);
      }

      const missed = lastSeq > 0 ? command.seq - lastSeq - 1 : 0;
      lastSeq = command.seq;
      lastAcceptedMs = nowMs;
      return missed > 0
        ? { accepted: true, seq: command.seq, setpoints: accepted, missedSeqs: missed }
        : { accepted: true, seq: command.seq, setpoints: accepted };
    },

    heartbeat(nowMs) {
      lastHeartbeatMs = lastHeartbeatMs === undefined ? nowMs : Math.max(lastHeartbeatMs, nowMs);
    },

    tick(nowMs) {
      const now = evaluate(nowMs);
      const changed = now !== tickedShed;
      tickedShed = now;
      return { shed: now, changed };
    },

    state() {
      const s: GatewayState = { shed, lastSeq };
      if (lastHeartbeatMs !== undefined) s.lastHeartbeatMs = lastHeartbeatMs;
      if (lastAcceptedMs !== undefined) s.lastAcceptedMs = lastAcceptedMs;
      return s;
    },
  };
}
