import { Readable } from "node:stream";
import { describe, expect, test } from "vitest";
import {
  type CsvBatch,
  type CsvOptions,
  createTimeParser,
  readHistorianCsv,
  resolveWallTime,
} from "./csv.js";
import { IngestError } from "./errors.js";

async function readAll(text: string | Buffer[], options?: CsvOptions): Promise<CsvBatch[]> {
  const source = typeof text === "string" ? Readable.from([text]) : Readable.from(text);
  const out: CsvBatch[] = [];
  for await (const b of readHistorianCsv(source, options)) out.push(b);
  return out;
}

async function failure(text: string, options?: CsvOptions): Promise<IngestError> {
  try {
    await readAll(text, options);
  } catch (e) {
    if (e instanceof IngestError) return e;
    throw e;
  }
  throw new Error("expected an IngestError");
}

const iso = (ms: number) => new Date(ms).toISOString();

describe("formats", () => {
  test("a long-format file groups rows with the same time into one batch, with quality", async () => {
    // given four rows at two times with offsets, one of bad quality
    const csv = [
      "time,tag,value,quality",
      "2024-01-15T10:00:00+01:00,FI-101,12.5,good",
      "2024-01-15T10:00:00+01:00,TI-102,80.1,bad",
      "2024-01-15T10:00:01+01:00,FI-101,12.6,",
      "2024-01-15T10:00:01+01:00,TI-102,80.2,uncertain",
    ].join("\n");
    // when it is read
    const batches = await readAll(csv);
    // then there are two batches at the right instants, each naming the line it starts on
    expect(batches).toEqual([
      {
        time: Date.UTC(2024, 0, 15, 9, 0, 0),
        line: 2,
        values: [
          { tagId: "FI-101", value: 12.5, quality: "good" },
          { tagId: "TI-102", value: 80.1, quality: "bad" },
        ],
      },
      {
        time: Date.UTC(2024, 0, 15, 9, 0, 1),
        line: 4,
        values: [
          { tagId: "FI-101", value: 12.6, quality: "good" },
          { tagId: "TI-102", value: 80.2, quality: "uncertain" },
        ],
      },
    ]);
  });

  test("a wide-format file gives one batch per row and skips empty cells", async () => {
    const csv = "Timestamp,FI-101,TI-102\r\n2024-01-15T09:00:00Z,1,2\r\n2024-01-15T09:00:05Z,,3\r\n";
    const batches = await readAll(csv);
    expect(batches.map((b) => [iso(b.time), b.values])).toEqual([
      [
        "2024-01-15T09:00:00.000Z",
        [
          { tagId: "FI-101", value: 1, quality: "good" },
          { tagId: "TI-102", value: 2, quality: "good" },
        ],
      ],
      ["2024-01-15T09:00:05.000Z", [{ tagId: "TI-102", value: 3, quality: "good" }]],
    ]);
  });

  test("quoted fields, a semicolon delimiter and epoch seconds are read", async () => {
    const csv = 'time;"tag";value\n1700000000;"FI;1";"1.5"\n';
    const [b] = await readAll(csv, { delimiter: ";", epochUnit: "s" });
    expect(b).toEqual({
      time: 1_700_000_000_000,
      line: 2,
      values: [{ tagId: "FI;1", value: 1.5, quality: "good" }],
    });
  });

  test("reads a stream whose chunks split lines and multi-byte characters", async () => {
    // given a file with a non-ASCII tag id cut into 3-byte chunks
    const bytes = Buffer.from(
      "time,tag,value\n2024-01-15T09:00:00Z,TI-µ°,7\n2024-01-15T09:00:01Z,TI-µ°,8",
      "utf8",
    );
    const chunks: Buffer[] = [];
    for (let i = 0; i < bytes.length; i += 3) chunks.push(bytes.subarray(i, i + 3));
    // when it is read
    const batches = await readAll(chunks);
    // then both rows arrive whole
    expect(batches.map((b) => b.values[0])).toEqual([
      { tagId: "TI-µ°", value: 7, quality: "good" },
      { tagId: "TI-µ°", value: 8, quality: "good" },
    ]);
  });
});

describe("time zones", () => {
  test("naive times are read in the configured zone, winter and summer", async () => {
    const csv = "time,tag,value\n2024-01-15 10:00:00,A,1\n2024-07-15 10:00:00,A,2\n";
    const batches = await readAll(csv, { timeZone: "Europe/Berlin" });
    // Source: IANA tz database, Europe/Berlin: UTC+1 in winter, UTC+2 in summer (from memory).
    expect(batches.map((b) => iso(b.time))).toEqual(["2024-01-15T09:00:00.000Z", "2024-07-15T08:00:00.000Z"]);
  });

  test("a wall time in the spring-forward gap is shifted forward by the gap, or refused when told", async () => {
    // Source: IANA tz database, America/New_York: clocks go from 02:00 EST to 03:00 EDT on
    // 2024-03-10 (second Sunday of March, US rule since 2007; from memory).
    expect(resolveWallTime("America/New_York", Date.UTC(2024, 2, 10, 2, 30))).toEqual({
      kind: "gap",
      shiftedMs: Date.UTC(2024, 2, 10, 7, 30),
    });
    const [b] = await readAll("time,tag,value\n2024-03-10T02:30:00,A,1\n", { timeZone: "America/New_York" });
    expect(iso(b!.time)).toBe("2024-03-10T07:30:00.000Z");
    const e = await failure("time,tag,value\n2024-03-10T02:30:00,A,1\n", {
      timeZone: "America/New_York",
      nonexistent: "error",
    });
    expect(e.code).toBe("INGEST_CSV_TIME");
    expect(e.line).toBe(2);
  });

  test("a wall time in the fall-back overlap has two instants; infer follows the file through the repeated hour", async () => {
    // Source: IANA tz database, America/New_York: clocks go from 02:00 EDT back to 01:00 EST on
    // 2024-11-03 (first Sunday of November; from memory).
    expect(resolveWallTime("America/New_York", Date.UTC(2024, 10, 3, 1, 30))).toEqual({
      kind: "ambiguous",
      earlierMs: Date.UTC(2024, 10, 3, 5, 30),
      laterMs: Date.UTC(2024, 10, 3, 6, 30),
    });
    // given a file written in local time every 30 minutes through the night
    const walls = ["00:30", "01:00", "01:30", "01:00", "01:30", "02:00"];
    const csv = `time,tag,value\n${walls.map((w, i) => `2024-11-03 ${w}:00,A,${i}`).join("\n")}\n`;
    // when read with the default policy
    const batches = await readAll(csv, { timeZone: "America/New_York" });
    // then the instants run forward every 30 minutes
    expect(batches.map((b) => iso(b.time).slice(11, 16))).toEqual([
      "04:30",
      "05:00",
      "05:30",
      "06:00",
      "06:30",
      "07:00",
    ]);
    // and with "earlier" the repeated rows fall back in time
    const early = await readAll(csv, { timeZone: "America/New_York", ambiguous: "earlier" });
    expect(iso(early[3]!.time).slice(11, 16)).toBe("05:00");
  });

  test("a zone with a half-hour offset and a southern summer resolves", () => {
    const p = createTimeParser({ timeZone: "Australia/Adelaide" });
    // Source: IANA tz database, Australia/Adelaide: UTC+10:30 in January (summer time; from memory).
    expect(iso(p.parse("2024-01-15T12:00:00", 1))).toBe("2024-01-15T01:30:00.000Z");
  });

  test("an unknown zone is refused with INGEST_TIME_ZONE", async () => {
    expect((await failure("time,tag,value\n", { timeZone: "Mars/Olympus" })).code).toBe("INGEST_TIME_ZONE");
  });
});

describe("errors name the line", () => {
  test("an unreadable time", async () => {
    const e = await failure("time,tag,value\n2024-01-15T09:00:00Z,A,1\nyesterday,A,2\n");
    expect(e.code).toBe("INGEST_CSV_TIME");
    expect(e.line).toBe(3);
    expect(e.message).toMatch(/line 3/);
  });

  test("an impossible calendar date", async () => {
    const e = await failure("time,tag,value\n2024-02-30T09:00:00Z,A,1\n");
    expect(e.code).toBe("INGEST_CSV_TIME");
  });

  test("a value that is not a number names line and column, or is skipped when told", async () => {
    const csv = "time,A,B\n2024-01-15T09:00:00Z,1,2\n2024-01-15T09:00:01Z,3,I/O Timeout\n";
    const e = await failure(csv);
    expect(e.code).toBe("INGEST_CSV_VALUE");
    expect(e.line).toBe(3);
    expect(e.message).toMatch(/column 3 \('B'\)/);
    const batches = await readAll(csv, { badValue: "skip" });
    expect(batches[1]!.values).toEqual([{ tagId: "A", value: 3, quality: "good" }]);
  });

  test("a row with the wrong number of fields, and an unterminated quote", async () => {
    expect((await failure("time,A\n2024-01-15T09:00:00Z,1,2\n")).line).toBe(2);
    expect((await failure('time,A\n2024-01-15T09:00:00Z,"1\n')).code).toBe("INGEST_CSV_ROW");
  });

  test("a missing header, or a long header without a value column", async () => {
    expect((await failure("")).code).toBe("INGEST_CSV_HEADER");
    expect((await failure("time,tag,quality\n", { format: "long" })).code).toBe("INGEST_CSV_HEADER");
  });
});
