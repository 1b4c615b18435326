import { describe, expect, it } from "vitest";
import {
  CommandSigningError,
  canonicalJson,
  commandSigningInput,
  decodeMac,
  decodeSecret,
  hmacSha256,
  signCommand,
  type UnsignedCommand,
  verifyCommandSignature,
} from "./command-signing.js";

const KEY = { id: "k1", secret: "base64:AAECAwQFBgcICQoLDA0ODxAREhMUFRYXGBkaGxwdHh8=" };
const OTHER = { id: "k2", secret: "hex:a0a1a2a3a4a5a6a7a8a9aaabacadaeafb0b1b2b3b4b5b6b7b8b9babbbcbdbebf" };

function draft(): UnsignedCommand {
  return {
    target: { site: "kestrel", unit: "R-1" },
    seq: 7,
    issuedAt: 1_767_225_600_000,
    expiresAt: 1_767_225_630_000,
    mode: "closed-loop",
    proposalId: "P-1",
    cycleId: "C-1",
    setpoints: [{ tag: "TIC-101.SP", value: 85.5, unit: "degC", rampPerS: 0.05 }],
  };
}

function bits(hex: string): number {
  const view = new DataView(new ArrayBuffer(8));
  view.setBigUint64(0, BigInt(`0x${hex}`));
  return view.getFloat64(0);
}

describe("the HMAC-SHA256 primitive", () => {
  it("gives the published tag for key 'Jefe'", () => {
    // Source: Nystrom (2005), RFC 4231 Identifiers and Test Vectors for HMAC-SHA-224, -256, -384 and -512, §4.3 test case 2; published
    const expected = "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843";
    expect(hmacSha256("Jefe", "what do ya want for nothing?").toString("hex")).toBe(expected);
  });
});

describe("canonical JSON", () => {
  it("writes numbers as RFC 8785 Appendix B does", () => {
    // Source: Rundgren, Jordan & Erdtman (2020), RFC 8785 JSON Canonicalization Scheme, Appendix B (IEEE 754 bits → JSON); published
    const samples: Array<[string, string]> = [
      ["0000000000000000", "0"],
      ["8000000000000000", "0"],
      ["0000000000000001", "5e-324"],
      ["8000000000000001", "-5e-324"],
      ["7fefffffffffffff", "1.7976931348623157e+308"],
      ["ffefffffffffffff", "-1.7976931348623157e+308"],
      ["4340000000000000", "9007199254740992"],
      ["c340000000000000", "-9007199254740992"],
      ["4430000000000000", "295147905179352830000"],
      ["44b52d02c7e14af5", "9.999999999999997e+22"],
      ["44b52d02c7e14af6", "1e+23"],
      ["44b52d02c7e14af7", "1.0000000000000001e+23"],
      ["444b1ae4d6e2ef4e", "999999999999999700000"],
      ["444b1ae4d6e2ef4f", "999999999999999900000"],
      ["444b1ae4d6e2ef50", "1e+21"],
      ["3eb0c6f7a0b5ed8c", "9.999999999999997e-7"],
      ["3eb0c6f7a0b5ed8d", "0.000001"],
      ["41b3de4355555553", "333333333.3333332"],
      ["41b3de4355555554", "333333333.33333325"],
      ["41b3de4355555555", "333333333.3333333"],
      ["41b3de4355555556", "333333333.3333334"],
      ["41b3de4355555557", "333333333.33333343"],
      ["becbf647612f3696", "-0.0000033333333333333333"],
      ["43143ff3c1cb0959", "1424953923781206.2"],
    ];
    for (const [hex, text] of samples) expect(canonicalJson(bits(hex)), hex).toBe(text);
  });

  it("writes 1e21, 0.1 and -0 as ECMAScript does", () => {
    // Source: RFC 8785 (2020) §3.2.2.3 (numbers follow ECMAScript Number.prototype.toString); published
    expect(canonicalJson([1e21, 1e20, 0.1, -0])).toBe("[1e+21,100000000000000000000,0.1,0]");
  });

  it("reproduces the RFC 8785 §3.2.2 example byte for byte", () => {
    // Source: RFC 8785 (2020) §3.2.2, the sample input and its canonical output; published
    const input = JSON.parse(
      '{"numbers": [333333333.33333329, 1E30, 4.50, 2e-3, 0.000000000000000000000000001],' +
        '"string": "\\u20ac$\\u000F\\u000aA\'\\u0042\\u0022\\u005c\\\\\\"\\/", "literals": [null, true, false]}',
    );
    const expected =
      '{"literals":[null,true,false],"numbers":[333333333.3333333,1e+30,4.5,0.002,1e-27],' +
      '"string":"€$\\u000f\\nA\'B\\"\\\\\\\\\\"/"}';
    expect(canonicalJson(input)).toBe(expected);
  });

  it("orders members by UTF-16 code units, so the emoji comes before U+FB33", () => {
    // Source: RFC 8785 (2020) §3.2.3, the sorting example and its expected order; published
    const input = JSON.parse(
      '{"\\u20ac":"Euro Sign","\\r":"Carriage Return","\\ufb33":"Hebrew Letter Dalet With Dagesh","1":"One",' +
        '"\\ud83d\\ude00":"Emoji: Grinning Face","\\u0080":"Control","\\u00f6":"Latin Small Letter O With Diaeresis"}',
    );
    // Read the order from the text: JSON.parse would move the integer-like key "1" first.
    const text = canonicalJson(input);
    const names = [...text.matchAll(/"((?:[^"\\]|\\.)*)":"[^"]*"/g)].map((m) => JSON.parse(`"${m[1]}"`));
    expect(names).toEqual(["\r", "1", "\u0080", "ö", "€", "😀", "\ufb33"]);
  });

  it("refuses what JCS cannot represent: NaN, Infinity, lone surrogates, class instances", () => {
    for (const bad of [
      Number.NaN,
      { a: Number.POSITIVE_INFINITY },
      "x\ud800",
      { "\udc00": 1 },
      new Date(0),
      1n,
    ]) {
      expect(() => canonicalJson(bad)).toThrow(CommandSigningError);
    }
  });
});

describe("signing a command", () => {
  it("fills keyId and a base64 HMAC over the canonical JSON of the command without its signature", () => {
    const signed = signCommand(draft(), KEY);
    expect(signed.keyId).toBe("k1");
    expect(signed.signature.alg).toBe("HMAC-SHA256");
    const expected = hmacSha256(decodeSecret(KEY.secret), commandSigningInput(signed)).toString("base64");
    expect(signed.signature.value).toBe(expected);
    expect(commandSigningInput(signed)).not.toContain("signature");
  });

  it("signs exactly the sorted, space-free text of the command, with keyId and without signature", () => {
    const signed = signCommand(draft(), KEY);
    // Written by hand from the RFC 8785 rules (members sorted by code unit at every level), not copied from output.
    const expected =
      '{"cycleId":"C-1","expiresAt":1767225630000,"issuedAt":1767225600000,"keyId":"k1","mode":"closed-loop",' +
      '"proposalId":"P-1","seq":7,"setpoints":[{"rampPerS":0.05,"tag":"TIC-101.SP","unit":"degC","value":85.5}],' +
      '"target":{"site":"kestrel","unit":"R-1"}}';
    expect(commandSigningInput(signed)).toBe(expected);
  });

  it("verifies however the members were ordered on the wire", () => {
    const signed = signCommand(draft(), KEY);
    const reordered = JSON.parse(JSON.stringify(Object.fromEntries(Object.entries(signed).reverse())));
    expect(verifyCommandSignature(reordered, { k1: KEY.secret })).toEqual({ ok: true, keyId: "k1" });
  });

  it("accepts the MAC written as hex as well as base64", () => {
    const signed = signCommand(draft(), KEY);
    const mac = decodeMac(signed.signature.value);
    const hex = { ...signed, signature: { alg: "HMAC-SHA256" as const, value: mac?.toString("hex") ?? "" } };
    expect(verifyCommandSignature(hex, { k1: KEY.secret }).ok).toBe(true);
  });

  it("rejects a command whose value changed by one digit after signing", () => {
    const signed = signCommand(draft(), KEY);
    const altered = structuredClone(signed);
    altered.setpoints[0].value = 85.6;
    const check = verifyCommandSignature(altered, { k1: KEY.secret });
    expect(check).toMatchObject({ ok: false, fault: "signature-mismatch" });
  });

  it("rejects a command signed with another key that claims this key's id", () => {
    const forged = { ...signCommand({ ...draft(), keyId: undefined }, OTHER), keyId: "k1" };
    expect(verifyCommandSignature(forged, { k1: KEY.secret })).toMatchObject({
      ok: false,
      fault: "signature-mismatch",
    });
  });

  it("does not take Object.prototype members for keys", () => {
    const signed = { ...signCommand(draft(), KEY), keyId: "constructor" };
    expect(verifyCommandSignature(signed, { k1: KEY.secret })).toMatchObject({
      ok: false,
      fault: "key-unknown",
    });
  });

  it("refuses keys shorter than 32 bytes and a keyId that names another key", () => {
    expect(() => signCommand(draft(), { id: "k1", secret: "short" })).toThrow(/at least 32/);
    expect(() => signCommand({ ...draft(), keyId: "k9" }, KEY)).toThrow(CommandSigningError);
  });

  it("reads base64: and hex: secrets to the same 32 bytes", () => {
    expect(Buffer.from(decodeSecret(KEY.secret)).toString("hex")).toBe(
      "000102030405060708090a0b0c0d0e0f101112131415161718191a1b1c1d1e1f",
    );
    expect(decodeSecret(OTHER.secret).byteLength).toBe(32);
    expect(() => decodeSecret("hex:abc")).toThrow(CommandSigningError);
  });
});
