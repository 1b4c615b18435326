import { readFileSync } from "node:fs";
import { join } from "node:path";
import { describe, expect, it } from "vitest";
import { CommandSigningError, signCommand, type UnsignedCommand } from "./command-signing.js";
import {
  type ControlGatewayOptions,
  createControlGateway,
  GATEWAY_CODES,
  type GatewayDecision,
  GatewayOptionsError,
} from "./control-gateway.js";
import type { SetpointCommand } from "./generated/messages.js";
import { SCHEMA_DIR } from "./schemas.js";

const T0 = 1_767_225_600_000; // 2026-01-01T00:00:00Z
const KEY = { id: "k1", secret: "base64:AAECAwQFBgcICQoLDA0ODxAREhMUFRYXGBkaGxwdHh8=" };
const INTRUDER = { id: "k1", secret: "an-intruder-secret-that-is-long-enough-32" };

function options(over: Partial<ControlGatewayOptions> = {}): ControlGatewayOptions {
  return {
    site: "kestrel",
    unit: "R-1",
    keys: { [KEY.id]: KEY.secret },
    limits: {
      "TIC-101.SP": { min: 60, max: 95, maxRatePerS: 0.1, unit: "degC" },
      "FIC-102.SP": { min: 0.5, max: 3, unit: "kg/s" },
    },
    watchdogS: 10,
    ...over,
  };
}

function command(seq: number, over: Partial<UnsignedCommand> = {}, key = KEY): SetpointCommand {
  return signCommand(
    {
      target: { site: "kestrel", unit: "R-1" },
      seq,
      issuedAt: T0,
      expiresAt: T0 + 30_000,
      mode: "closed-loop",
      proposalId: `P-${seq}`,
      cycleId: `C-${seq}`,
      setpoints: [
        { tag: "TIC-101.SP", value: 80, unit: "degC", rampPerS: 0.05 },
        { tag: "FIC-102.SP", value: 1.5, unit: "kg/s" },
      ],
      ...over,
    },
    key,
  );
}

/** A gateway that has heard a heartbeat at T0, so it follows the optimizer. */
function liveGateway(over: Partial<ControlGatewayOptions> = {}) {
  const gw = createControlGateway(options(over));
  gw.heartbeat(T0);
  return gw;
}

function codeOf(d: GatewayDecision): string {
  return d.accepted ? "ACCEPTED" : d.code;
}

describe("a control gateway, against the communication errors of IEC 61784-3", () => {
  // Source: IEC 61784-3 (2021) Industrial communication networks — Functional safety fieldbuses, the list of communication errors; from memory

  it("accepts a well-formed, signed, timely command for its own unit", () => {
    const d = liveGateway().accept(command(1), T0 + 100);
    expect(d).toMatchObject({ accepted: true, seq: 1 });
    expect(d.accepted && d.missedSeqs).toBeFalsy();
  });

  it("refuses a corrupted command: one character of the payload changed in transit", () => {
    const wire = JSON.stringify(command(1)).replace('"value":80', '"value":89');
    expect(codeOf(liveGateway().accept(JSON.parse(wire), T0 + 100))).toBe("GATEWAY_SIGNATURE_INVALID");
  });

  it("refuses a corrupted signature", () => {
    const c = command(1);
    const value = `${c.signature.value[0] === "A" ? "B" : "A"}${c.signature.value.slice(1)}`;
    const d = liveGateway().accept({ ...c, signature: { ...c.signature, value } }, T0 + 100);
    expect(codeOf(d)).toBe("GATEWAY_SIGNATURE_INVALID");
  });

  it("refuses an unintended repetition of the command it just accepted", () => {
    const gw = liveGateway();
    const c = command(1);
    expect(gw.accept(c, T0 + 100).accepted).toBe(true);
    expect(codeOf(gw.accept(structuredClone(c), T0 + 200))).toBe("GATEWAY_SEQ_REPEATED");
  });

  it("refuses a command that arrives out of sequence", () => {
    const gw = liveGateway();
    gw.accept(command(1), T0 + 100);
    gw.accept(command(3), T0 + 200);
    expect(codeOf(gw.accept(command(2), T0 + 300))).toBe("GATEWAY_SEQ_OUT_OF_ORDER");
    expect(gw.state().lastSeq).toBe(3);
  });

  it("detects lost commands as a gap in the sequence and flags the number missed", () => {
    const gw = liveGateway();
    gw.accept(command(1), T0 + 100);
    const d = gw.accept(command(5), T0 + 200);
    expect(d).toMatchObject({ accepted: true, seq: 5, missedSeqs: 3 });
  });

  it("refuses an unacceptably delayed command: past its expiry", () => {
    expect(codeOf(liveGateway().accept(command(1), T0 + 30_000))).toBe("GATEWAY_EXPIRED");
  });

  it("refuses an unacceptably delayed command: older than the gateway's maximum age even if not expired", () => {
    const gw = liveGateway({ maxAgeS: 20 });
    gw.heartbeat(T0 + 25_000);
    const d = gw.accept(command(1, { expiresAt: T0 + 600_000 }), T0 + 25_000);
    expect(codeOf(d)).toBe("GATEWAY_TOO_OLD");
  });

  it("refuses a command issued further in the future than the allowed clock skew", () => {
    const gw = liveGateway({ maxClockSkewS: 2 });
    expect(codeOf(gw.accept(command(1), T0 - 2_500))).toBe("GATEWAY_ISSUED_IN_FUTURE");
    expect(codeOf(gw.accept(command(1), T0 - 1_500))).toBe("ACCEPTED");
  });

  it("refuses a command whose expiry is not after its issue time", () => {
    expect(codeOf(liveGateway().accept(command(1, { expiresAt: T0 }), T0))).toBe("GATEWAY_EXPIRY_INVALID");
  });

  it("refuses an inserted command from a sender whose key it does not hold", () => {
    const stranger = { id: "k-stranger", secret: INTRUDER.secret };
    expect(codeOf(liveGateway().accept(command(1, {}, stranger), T0 + 100))).toBe("GATEWAY_KEY_UNKNOWN");
  });

  it("refuses a masquerading command signed with another secret under a trusted key id", () => {
    expect(codeOf(liveGateway().accept(command(1, {}, INTRUDER), T0 + 100))).toBe(
      "GATEWAY_SIGNATURE_INVALID",
    );
  });

  it("refuses a command addressed to another unit or another site", () => {
    const gw = liveGateway();
    expect(codeOf(gw.accept(command(1, { target: { site: "kestrel", unit: "R-2" } }), T0))).toBe(
      "GATEWAY_TARGET_MISMATCH",
    );
    expect(codeOf(gw.accept(command(1, { target: { site: "osprey", unit: "R-1" } }), T0))).toBe(
      "GATEWAY_TARGET_MISMATCH",
    );
  });

  it("refuses a command with another signature algorithm", () => {
    const c = command(1) as unknown as { signature: { alg: string } };
    c.signature.alg = "none";
    expect(codeOf(liveGateway().accept(c as unknown as SetpointCommand, T0))).toBe(
      "GATEWAY_SIGNATURE_UNSUPPORTED",
    );
  });

  it("refuses a malformed command without throwing", () => {
    const gw = liveGateway();
    const unapproved = command(1, { mode: "advisory-approved" });
    for (const bad of [null, {}, { ...command(1), seq: 0 }, { ...command(1), setpoints: [] }, unapproved]) {
      expect(codeOf(gw.accept(bad as unknown as SetpointCommand, T0))).toBe("GATEWAY_COMMAND_MALFORMED");
    }
  });
});

describe("a control gateway, against the plant's own limits", () => {
  it("refuses the whole command when one setpoint is above its limit, naming the tag", () => {
    const gw = liveGateway();
    const c = command(1, {
      setpoints: [
        { tag: "FIC-102.SP", value: 1.5, unit: "kg/s" },
        { tag: "TIC-101.SP", value: 95.01, unit: "degC" },
      ],
    });
    const d = gw.accept(c, T0);
    expect(d).toMatchObject({ accepted: false, code: "GATEWAY_LIMIT_VIOLATION", tag: "TIC-101.SP" });
    expect(d.accepted ? "" : d.reason).toContain("TIC-101.SP");
    expect(gw.state().lastSeq).toBe(0);
  });

  it("accepts setpoints exactly on their limits", () => {
    const c = command(1, {
      setpoints: [
        { tag: "TIC-101.SP", value: 60, unit: "degC" },
        { tag: "FIC-102.SP", value: 3, unit: "kg/s" },
      ],
    });
    expect(liveGateway().accept(c, T0).accepted).toBe(true);
  });

  it("refuses an unknown tag, a tag set twice, and a setpoint in another unit", () => {
    const gw = liveGateway();
    const unknown = command(1, { setpoints: [{ tag: "PIC-900.SP", value: 1, unit: "bar" }] });
    expect(gw.accept(unknown, T0)).toMatchObject({ code: "GATEWAY_TAG_UNKNOWN", tag: "PIC-900.SP" });
    const twice = command(1, {
      setpoints: [
        { tag: "FIC-102.SP", value: 1, unit: "kg/s" },
        { tag: "FIC-102.SP", value: 2, unit: "kg/s" },
      ],
    });
    expect(codeOf(gw.accept(twice, T0))).toBe("GATEWAY_TAG_DUPLICATE");
    const kelvin = command(1, { setpoints: [{ tag: "TIC-101.SP", value: 350, unit: "K" }] });
    expect(codeOf(gw.accept(kelvin, T0))).toBe("GATEWAY_UNIT_MISMATCH");
  });

  it("clips a ramp faster than the plant allows, keeps a slower one, and slows a step", () => {
    const gw = liveGateway();
    const fast = gw.accept(
      command(1, { setpoints: [{ tag: "TIC-101.SP", value: 90, unit: "degC", rampPerS: 1 }] }),
      T0,
    );
    expect(fast.accepted && fast.setpoints[0]).toMatchObject({
      rampPerS: 0.1,
      requestedRampPerS: 1,
      rampClipped: true,
    });
    const slow = gw.accept(
      command(2, { setpoints: [{ tag: "TIC-101.SP", value: 90, unit: "degC", rampPerS: 0.02 }] }),
      T0,
    );
    expect(slow.accepted && slow.setpoints[0]).toMatchObject({ rampPerS: 0.02, rampClipped: false });
    const step = gw.accept(command(3, { setpoints: [{ tag: "TIC-101.SP", value: 90, unit: "degC" }] }), T0);
    expect(step.accepted && step.setpoints[0]).toMatchObject({ rampPerS: 0.1, rampClipped: true });
    const free = gw.accept(command(4, { setpoints: [{ tag: "FIC-102.SP", value: 2, unit: "kg/s" }] }), T0);
    expect(free.accepted && free.setpoints[0]?.rampPerS).toBeUndefined();
  });
});

describe("a control gateway's heartbeat watchdog", () => {
  it("starts shed and refuses commands until the first heartbeat", () => {
    const gw = createControlGateway(options());
    expect(codeOf(gw.accept(command(1), T0))).toBe("GATEWAY_SHED");
    gw.heartbeat(T0);
    expect(codeOf(gw.accept(command(1), T0 + 1))).toBe("ACCEPTED");
  });

  it("sheds when heartbeats stop for longer than watchdogS, and recovers when they resume", () => {
    const gw = liveGateway({ watchdogS: 10 });
    expect(gw.tick(T0 + 10_000)).toEqual({ shed: false, changed: true });
    expect(gw.tick(T0 + 10_001)).toEqual({ shed: true, changed: true });
    expect(gw.tick(T0 + 12_000)).toEqual({ shed: true, changed: false });
    expect(gw.state().shed).toBe(true);
    expect(
      gw.accept(command(1, { issuedAt: T0 + 11_000, expiresAt: T0 + 40_000 }), T0 + 12_000),
    ).toMatchObject({
      accepted: false,
      code: "GATEWAY_SHED",
    });
    gw.heartbeat(T0 + 13_000);
    expect(gw.tick(T0 + 13_000)).toEqual({ shed: false, changed: true });
    const d = gw.accept(command(1, { issuedAt: T0 + 12_500, expiresAt: T0 + 40_000 }), T0 + 13_100);
    expect(d.accepted).toBe(true);
  });

  it("sheds on a late command even when no tick ran in between", () => {
    const gw = liveGateway({ watchdogS: 5, maxAgeS: 600 });
    const late = command(1, { issuedAt: T0 + 20_000, expiresAt: T0 + 60_000 });
    expect(codeOf(gw.accept(late, T0 + 20_000))).toBe("GATEWAY_SHED");
  });

  it("can start following the optimizer and shed only after a silent watchdog period", () => {
    const gw = createControlGateway(options({ startShed: false, watchdogS: 5 }));
    expect(gw.tick(T0)).toEqual({ shed: false, changed: false });
    expect(gw.tick(T0 + 5_001)).toEqual({ shed: true, changed: true });
  });

  it("refuses a replay of a command accepted before a restart when given the persisted lastSeq", () => {
    const first = liveGateway();
    const c = command(4);
    first.accept(c, T0);
    const restarted = liveGateway({ lastSeq: first.state().lastSeq });
    expect(codeOf(restarted.accept(c, T0 + 1000))).toBe("GATEWAY_SEQ_REPEATED");
    expect(restarted.accept(command(6), T0 + 1000)).toMatchObject({ accepted: true, missedSeqs: 1 });
  });
});

describe("a control gateway's options", () => {
  it("refuse a short key, no keys, inverted limits and a zero watchdog at creation", () => {
    expect(() => createControlGateway(options({ keys: { k1: "short" } }))).toThrow(CommandSigningError);
    expect(() => createControlGateway(options({ keys: {} }))).toThrow(GatewayOptionsError);
    expect(() => createControlGateway(options({ limits: { "TIC-1.SP": { min: 2, max: 1 } } }))).toThrow(
      /min 2 and max 1/,
    );
    expect(() => createControlGateway(options({ watchdogS: 0 }))).toThrow(GatewayOptionsError);
  });

  it("keeps a code registry whose names match their keys' prefix", () => {
    for (const code of Object.keys(GATEWAY_CODES)) expect(code).toMatch(/^GATEWAY_[A-Z_]+$/);
  });
});

describe("the command fixture", () => {
  it("verifies with the test key k1 (bytes 0x00…0x1f) and is accepted", () => {
    const file = join(SCHEMA_DIR, "fixtures", "rto.command.v1", "valid", "closed-loop.json");
    const c = JSON.parse(readFileSync(file, "utf8")) as SetpointCommand;
    const gw = createControlGateway(options({ lastSeq: c.seq - 1 }));
    gw.heartbeat(c.issuedAt);
    expect(gw.accept(c, c.issuedAt + 1000)).toMatchObject({ accepted: true, seq: c.seq });
  });
});
