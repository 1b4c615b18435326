import { describe, expect, test } from "vitest";
import { numberFlag, parseAssignments, parseBusUrl, parseCommandArgs } from "./args.js";
import { CliError } from "./errors.js";

const codeOf = (fn: () => unknown): string | undefined => {
  try {
    fn();
  } catch (err) {
    return err instanceof CliError ? err.code : `not a CliError: ${String(err)}`;
  }
  return undefined;
};

describe("symbol=value assignments", () => {
  test("reads repeated --price flags into one record of numbers", () => {
    // given two assignments, one with spaces and an exponent
    const items = ["pP=3.6", " pB = 1.3e0 "];
    // when they are parsed
    const out = parseAssignments(items, "price");
    // then each symbol has its number
    expect(out).toEqual({ pP: 3.6, pB: 1.3 });
  });

  test.each([
    ["pP", "no equals sign"],
    ["=3", "no symbol"],
    ["3p=1", "a symbol that starts with a digit"],
    ["pP=abc", "a value that is not a number"],
    ["pP=Infinity", "a value that is not finite"],
    ["pP=", "an empty value"],
  ])("refuses '%s' (%s) as a usage error", (item) => {
    expect(codeOf(() => parseAssignments([item], "price"))).toBe("CLI_USAGE");
  });

  test("refuses a symbol given twice rather than keeping the last", () => {
    expect(codeOf(() => parseAssignments(["pP=3", "pP=4"], "price"))).toBe("CLI_USAGE");
  });
});

describe("broker URLs", () => {
  test("mqtt:// means MQTT and nats:// means NATS", () => {
    expect(parseBusUrl("mqtt://127.0.0.1:1883")).toEqual({ transport: "mqtt", url: "mqtt://127.0.0.1:1883" });
    expect(parseBusUrl("nats://edge-1:4222").transport).toBe("nats");
    expect(parseBusUrl("tls://edge-1:4222").transport).toBe("nats");
  });

  test("an unknown scheme or a host-less text is a usage error that names the flag", () => {
    for (const bad of ["http://x:80", "localhost:1883", "mqtt://"]) {
      expect(codeOf(() => parseBusUrl(bad))).toBe("CLI_USAGE");
    }
  });
});

describe("numbers and flags", () => {
  test("numberFlag keeps a number inside its limits and refuses one outside", () => {
    expect(numberFlag("90", "time-scale", { exclusiveMin: 0 })).toBe(90);
    expect(numberFlag(undefined, "time-scale")).toBeUndefined();
    expect(codeOf(() => numberFlag("0", "time-scale", { exclusiveMin: 0 }))).toBe("CLI_USAGE");
    expect(codeOf(() => numberFlag("1.5", "port", { integer: true }))).toBe("CLI_USAGE");
    expect(codeOf(() => numberFlag("70000", "port", { max: 65535 }))).toBe("CLI_USAGE");
    expect(codeOf(() => numberFlag("", "days"))).toBe("CLI_USAGE");
  });

  test("an unknown flag is refused with the usage line in the message", () => {
    let message = "";
    try {
      parseCommandArgs(["--sight", "x.yaml"], { site: { type: "string" } }, "steadfast check <site.yaml>");
    } catch (err) {
      message = (err as Error).message;
      expect((err as CliError).code).toBe("CLI_USAGE");
    }
    expect(message).toContain("usage: steadfast check <site.yaml>");
  });

  test("positionals and repeatable flags come back as given", () => {
    const p = parseCommandArgs(
      ["file.csv", "--price", "a=1", "--price", "b=2", "--json"],
      { price: { type: "string", multiple: true }, json: { type: "boolean" } },
      "u",
    );
    expect(p.positionals).toEqual(["file.csv"]);
    expect(p.values.price).toEqual(["a=1", "b=2"]);
    expect(p.values.json).toBe(true);
  });
});
