/**
 * The NATS adapter's coalesced core publishes (the outbox, see nats.ts): held until the end of the
 * event-loop turn, they must still reach the server in publish order relative to everything else the
 * connection does, and must not be lost on close(). The bus contract suite runs its site subjects
 * through JetStream, so the core path is tested here, against a real nats-server.
 */
import { jetstreamManager } from "@nats-io/jetstream";
import { connect } from "@nats-io/transport-node";
import { afterAll, describe, expect, test } from "vitest";
import { natsUrl, testSite, waitFor } from "../../test/support/brokers.js";
import type { Bus } from "./bus.js";
import { connectNats } from "./nats.js";

const text = (s: string) => new TextEncoder().encode(s);
const read = (b: Uint8Array) => new TextDecoder().decode(b);

const opened: Bus[] = [];
const streams: string[] = [];
afterAll(async () => {
  await Promise.all(opened.map((b) => b.close().catch(() => undefined)));
  const nc = await connect({ servers: await natsUrl() });
  try {
    const jsm = await jetstreamManager(nc);
    for (const s of streams) await jsm.streams.delete(s).catch(() => undefined);
  } finally {
    await nc.close();
  }
});

/** A bus whose publishes on rto.<site>.js go through a JetStream stream; everything else is core. */
async function bus(site: string): Promise<Bus> {
  const name = `rto-${site}-js`;
  streams.push(name);
  const b = await connectNats({
    servers: await natsUrl(),
    streams: [{ name, subjects: [`rto.${site}.js`] }],
  });
  opened.push(b);
  return b;
}

/** Records what arrives on rto.<site>.> through a second connection. */
async function recorder(site: string): Promise<string[]> {
  const seen: string[] = [];
  const b = await bus(`${site}-rec`);
  await b.subscribe(`rto.${site}.>`, (m) => {
    seen.push(`${m.subject.split(".").pop()}:${read(m.payload)}`);
  });
  return seen;
}

describe("NATS core publish outbox", () => {
  test("a core publish made before a JetStream publish arrives before it", async () => {
    // given a connection with one JetStream subject and a recorder of the site's subjects
    const site = testSite("outbox");
    const seen = await recorder(site);
    const a = await bus(site);
    // when core, JetStream and core publishes follow each other within one turn and the next
    await a.publish(`rto.${site}.core`, text("1"));
    await a.publish(`rto.${site}.js`, text("2"));
    await a.publish(`rto.${site}.core`, text("3"));
    // then they arrive in publish order
    expect(await waitFor(() => seen.length >= 3)).toBe(true);
    expect(seen).toEqual(["core:1", "js:2", "core:3"]);
  });

  test("a request sees the core publishes made before it", async () => {
    // given a responder that answers with how many messages it has seen on another subject (one
    // subscription for both, since separate subscriptions are not ordered among each other)
    const site = testSite("outbox");
    const responder = await bus(`${site}-resp`);
    let count = 0;
    await responder.subscribe(`rto.${site}.>`, async (m) => {
      if (m.subject.endsWith(".seen")) count++;
      else await m.respond?.(text(String(count)));
    });
    const a = await bus(site);
    // when 20 core publishes are followed, in the same turn, by a request
    for (let k = 0; k < 20; k++) void a.publish(`rto.${site}.seen`, text(String(k)));
    const reply = await a.request(`rto.${site}.ask`, text("?"), { timeoutMs: 5000 });
    // then the responder had all 20 before the request (one connection each way keeps order)
    expect(read(reply)).toBe("20");
  });

  test("close() sends the publishes still in the outbox", async () => {
    // given a recorder
    const site = testSite("outbox");
    const seen = await recorder(site);
    const a = await bus(site);
    // when 100 core publishes are followed at once by close()
    for (let k = 0; k < 100; k++) void a.publish(`rto.${site}.core`, text(String(k)));
    await a.close();
    // then all 100 arrive, in order
    expect(await waitFor(() => seen.length >= 100)).toBe(true);
    expect(seen).toEqual(Array.from({ length: 100 }, (_, k) => `core:${k}`));
  });

  test("a payload over the server's max_payload is refused to the caller, and later ones still go", async () => {
    // given a recorder and the server's default max_payload of 1 MiB
    const site = testSite("outbox");
    const seen = await recorder(site);
    const a = await bus(site);
    // when a 2 MiB core publish is made between two small ones
    await a.publish(`rto.${site}.core`, text("before"));
    await expect(a.publish(`rto.${site}.core`, new Uint8Array(2 * 1024 * 1024))).rejects.toThrow();
    await a.publish(`rto.${site}.core`, text("after"));
    // then the caller got the error and the small ones arrive in order
    expect(await waitFor(() => seen.length >= 2)).toBe(true);
    expect(seen).toEqual(["core:before", "core:after"]);
  });

  test("a durable message is acknowledged only after the core publishes its handler made", async () => {
    // given a durable subscription whose handler publishes one core event per message, and a plain
    // nats.js connection that records, in wire order, those events and the consumer's acks
    const site = testSite("outbox");
    const name = `rto-${site}-in`;
    streams.push(name);
    const a = await connectNats({
      servers: await natsUrl(),
      streams: [{ name, subjects: [`rto.${site}.in`] }],
    });
    opened.push(a);
    const order: string[] = [];
    const nc = await connect({ servers: await natsUrl() });
    try {
      nc.subscribe(`rto.${site}.out`, { callback: (_e, m) => void order.push(`out:${read(m.data)}`) });
      nc.subscribe(`$JS.ACK.${name}.>`, { callback: () => void order.push("ack") });
      await nc.flush();
      await a.subscribe(
        `rto.${site}.in`,
        async (m) => {
          await a.publish(`rto.${site}.out`, m.payload);
        },
        { durable: "worker", deliverFrom: "all" },
      );
      // when five messages go through the durable subscription
      for (let k = 0; k < 5; k++)
        await a.publish(`rto.${site}.in`, text(String(k)), { msgId: `${site}-${k}` });
      // then each handler's output is on the wire before that message's ack
      expect(await waitFor(() => order.length >= 10)).toBe(true);
      expect(order).toEqual(["out:0", "ack", "out:1", "ack", "out:2", "ack", "out:3", "ack", "out:4", "ack"]);
    } finally {
      await nc.close();
    }
  });
});
