import { describe, expect, it } from "vitest";
import { newId } from "./ids.js";

describe("newId", () => {
  it("makes 26-character ids that sort by time and do not repeat", () => {
    const ids = Array.from({ length: 5000 }, (_, i) => newId(1_796_000_000_000 + Math.floor(i / 10)));
    expect(new Set(ids).size).toBe(ids.length);
    expect(ids.every((id) => /^[0-9A-HJKMNP-TV-Z]{26}$/.test(id))).toBe(true);
    const sorted = [...ids].sort();
    expect(sorted.map((id) => id.slice(0, 10))).toEqual(ids.map((id) => id.slice(0, 10)));
  });
});
