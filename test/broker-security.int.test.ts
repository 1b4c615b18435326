/**
 * Broker security with the shipped configurations: infra/mosquitto/acl with a password file made by
 * infra/mosquitto/make-passwords.ts, and infra/nats/secure.conf. Each test starts its own broker on
 * a free port. Only validate's user may publish commands; anyone else is refused and nothing arrives.
 */
import { execFileSync } from "node:child_process";
import { mkdtempSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import mqtt from "mqtt";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { hashPasswordFile, mosquittoHash, verifyMosquittoHash } from "../infra/mosquitto/make-passwords.js";
import type { Bus } from "../services/kit/bus.js";
import { connectMqtt } from "../services/kit/mqtt.js";
import { connectNats, siteStream } from "../services/kit/nats.js";
import {
  type OwnBroker,
  startMosquittoWithConfig,
  startNatsServerWithConfig,
  testSite,
  waitFor,
} from "./support/brokers.js";

const INFRA = new URL("../infra/", import.meta.url).pathname;
const USERS = [
  "ingest",
  "steady",
  "reconcile",
  "estimate",
  "optimize",
  "validate",
  "recorder",
  "console",
  "market",
  "plant-sim",
];
const password = (u: string) => `test-${u}-password-0123456789`;
const payload = (n: number) => new TextEncoder().encode(JSON.stringify({ n }));

describe("mosquitto password hashes", () => {
  it("are byte for byte what mosquitto_passwd writes for the same salt and rounds", () => {
    let tool: string;
    try {
      tool = execFileSync("which", ["mosquitto_passwd"]).toString().trim();
    } catch {
      tool = "";
    }
    if (!tool) {
      // Without the tool: the PBKDF2-SHA512 round trip still has to hold.
      expect(verifyMosquittoHash("pw-1", mosquittoHash("pw-1"))).toBe(true);
      return;
    }
    const dir = mkdtempSync(join(tmpdir(), "sf-pw-"));
    try {
      const file = join(dir, "pw");
      execFileSync(tool, ["-c", "-b", file, "alice", "s3cret-Pa55"]);
      const line = readFileSync(file, "utf8").trim();
      const encoded = line.slice("alice:".length);
      const [, , iterations, salt] = encoded.split("$");
      // Source: mosquitto_passwd 2.0 on this machine (its $7$ PBKDF2-SHA512 output); reproduced.
      expect(
        mosquittoHash("s3cret-Pa55", {
          salt: Buffer.from(salt as string, "base64"),
          iterations: Number(iterations),
        }),
      ).toBe(encoded);
      expect(verifyMosquittoHash("s3cret-Pa55", encoded)).toBe(true);
      expect(verifyMosquittoHash("wrong", encoded)).toBe(false);
    } finally {
      rmSync(dir, { recursive: true, force: true });
    }
  });
});

describe("Mosquitto with the Steadfast ACL", () => {
  let broker: OwnBroker;
  const site = testSite("sec");
  const topic = `rto/${site}/command`;
  const open: Array<{ close(): Promise<void> }> = [];

  beforeAll(async () => {
    const plain = USERS.map((u) => `${u}:${password(u)}`).join("\n");
    broker = await startMosquittoWithConfig(
      ["allow_anonymous false", "password_file {dir}/passwords", "acl_file {dir}/acl"],
      {
        passwords: hashPasswordFile(plain, { iterations: 1000 }),
        acl: readFileSync(join(INFRA, "mosquitto/acl"), "utf8"),
      },
    );
  });
  afterAll(async () => {
    for (const c of open.splice(0)) await c.close().catch(() => undefined);
    await broker?.stop();
  });

  const raw = (username: string, pw = password(username)) =>
    new Promise<mqtt.MqttClient>((resolve, reject) => {
      const c = mqtt.connect(broker.url, {
        protocolVersion: 5,
        username,
        password: pw,
        reconnectPeriod: 0,
        connectTimeout: 5000,
      });
      c.once("connect", () => resolve(c));
      c.once("error", (err) => {
        c.end(true);
        reject(err);
      });
    });

  it("refuses a wrong password and an unknown user", async () => {
    await expect(raw("validate", "not-the-password")).rejects.toThrow();
    await expect(raw("intruder", "whatever-password-123")).rejects.toThrow();
  });

  it("answers another service's command with PUBACK 135 (not authorized) and delivers only validate's", async () => {
    // given a recorder subscribed to the command topic
    const got: number[] = [];
    const sub = await raw("recorder");
    open.push({ close: () => sub.endAsync() });
    await sub.subscribeAsync(topic, { qos: 1 });
    sub.on("message", (_t, p) => got.push((JSON.parse(p.toString()) as { n: number }).n));

    // when optimize (raw client) publishes a command at QoS 1
    const opt = await raw("optimize");
    open.push({ close: () => opt.endAsync() });
    const reasonCode = await new Promise<number | undefined>((resolve) => {
      opt.publish(topic, Buffer.from(payload(1)), { qos: 1 }, (err, packet) => {
        resolve(
          err
            ? ((err as { code?: number }).code ?? 135)
            : (packet as { reasonCode?: number } | undefined)?.reasonCode,
        );
      });
    });
    // Source: OASIS MQTT 5.0 (2019), §3.4.2.1 PUBACK reason codes: 0x87 = 135 Not authorized; published.
    expect(reasonCode).toBe(135);

    // and through the kit's adapter, as plant-sim would (not allowed either): the publish rejects
    const plant: Bus = await connectMqtt({
      url: broker.url,
      username: "plant-sim",
      password: password("plant-sim"),
    });
    open.push(plant);
    await expect(plant.publish(`rto.${site}.command`, payload(2))).rejects.toThrow();

    // when validate publishes through the kit's adapter
    const validate: Bus = await connectMqtt({
      url: broker.url,
      username: "validate",
      password: password("validate"),
    });
    open.push(validate);
    await validate.publish(`rto.${site}.command`, payload(3));

    // then exactly validate's command arrives
    expect(await waitFor(() => got.length >= 1, 5000)).toBe(true);
    await new Promise((r) => setTimeout(r, 300));
    expect(got).toEqual([3]);
  });

  it("keeps each service to its own streams: optimize may publish proposals but not snapshots", async () => {
    const opt = await raw("optimize");
    open.push({ close: () => opt.endAsync() });
    const code = (t: string) =>
      new Promise<number | undefined>((resolve) =>
        opt.publish(t, "{}", { qos: 1 }, (err, packet) =>
          resolve(
            err
              ? ((err as { code?: number }).code ?? 135)
              : ((packet as { reasonCode?: number } | undefined)?.reasonCode ?? 0),
          ),
        ),
      );
    // Source: OASIS MQTT 5.0 (2019), §3.4.2.1: 0 Success, 16 No matching subscribers, 135 Not authorized; published.
    expect([0, 16]).toContain(await code(`rto/${site}/proposal`));
    expect(await code(`rto/${site}/snapshot`)).toBe(135);
  });
});

describe("NATS with infra/nats/secure.conf", () => {
  let broker: OwnBroker;
  const site = testSite("sec");
  const env = Object.fromEntries(
    USERS.map((u) => [`NATS_PASSWORD_${u.toUpperCase().replace(/-/g, "_")}`, password(u)]),
  );
  const open: Bus[] = [];

  beforeAll(async () => {
    broker = await startNatsServerWithConfig(join(INFRA, "nats/secure.conf"), env);
  });
  afterAll(async () => {
    for (const b of open.splice(0)) await b.close().catch(() => undefined);
    await broker?.stop();
  });

  const bus = async (user: string, pw = password(user)) => {
    const errors: Error[] = [];
    const b = await connectNats({
      servers: broker.url,
      user,
      pass: pw,
      streams: [siteStream(site)],
      onError: (e) => errors.push(e),
    });
    open.push(b);
    return { b, errors };
  };

  it("refuses a wrong password", async () => {
    await expect(
      connectNats({ servers: broker.url, user: "validate", pass: "nope-nope-nope" }),
    ).rejects.toMatchObject({
      code: "KIT_BUS_CONNECT",
    });
  });

  it("refuses another service's command with a permissions violation and delivers only validate's", async () => {
    // given a recorder listening on the site's commands
    const got: number[] = [];
    const { b: rec } = await bus("recorder");
    await rec.subscribe(`rto.${site}.command`, (m) => {
      got.push((JSON.parse(Buffer.from(m.payload).toString()) as { n: number }).n);
    });
    // when optimize publishes a command (through JetStream, as the kit does)
    const { b: opt, errors } = await bus("optimize");
    const refused = await opt.publish(`rto.${site}.command`, payload(1), { msgId: "m1" }).then(
      () => undefined,
      (e: Error) => e,
    );
    // then the publish fails, or the server reports the violation on the connection
    await waitFor(() => refused !== undefined || errors.length > 0, 3000);
    const said = `${refused?.message ?? ""} ${errors.map((e) => e.message).join(" ")}`;
    expect(said).toMatch(/permissions? violation/i);

    // when validate publishes one
    const { b: val } = await bus("validate");
    await val.publish(`rto.${site}.command`, payload(2), { msgId: "m2" });
    // then only validate's arrives
    expect(await waitFor(() => got.length >= 1, 5000)).toBe(true);
    await new Promise((r) => setTimeout(r, 300));
    expect(got).toEqual([2]);
  });

  it("lets validate keep its retained mode state but not another service's", async () => {
    const { b: val } = await bus("validate");
    await val.publish(`rto.${site}.state.mode`, payload(7), { retain: true });
    expect(
      JSON.parse(Buffer.from((await val.readState(`rto.${site}.state.mode`)) ?? new Uint8Array()).toString()),
    ).toEqual({ n: 7 });
    const { b: opt } = await bus("optimize");
    await expect(opt.publish(`rto.${site}.state.mode`, payload(8), { retain: true })).rejects.toThrow(
      /permission/i,
    );
  });
});
