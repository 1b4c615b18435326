import { afterAll, afterEach, describe, expect, it } from "vitest";
import { mqttUrl, stopOwnBrokers, testSite, waitFor } from "../../test/support/brokers.js";
import type { Bus } from "../kit/bus.js";
import { systemClock } from "../kit/clock.js";
import { loadConfig } from "../kit/config.js";
import { type AnyEvent, createEvent, decodeEvent, type EventOptions, encodeEvent } from "../kit/envelope.js";
import type { EventDataMap, EventType } from "../kit/generated/messages.js";
import { silentLogger } from "../kit/log.js";
import { connectMqtt } from "../kit/mqtt.js";
import { schemaRegistry } from "../kit/schemas.js";
import { subject } from "../kit/subjects.js";
import { type ConsoleConfig, consoleConfigSchema } from "./config.js";
import { type ConsoleService, start } from "./index.js";
import { awaitingApproval, cycleData, proposalData } from "./test-events.js";
import { createUserDirectory, hashPassword } from "./users.js";
import type { ConsoleState } from "./view.js";

const FAST = { N: 1024, r: 8, p: 1, keyLen: 32 };
const registry = schemaRegistry();

function users() {
  return createUserDirectory({
    users: [
      {
        username: "vera",
        role: "viewer",
        passwordHash: hashPassword("vera-pass", Buffer.alloc(16, 1), FAST),
      },
      {
        username: "otto",
        role: "operator",
        passwordHash: hashPassword("otto-pass", Buffer.alloc(16, 2), FAST),
      },
      {
        username: "erin",
        role: "engineer",
        passwordHash: hashPassword("erin-pass", Buffer.alloc(16, 3), FAST),
      },
    ],
  });
}

interface Client {
  cookie: string;
  csrf: string;
}

describe("the console service", () => {
  const cleanup: Array<() => Promise<void> | void> = [];
  afterEach(async () => {
    for (const c of cleanup.splice(0).reverse()) await c();
  });
  afterAll(stopOwnBrokers);

  async function setup() {
    const site = testSite("console");
    const url = await mqttUrl();
    const bus: Bus = await connectMqtt({ url });
    cleanup.push(() => bus.close());
    const seen: AnyEvent[] = [];
    await bus.subscribe(`${subject(site, "operator")}.>`, (m) => {
      const d = decodeEvent(registry, m.payload, 1 << 20);
      if (d.ok) seen.push(d.event);
    });
    const publish = async <T extends EventType>(
      service: string,
      stream: string,
      type: T,
      data: EventDataMap[T],
      options: EventOptions = {},
    ) => {
      const e = createEvent(
        { site, service, instance: "0", clock: systemClock, registry },
        type,
        data,
        options,
      );
      await bus.publish(subject(site, stream), encodeEvent(e));
      return e;
    };
    const config = loadConfig<ConsoleConfig>(consoleConfigSchema, {
      site,
      bus: { transport: "mqtt", url },
      http: { enabled: false },
      logLevel: "silent",
      console: { port: 0, pushIntervalMs: 50 },
    });
    const service: ConsoleService = await start(config, { log: silentLogger(), users: users() });
    cleanup.push(() => service.stop());
    const api = (path: string, init: RequestInit = {}) => fetch(`${service.url}${path}`, init);
    const state = async () => (await (await api("/api/state")).json()) as ConsoleState;
    const login = async (username: string, password: string): Promise<Client> => {
      const res = await api("/login", {
        method: "POST",
        headers: { "content-type": "application/json" },
        body: JSON.stringify({ username, password }),
      });
      expect(res.status).toBe(200);
      const body = (await res.json()) as { csrf: string; role: string };
      const cookie = (res.headers.get("set-cookie") ?? "").split(";")[0] ?? "";
      expect(res.headers.get("set-cookie")).toMatch(/HttpOnly; SameSite=Strict/);
      return { cookie, csrf: body.csrf };
    };
    const postAs = (c: Client | undefined, path: string, body: unknown, csrf = c?.csrf) =>
      api(path, {
        method: "POST",
        headers: {
          "content-type": "application/json",
          ...(c ? { cookie: c.cookie } : {}),
          ...(csrf ? { "x-csrf-token": csrf } : {}),
        },
        body: JSON.stringify(body),
      });
    return { site, service, seen, publish, state, login, postAs, api };
  }

  it("shows published events in /api/state and lets an operator approve a waiting proposal, refusing a viewer", async () => {
    const { seen, publish, state, login, postAs } = await setup();
    // given a proposal that validate says waits for approval
    const proposal = await publish("optimize", "proposal", "rto.proposal.v1", proposalData(1.8), {
      cycleid: "c1",
    });
    await publish(
      "validate",
      "validation",
      "rto.validation.v1",
      awaitingApproval(proposal.id, Date.now() + 600_000),
      { cycleid: "c1" },
    );
    await publish("steady", "cycle", "rto.cycle.v1", cycleData("opened", "steady", "steady"), {
      cycleid: "c1",
    });
    let s = await state();
    for (let i = 0; i < 100 && !(s.pending.length === 1 && s.cycles.length === 1); i++) {
      await new Promise((r) => setTimeout(r, 50));
      s = await state();
    }
    expect(s.pending[0]?.proposalId).toBe(proposal.id);
    expect(s.pending[0]?.objective?.change).toBe(0.05);
    expect(s.cycles[0]?.stages[0]?.outcome).toBe("steady");

    // a viewer may read but not approve
    const vera = await login("vera", "vera-pass");
    const refused = await postAs(vera, "/api/approval", { proposalId: proposal.id, decision: "approve" });
    expect(refused.status).toBe(403);
    expect(await refused.json()).toMatchObject({ code: "CONSOLE_FORBIDDEN" });

    // an operator without the CSRF token is refused, with it the approval goes out on the bus
    const otto = await login("otto", "otto-pass");
    expect(
      (await postAs(otto, "/api/approval", { proposalId: proposal.id, decision: "approve" }, "wrong")).status,
    ).toBe(403);
    const ok = await postAs(otto, "/api/approval", {
      proposalId: proposal.id,
      decision: "approve",
      reason: "cooling margin checked",
    });
    expect(ok.status).toBe(202);
    expect(await waitFor(() => seen.some((e) => e.type === "rto.operator-approval.v1"), 5000)).toBe(true);
    const approval = seen.find((e) => e.type === "rto.operator-approval.v1");
    expect(approval?.data).toMatchObject({
      proposalId: proposal.id,
      decision: "approve",
      user: "otto",
      reason: "cooling margin checked",
    });
    expect(approval?.source).toMatch(/\/console\//);

    // the console hears its own approval back: recorded, no longer waiting; a second answer is refused
    for (let i = 0; i < 100 && s.decisions.length === 0; i++) {
      await new Promise((r) => setTimeout(r, 50));
      s = await state();
    }
    expect(s.decisions[0]).toMatchObject({ kind: "approval", user: "otto", decision: "approve" });
    expect(s.pending).toEqual([]);
    const again = await postAs(otto, "/api/approval", { proposalId: proposal.id, decision: "approve" });
    expect(again.status).toBe(409);
    expect(seen.filter((e) => e.type === "rto.operator-approval.v1")).toHaveLength(1);
  });

  it("refuses bad logins and bad inputs with clear 4xx answers, and lets only an engineer ask for a mode", async () => {
    const { seen, login, postAs, api } = await setup();
    const wrong = await postAs(undefined, "/login", { username: "otto", password: "guess" });
    expect(wrong.status).toBe(401);
    expect(await wrong.json()).toMatchObject({ code: "CONSOLE_LOGIN_FAILED" });
    const form = await api("/login", {
      method: "POST",
      headers: { "content-type": "application/x-www-form-urlencoded" },
      body: "username=otto",
    });
    expect(form.status).toBe(415);
    expect((await postAs(undefined, "/api/approval", { proposalId: "p1", decision: "approve" })).status).toBe(
      401,
    );
    const foreign = await api("/login", {
      method: "POST",
      headers: { "content-type": "application/json", origin: "http://evil.example" },
      body: JSON.stringify({ username: "otto", password: "otto-pass" }),
    });
    expect(foreign.status).toBe(403);

    const otto = await login("otto", "otto-pass");
    const noReason = await postAs(otto, "/api/approval", { proposalId: "p1", decision: "reject" });
    expect(noReason.status).toBe(400);
    expect(((await noReason.json()) as { message: string }).message).toMatch(/'reason' is required/);
    expect((await postAs(otto, "/api/approval", { proposalId: "p1", decision: "maybe" })).status).toBe(400);
    expect(
      (await postAs(otto, "/api/approval", { proposalId: "p1", decision: "approve", extra: 1 })).status,
    ).toBe(400);
    expect((await postAs(otto, "/api/approval", { proposalId: "p1", decision: "approve" })).status).toBe(409);
    expect((await postAs(otto, "/api/mode", { mode: "off", reason: "test" })).status).toBe(403);

    const erin = await login("erin", "erin-pass");
    expect((await postAs(erin, "/api/mode", { mode: "manual", reason: "x" })).status).toBe(400);
    expect((await postAs(erin, "/api/mode", { mode: "off" })).status).toBe(400);
    const mode = await postAs(erin, "/api/mode", { mode: "off", reason: "analyser recalibration" });
    expect(mode.status).toBe(202);
    expect(await waitFor(() => seen.some((e) => e.type === "rto.operator-mode.v1"), 5000)).toBe(true);
    expect(seen.find((e) => e.type === "rto.operator-mode.v1")?.data).toMatchObject({
      mode: "off",
      user: "erin",
      reason: "analyser recalibration",
    });
    expect(seen.some((e) => e.type === "rto.operator-approval.v1")).toBe(false);
  });

  it("pushes the whole state on connect and then the sections an event changed over Server-Sent Events", async () => {
    const { publish, api } = await setup();
    const res = await api("/api/events");
    expect(res.headers.get("content-type")).toMatch(/text\/event-stream/);
    const reader = res.body?.getReader();
    if (!reader) throw new Error("no body");
    cleanup.push(() => reader.cancel());
    let text = "";
    const readUntil = async (pattern: RegExp) => {
      const until = Date.now() + 5000;
      while (!pattern.test(text) && Date.now() < until) {
        const { value, done } = await reader.read();
        if (done) break;
        text += Buffer.from(value).toString("utf8");
      }
      return pattern.test(text);
    };
    expect(await readUntil(/event: state\ndata: \{.*"site"/)).toBe(true);
    await publish("estimate", "cycle", "rto.cycle.v1", cycleData("stage-done", "estimate", "accepted"), {
      cycleid: "c5",
    });
    expect(await readUntil(/event: patch\ndata: .*"cycles":\[\{"cycleId":"c5"/)).toBe(true);
  });
});
