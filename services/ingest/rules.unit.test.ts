import { describe, expect, test } from "vitest";
import { IngestError } from "./errors.js";
import { createTagRules, type TagSpec } from "./rules.js";

const T0 = 1_700_000_000_000;
const FLOW: TagSpec = {
  id: "FI-101",
  rangeMin: 0,
  rangeMax: 100,
  maxRatePerS: 5,
  frozenAfterS: 30,
  staleAfterS: 60,
  maxClockSkewS: 10,
};

function rules(...extra: TagSpec[]) {
  return createTagRules([FLOW, ...extra]);
}

describe("data checks, one reason each", () => {
  test("a value inside the range with a modest change is good", () => {
    const r = rules();
    expect(r.check({ tagId: "FI-101", value: 50, timeMs: T0 }, T0)).toBe("good");
    expect(r.check({ tagId: "FI-101", value: 52, timeMs: T0 + 1000 }, T0 + 1000)).toBe("good");
  });

  test("a value outside its range is out-of-range, at either end", () => {
    const r = rules();
    expect(r.check({ tagId: "FI-101", value: 100.5, timeMs: T0 }, T0)).toBe("out-of-range");
    expect(r.check({ tagId: "FI-101", value: -1, timeMs: T0 + 1 }, T0 + 1)).toBe("out-of-range");
    expect(r.check({ tagId: "FI-101", value: 100, timeMs: T0 + 2 }, T0 + 2)).toBe("good");
  });

  test("a jump faster than the rate limit is a spike, and the return to normal is good", () => {
    // given a good value of 50
    const r = rules();
    r.check({ tagId: "FI-101", value: 50, timeMs: T0 }, T0);
    // when it jumps by 20 in one second (limit 5 per second), then returns to 51
    const spike = r.check({ tagId: "FI-101", value: 70, timeMs: T0 + 1000 }, T0 + 1000);
    const back = r.check({ tagId: "FI-101", value: 51, timeMs: T0 + 2000 }, T0 + 2000);
    // then the jump is a spike and the return is judged against the last good value
    expect(spike).toBe("spike");
    expect(back).toBe("good");
  });

  test("a value unchanged for longer than the frozen limit is frozen until it moves", () => {
    const r = rules();
    const statuses = [0, 10, 20, 31, 40].map((s) =>
      r.check({ tagId: "FI-101", value: 42, timeMs: T0 + s * 1000 }, T0 + s * 1000),
    );
    expect(statuses).toEqual(["good", "good", "good", "frozen", "frozen"]);
    expect(r.check({ tagId: "FI-101", value: 42.1, timeMs: T0 + 41_000 }, T0 + 41_000)).toBe("good");
  });

  test("a value whose source time lags now by more than the stale limit is stale", () => {
    const r = rules();
    expect(r.check({ tagId: "FI-101", value: 10, timeMs: T0 }, T0 + 61_000)).toBe("stale");
    expect(r.check({ tagId: "FI-101", value: 10, timeMs: T0 }, T0 + 59_000)).toBe("good");
  });

  test("a source quality other than good is bad-quality; uncertain passes only when allowed", () => {
    const r = rules();
    expect(r.check({ tagId: "FI-101", value: 10, timeMs: T0, quality: "bad" }, T0)).toBe("bad-quality");
    expect(r.check({ tagId: "FI-101", value: 10, timeMs: T0, quality: "uncertain" }, T0)).toBe("bad-quality");
    const lenient = createTagRules([FLOW], { acceptUncertain: true });
    expect(lenient.check({ tagId: "FI-101", value: 10, timeMs: T0, quality: "uncertain" }, T0)).toBe("good");
  });

  test("a null, NaN or infinite value is not-a-number", () => {
    const r = rules();
    for (const value of [null, Number.NaN, Number.POSITIVE_INFINITY]) {
      expect(r.check({ tagId: "FI-101", value, timeMs: T0 }, T0)).toBe("not-a-number");
    }
  });

  test("a tag that is not configured is unknown-tag and is counted", () => {
    const r = rules();
    expect(r.check({ tagId: "XX-9", value: 1, timeMs: T0 }, T0)).toBe("unknown-tag");
    expect(r.counts()["unknown-tag"]).toBe(1);
  });

  test("a source time ahead of now by more than the skew limit is clock-skew", () => {
    const r = rules();
    expect(r.check({ tagId: "FI-101", value: 10, timeMs: T0 + 11_000 }, T0)).toBe("clock-skew");
    expect(r.check({ tagId: "FI-101", value: 10, timeMs: T0 + 9_000 }, T0)).toBe("good");
  });

  test("limits that are not configured are not checked", () => {
    const r = createTagRules([{ id: "TI-1", rangeMin: -50, rangeMax: 500 }]);
    expect(r.check({ tagId: "TI-1", value: 20, timeMs: T0 }, T0)).toBe("good");
    expect(r.check({ tagId: "TI-1", value: 400, timeMs: T0 + 1 }, T0 + 1e9)).toBe("good");
  });
});

describe("tag health", () => {
  test("summarises the last status, the counts per reason and the last good time", () => {
    const r = rules();
    r.check({ tagId: "FI-101", value: 50, timeMs: T0 }, T0);
    r.check({ tagId: "FI-101", value: 500, timeMs: T0 + 1000 }, T0 + 1000);
    const [h] = r.health(T0 + 2000);
    expect(h).toMatchObject({
      tagId: "FI-101",
      status: "out-of-range",
      lastStatus: "out-of-range",
      lastTimeMs: T0 + 1000,
      lastGoodTimeMs: T0,
    });
    expect(h!.counts.good).toBe(1);
    expect(h!.counts["out-of-range"]).toBe(1);
  });

  test("a tag that never arrives shows as stale, and a silent tag turns stale after its limit", () => {
    // given two tags of which only one ever reports
    const r = rules({ id: "TI-7", rangeMin: 0, rangeMax: 1 });
    r.check({ tagId: "FI-101", value: 50, timeMs: T0 }, T0);
    // when health is asked within and beyond FI-101's stale limit
    const soon = r.health(T0 + 10_000);
    const late = r.health(T0 + 61_000);
    // then the silent tag is stale at once and FI-101 only once its 60 s have passed
    expect(soon.map((h) => h.status)).toEqual(["good", "stale"]);
    expect(soon[1]!.lastStatus).toBeNull();
    expect(late[0]!.status).toBe("stale");
  });
});

describe("configuration", () => {
  test("refuses an inverted range and a non-positive limit, naming the tag", () => {
    expect(() => createTagRules([{ id: "A", rangeMin: 2, rangeMax: 1 }])).toThrow(/'A'/);
    try {
      createTagRules([{ id: "B", rangeMin: 0, rangeMax: 1, frozenAfterS: 0 }]);
      expect.unreachable();
    } catch (e) {
      expect(e).toBeInstanceOf(IngestError);
      expect((e as IngestError).code).toBe("INGEST_TAG_SPEC_INVALID");
    }
  });
});
