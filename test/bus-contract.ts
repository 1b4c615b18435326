/**
 * One contract for every Bus transport, run against real brokers. Each capability a transport
 * declares is tested where it exists; every message is counted (brokers may drop silently).
 */
import { afterAll, describe, expect, it } from "vitest";
import type { Bus } from "../services/kit/bus.js";
import { ManualClock } from "../services/kit/clock.js";
import { createEvent, type Emitter, encodeEvent } from "../services/kit/envelope.js";
import { Events } from "../services/kit/events.js";
import type { DeadLetter } from "../services/kit/generated/messages.js";
import { silentLogger } from "../services/kit/log.js";
import { schemaRegistry } from "../services/kit/schemas.js";
import { subject } from "../services/kit/subjects.js";
import { testSite, waitFor } from "./support/brokers.js";

/** How the contract reaches one transport. */
export interface TransportFixture {
  /** Connects a client for `site`; `clientId` gives MQTT a persistent session. */
  connect(site: string, options?: { clientId?: string }): Promise<Bus>;
  /** A broker the suite owns and may restart (for transports that keep messages across restarts). */
  ownBroker?(): Promise<{
    connect(site: string, options?: { clientId?: string }): Promise<Bus>;
    restart(): Promise<void>;
    stop(): Promise<void>;
  }>;
  /** Removes what a test left on the broker for `site` (JetStream streams, retained messages). */
  cleanup?(site: string): Promise<void>;
  teardown?(): Promise<void>;
}

const text = (p: Uint8Array) => Buffer.from(p).toString("utf8");
const bytes = (s: string) => Buffer.from(s, "utf8");

function emitterFor(site: string, service = "probe"): Emitter {
  return {
    site,
    service,
    instance: "0",
    clock: new ManualClock(Date.parse("2026-12-02T00:00:00Z")),
    registry: schemaRegistry(),
  };
}

function reading(emitter: Emitter, i: number) {
  return createEvent(emitter, "rto.measurements.v1", {
    source: "contract",
    values: [{ tag: "TI-101", value: 80 + i, quality: "good", time: 1_796_000_000_000 + i }],
  });
}

/** Runs the Bus contract against one transport. */
export function busContract(name: string, fixture: TransportFixture): void {
  describe(`Bus contract on ${name}`, () => {
    const buses: Bus[] = [];
    const sites: string[] = [];
    const open = async (site: string, options?: { clientId?: string }) => {
      const b = await fixture.connect(site, options);
      buses.push(b);
      return b;
    };
    const newSite = () => {
      const s = testSite(name.slice(0, 4).toLowerCase());
      sites.push(s);
      return s;
    };

    afterAll(async () => {
      await Promise.all(buses.map((b) => b.close().catch(() => undefined)));
      for (const s of sites) await fixture.cleanup?.(s).catch(() => undefined);
      await fixture.teardown?.();
    });

    it("delivers a published message to a subscriber, with its subject and bytes intact", async () => {
      const site = newSite();
      const bus = await open(site);
      const got: Array<{ subject: string; body: string }> = [];
      await bus.subscribe(subject(site, "measurements"), (m) => {
        got.push({ subject: m.subject, body: text(m.payload) });
      });
      await bus.publish(subject(site, "measurements"), bytes('{"x":1}'));
      expect(await waitFor(() => got.length === 1)).toBe(true);
      expect(got[0]).toEqual({ subject: `rto.${site}.measurements`, body: '{"x":1}' });
    });

    it("keeps the order of messages on one subject and loses none of 500", async () => {
      const site = newSite();
      const sub = await open(site);
      const pub = await open(site);
      const got: number[] = [];
      await sub.subscribe(subject(site, "raw.seq"), (m) => {
        got.push(Number(text(m.payload)));
      });
      await Promise.all(
        Array.from({ length: 500 }, (_, i) => pub.publish(subject(site, "raw.seq"), bytes(String(i)))),
      );
      expect(await waitFor(() => got.length >= 500, 10_000)).toBe(true);
      expect(got).toEqual(Array.from({ length: 500 }, (_, i) => i));
    });

    it("shares a group's load: each message reaches exactly one member", async (ctx) => {
      const site = newSite();
      const a = await open(site);
      if (!a.capabilities.groups) {
        // The transport refuses a group rather than losing messages.
        await expect(
          a.subscribe(subject(site, "snapshot"), () => undefined, { group: "g" }),
        ).rejects.toMatchObject({
          code: "KIT_BUS_CAPABILITY",
        });
        ctx.skip();
        return;
      }
      const b = await open(site);
      const pub = await open(site);
      const gotA: number[] = [];
      const gotB: number[] = [];
      await a.subscribe(subject(site, "snapshot"), (m) => void gotA.push(Number(text(m.payload))), {
        group: "workers",
      });
      await b.subscribe(subject(site, "snapshot"), (m) => void gotB.push(Number(text(m.payload))), {
        group: "workers",
      });
      for (let i = 0; i < 200; i++) await pub.publish(subject(site, "snapshot"), bytes(String(i)));
      expect(await waitFor(() => gotA.length + gotB.length >= 200, 10_000)).toBe(true);
      await new Promise((r) => setTimeout(r, 200));
      const all = [...gotA, ...gotB].sort((x, y) => x - y);
      expect(all).toEqual(Array.from({ length: 200 }, (_, i) => i));
      expect(gotA.length).toBeGreaterThan(0);
      expect(gotB.length).toBeGreaterThan(0);
    });

    it("keeps what was published while a durable subscriber was away", async () => {
      const site = newSite();
      const clientId = `${site}-durable`;
      const first = await fixture.connect(site, { clientId });
      const before: number[] = [];
      await first.subscribe(subject(site, "proposal"), (m) => void before.push(Number(text(m.payload))), {
        durable: "proposal-reader",
      });
      await first.close();
      const pub = await open(site);
      for (let i = 0; i < 50; i++)
        await pub.publish(subject(site, "proposal"), bytes(String(i)), { msgId: `m${i}` });
      const again = await open(site, { clientId });
      const after: number[] = [];
      await again.subscribe(subject(site, "proposal"), (m) => void after.push(Number(text(m.payload))), {
        durable: "proposal-reader",
      });
      expect(await waitFor(() => after.length >= 50, 10_000)).toBe(true);
      expect(before).toEqual([]);
      expect(after).toEqual(Array.from({ length: 50 }, (_, i) => i));
    });

    it("loses nothing on a durable stream when its broker restarts", async (ctx) => {
      const probe = await open(newSite());
      if (!probe.capabilities.survivesBrokerRestart || !fixture.ownBroker) {
        ctx.skip();
        return;
      }
      const broker = await fixture.ownBroker();
      const site = newSite();
      const clientId = `${site}-restart`;
      try {
        const sub = await broker.connect(site, { clientId });
        const pub = await broker.connect(site);
        const got = new Set<number>();
        await sub.subscribe(subject(site, "reconciled"), (m) => void got.add(Number(text(m.payload))), {
          durable: "reconciled-reader",
        });
        for (let i = 0; i < 100; i++)
          await pub.publish(subject(site, "reconciled"), bytes(String(i)), { msgId: `a${i}` });
        await broker.restart();
        // Publishing resumes once the client has reconnected on its own.
        for (let i = 100; i < 200; i++) {
          for (let tries = 0; ; tries++) {
            try {
              await pub.publish(subject(site, "reconciled"), bytes(String(i)), { msgId: `a${i}` });
              break;
            } catch (err) {
              if (tries > 100) throw err;
              await new Promise((r) => setTimeout(r, 100));
            }
          }
        }
        expect(await waitFor(() => got.size >= 200, 20_000)).toBe(true);
        expect([...got].sort((x, y) => x - y)).toEqual(Array.from({ length: 200 }, (_, i) => i));
        await Promise.all([sub.close(), pub.close()]);
      } finally {
        await broker.stop();
      }
    });

    it("answers a request with one reply", async (ctx) => {
      const site = newSite();
      const bus = await open(site);
      if (!bus.capabilities.requestReply) {
        await expect(bus.request(`req.${site}.ping`, bytes("?"))).rejects.toMatchObject({
          code: "KIT_BUS_CAPABILITY",
        });
        ctx.skip();
        return;
      }
      await bus.subscribe(`req.${site}.ping`, async (m) => {
        await m.respond?.(bytes(`pong:${text(m.payload)}`));
      });
      const client = await open(site);
      const reply = await client.request(`req.${site}.ping`, bytes("42"), { timeoutMs: 3000 });
      expect(text(reply)).toBe("pong:42");
    });

    it("keeps a subject's state for a late reader", async () => {
      const site = newSite();
      const bus = await open(site);
      await bus.publish(subject(site, "state.mode"), bytes('{"mode":"advisory"}'), { retain: true });
      const reader = await open(site);
      const state = await reader.readState(subject(site, "state.mode"), { timeoutMs: 2000 });
      expect(state && text(state)).toBe('{"mode":"advisory"}');
      await bus.publish(subject(site, "state.mode"), new Uint8Array(0), { retain: true });
    });

    it("dead-letters malformed, invalid, oversized and unexpected messages with the reason, and goes on", async () => {
      const site = newSite();
      const bus = await open(site);
      const emitter = emitterFor(site, "steady");
      const events = new Events({ bus, emitter, log: silentLogger() }, { maxBytes: 4096 });
      const handled: string[] = [];
      await events.on(subject(site, "measurements"), ["rto.measurements.v1"], (e) => void handled.push(e.id));
      const dead: DeadLetter[] = [];
      const watcher = await open(site);
      await watcher.subscribe(
        subject(site, "deadletter"),
        (m) => void dead.push(JSON.parse(text(m.payload)).data),
      );
      const to = subject(site, "measurements");
      const good = reading(emitter, 1);
      const invalid = {
        ...reading(emitter, 2),
        data: { source: "x", values: [{ tag: "TI-101", value: "hot", quality: "good", time: 1 }] },
      };
      const other = createEvent(emitter, "rto.heartbeat.v1", {
        service: "x",
        instance: "0",
        status: "running",
        intervalS: 5,
      });
      await bus.publish(to, bytes("{not json"));
      await bus.publish(to, bytes(JSON.stringify(invalid)));
      await bus.publish(to, bytes(`{"pad":"${"x".repeat(5000)}"}`));
      await bus.publish(to, encodeEvent(other));
      await bus.publish(to, encodeEvent(good));
      expect(await waitFor(() => dead.length >= 4 && handled.length >= 1, 10_000)).toBe(true);
      expect(dead.map((d) => d.reason)).toEqual([
        "parse-error",
        "schema-invalid",
        "too-large",
        "unknown-type",
      ]);
      expect(dead[1]?.errors?.[0]?.path).toBe("/data/values/0/value");
      expect(dead[0]?.payloadHead).toBe("{not json");
      expect(dead.every((d) => d.subject === to && d.service === "steady")).toBe(true);
      expect(handled).toEqual([good.id]);
    });

    it("handles a redelivered duplicate once", async () => {
      const site = newSite();
      const bus = await open(site);
      const emitter = emitterFor(site);
      const events = new Events({ bus, emitter, log: silentLogger() });
      const handled: string[] = [];
      await events.on(subject(site, "measurements"), ["rto.measurements.v1"], (e) => void handled.push(e.id));
      const e1 = reading(emitter, 1);
      const e2 = reading(emitter, 2);
      // Same event id twice, as a broker redelivery after a lost ack would present it.
      for (const e of [e1, e1, e2, e1]) await bus.publish(subject(site, "measurements"), encodeEvent(e));
      expect(await waitFor(() => handled.length >= 2, 5000)).toBe(true);
      await new Promise((r) => setTimeout(r, 300));
      expect(handled).toEqual([e1.id, e2.id]);
    });

    it("dead-letters a message whose handler keeps failing, after the bounded attempts", async () => {
      const site = newSite();
      const bus = await open(site);
      const emitter = emitterFor(site, "estimate");
      const events = new Events({ bus, emitter, log: silentLogger() }, { maxAttempts: 3, retryDelayMs: 5 });
      let calls = 0;
      await events.on(subject(site, "measurements"), ["rto.measurements.v1"], () => {
        calls++;
        throw Object.assign(new Error("model blew up"), { code: "TEST_FAILURE" });
      });
      const dead: DeadLetter[] = [];
      await bus.subscribe(
        subject(site, "deadletter"),
        (m) => void dead.push(JSON.parse(text(m.payload)).data),
      );
      await bus.publish(subject(site, "measurements"), encodeEvent(reading(emitter, 1)));
      expect(await waitFor(() => dead.length === 1, 5000)).toBe(true);
      expect(calls).toBe(3);
      expect(dead[0]).toMatchObject({
        reason: "handler-failed",
        attempts: 3,
        detail: "TEST_FAILURE: model blew up",
      });
    });
  });
}
