/**
 * The audit store: every event of a site in SQLite (better-sqlite3), one row per event id.
 *
 * WAL journal (readers never block the writer), synchronous NORMAL (a power cut can lose the last
 * commits, never corrupt the file: the SQLite docs' advice for WAL), prepared statements, and rows
 * queued and inserted in batches, one transaction per batch. `INSERT OR IGNORE` on the event id
 * makes a redelivered or replayed event a no-op. Retention prunes by age and by row count.
 *
 * Queries: by cycle, by time (optionally by type), by tag (JSON extraction over measurement values
 * and snapshot tags), and the latest event of a type at or before a time (e.g. the prices in force).
 */
import Database from "better-sqlite3";

/** An event as stored. */
export interface RecordedEvent {
  id: string;
  type: string;
  subject: string;
  cycleid: string | null;
  causationid: string | null;
  /** The envelope's time (RFC 3339). */
  time: string;
  /** The envelope's time, epoch ms. */
  timeMs: number;
  site: string;
  source: string;
  data: unknown;
}

/** What the store takes: a CloudEvents envelope as it came off the bus. */
export interface EnvelopeLike {
  id: string;
  type: string;
  time: string;
  site: string;
  source: string;
  cycleid?: string;
  causationid?: string;
  data: unknown;
}

/** One value of a tag found in the store. */
export interface TagPoint {
  eventId: string;
  type: string;
  /** Sample time (measurements) or window end (snapshots), epoch ms. */
  timeMs: number;
  /** Value (measurements) or window mean (snapshots), in `unit`; null for a missing value. */
  value: number | null;
  unit: string | null;
  /** Snapshots only: the window's standard deviation. */
  std?: number | null;
  /** Measurements only: ingest's status of the value. */
  status?: string | null;
}

/** Options of the store. */
export interface StoreOptions {
  /** SQLite file, or ":memory:". */
  path: string;
  /** Rows per insert transaction; a full queue is written at once. Default 500. */
  batchSize?: number;
  /** Oldest event kept, days; 0 keeps every age. Default 90. */
  retentionDays?: number;
  /** Most events kept; 0 keeps any number. Default 5 000 000. */
  maxRows?: number;
}

type Row = {
  id: string;
  type: string;
  subject: string;
  cycleid: string | null;
  causationid: string | null;
  time: string;
  time_ms: number;
  site: string;
  source: string;
  data: string;
};

const toEvent = (r: Row): RecordedEvent => ({
  id: r.id,
  type: r.type,
  subject: r.subject,
  cycleid: r.cycleid,
  causationid: r.causationid,
  time: r.time,
  timeMs: r.time_ms,
  site: r.site,
  source: r.source,
  data: JSON.parse(r.data),
});

/** The SQLite audit store. Not thread-safe; one writer per file. */
export class EventStore {
  private readonly db: Database.Database;
  private readonly queue: Row[] = [];
  private readonly batchSize: number;
  private readonly retentionDays: number;
  private readonly maxRows: number;
  private readonly insertMany: (rows: Row[]) => number;
  private readonly stmts: Record<
    | "byCycle"
    | "byTime"
    | "byTimeType"
    | "latest"
    | "count"
    | "pruneAge"
    | "pruneCount"
    | "measurementTag"
    | "snapshotTag"
    | "get",
    Database.Statement
  >;

  constructor(options: StoreOptions) {
    this.batchSize = options.batchSize ?? 500;
    this.retentionDays = options.retentionDays ?? 90;
    this.maxRows = options.maxRows ?? 5_000_000;
    this.db = new Database(options.path);
    this.db.pragma("journal_mode = WAL");
    this.db.pragma("synchronous = NORMAL");
    this.db.exec(`
      CREATE TABLE IF NOT EXISTS events (
        id TEXT PRIMARY KEY,
        type TEXT NOT NULL,
        subject TEXT NOT NULL,
        cycleid TEXT,
        causationid TEXT,
        time TEXT NOT NULL,
        time_ms INTEGER NOT NULL,
        site TEXT NOT NULL,
        source TEXT NOT NULL,
        data TEXT NOT NULL
      );
      CREATE INDEX IF NOT EXISTS events_cycle ON events (cycleid, time_ms);
      CREATE INDEX IF NOT EXISTS events_time ON events (time_ms);
      CREATE INDEX IF NOT EXISTS events_type_time ON events (type, time_ms);
    `);
    const insert = this.db.prepare(
      `INSERT OR IGNORE INTO events (id, type, subject, cycleid, causationid, time, time_ms, site, source, data)
       VALUES (@id, @type, @subject, @cycleid, @causationid, @time, @time_ms, @site, @source, @data)`,
    );
    this.insertMany = this.db.transaction((rows: Row[]) => {
      let n = 0;
      for (const r of rows) n += insert.run(r).changes;
      return n;
    });
    const cols = "id, type, subject, cycleid, causationid, time, time_ms, site, source, data";
    this.stmts = {
      get: this.db.prepare(`SELECT ${cols} FROM events WHERE id = ?`),
      byCycle: this.db.prepare(`SELECT ${cols} FROM events WHERE cycleid = ? ORDER BY time_ms, id`),
      byTime: this.db.prepare(
        `SELECT ${cols} FROM events WHERE time_ms BETWEEN ? AND ? ORDER BY time_ms, id LIMIT ?`,
      ),
      byTimeType: this.db.prepare(
        `SELECT ${cols} FROM events WHERE type = ? AND time_ms BETWEEN ? AND ? ORDER BY time_ms, id LIMIT ?`,
      ),
      latest: this.db.prepare(
        `SELECT ${cols} FROM events WHERE type = ? AND time_ms <= ? ORDER BY time_ms DESC, id DESC LIMIT ?`,
      ),
      count: this.db.prepare("SELECT count(*) AS n FROM events"),
      pruneAge: this.db.prepare("DELETE FROM events WHERE time_ms < ?"),
      pruneCount: this.db.prepare(
        "DELETE FROM events WHERE rowid IN (SELECT rowid FROM events ORDER BY time_ms, id LIMIT max(0, (SELECT count(*) FROM events) - ?))",
      ),
      measurementTag: this.db.prepare(`
        SELECT e.id AS eventId, e.type AS type,
               json_extract(v.value, '$.time') AS timeMs, json_extract(v.value, '$.value') AS value,
               json_extract(v.value, '$.unit') AS unit, json_extract(v.value, '$.status') AS status
        FROM events e, json_each(e.data, '$.values') v
        WHERE e.type = 'rto.measurements.v1' AND e.time_ms BETWEEN ? AND ?
          AND json_extract(v.value, '$.tag') = ?
        ORDER BY timeMs LIMIT ?`),
      snapshotTag: this.db.prepare(`
        SELECT e.id AS eventId, e.type AS type, json_extract(e.data, '$.endMs') AS timeMs,
               json_extract(t.value, '$.mean') AS value, json_extract(t.value, '$.unit') AS unit,
               json_extract(t.value, '$.std') AS std
        FROM events e, json_each(e.data, '$.tags') t
        WHERE e.type = 'rto.snapshot.v1' AND e.time_ms BETWEEN ? AND ?
          AND json_extract(t.value, '$.tag') = ?
        ORDER BY timeMs LIMIT ?`),
    };
  }

  /** Queues an event for the next batch; writes the batch when it is full. Returns rows written now (0 when only queued). */
  add(event: EnvelopeLike, subject: string): number {
    const timeMs = Date.parse(event.time);
    this.queue.push({
      id: event.id,
      type: event.type,
      subject,
      cycleid: event.cycleid ?? null,
      causationid: event.causationid ?? null,
      time: event.time,
      time_ms: Number.isFinite(timeMs) ? timeMs : 0,
      site: event.site,
      source: event.source,
      data: JSON.stringify(event.data),
    });
    return this.queue.length >= this.batchSize ? this.flush() : 0;
  }

  /** Writes the queued events in one transaction; returns how many were new (duplicates are ignored). */
  flush(): number {
    if (this.queue.length === 0) return 0;
    const rows = this.queue.splice(0, this.queue.length);
    return this.insertMany(rows);
  }

  /** Events queued but not yet written. */
  pending(): number {
    return this.queue.length;
  }

  /** Events stored. */
  count(): number {
    return (this.stmts.count.get() as { n: number }).n;
  }

  /** One event by id. */
  get(id: string): RecordedEvent | undefined {
    const r = this.stmts.get.get(id) as Row | undefined;
    return r ? toEvent(r) : undefined;
  }

  /** Every event of a cycle, in time order. */
  byCycle(cycleid: string): RecordedEvent[] {
    return (this.stmts.byCycle.all(cycleid) as Row[]).map(toEvent);
  }

  /** Events in [fromMs, toMs] (envelope time), optionally of one type, in time order, at most `limit` (default 10 000). */
  byTime(fromMs: number, toMs: number, options: { type?: string; limit?: number } = {}): RecordedEvent[] {
    const limit = options.limit ?? 10_000;
    const rows = options.type
      ? this.stmts.byTimeType.all(options.type, fromMs, toMs, limit)
      : this.stmts.byTime.all(fromMs, toMs, limit);
    return (rows as Row[]).map(toEvent);
  }

  /** The latest event of `type` with envelope time at or before `atMs` (e.g. the prices in force then). */
  latest(type: string, atMs: number): RecordedEvent | undefined {
    return this.recent(type, atMs, 1)[0];
  }

  /** The `limit` latest events of `type` with envelope time at or before `atMs`, newest first. */
  recent(type: string, atMs: number, limit: number): RecordedEvent[] {
    return (this.stmts.latest.all(type, atMs, limit) as Row[]).map(toEvent);
  }

  /** Values of one tag in measurement batches and snapshots whose envelope time lies in [fromMs, toMs]. */
  byTag(
    tag: string,
    fromMs: number,
    toMs: number,
    limit = 10_000,
  ): { measurements: TagPoint[]; snapshots: TagPoint[] } {
    return {
      measurements: this.stmts.measurementTag.all(fromMs, toMs, tag, limit) as TagPoint[],
      snapshots: this.stmts.snapshotTag.all(fromMs, toMs, tag, limit) as TagPoint[],
    };
  }

  /** Deletes events older than the retention age and the oldest beyond the row limit. */
  prune(nowMs: number): { byAge: number; byCount: number } {
    this.flush();
    const byAge =
      this.retentionDays > 0 ? this.stmts.pruneAge.run(nowMs - this.retentionDays * 86_400_000).changes : 0;
    const byCount = this.maxRows > 0 ? this.stmts.pruneCount.run(this.maxRows).changes : 0;
    return { byAge, byCount };
  }

  /** Writes what is queued and closes the file. */
  close(): void {
    if (!this.db.open) return;
    this.flush();
    this.db.close();
  }
}
