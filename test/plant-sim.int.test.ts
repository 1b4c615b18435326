import { readFileSync } from "node:fs";
import { afterAll, beforeAll, describe, expect, it } from "vitest";
import { parse } from "yaml";
import type { Bus } from "../services/kit/bus.js";
import { systemClock } from "../services/kit/clock.js";
import { signCommand, type UnsignedCommand } from "../services/kit/command-signing.js";
import { loadConfig } from "../services/kit/config.js";
import { createEvent, type Emitter, encodeEvent } from "../services/kit/envelope.js";
import type { Measurements, Readback } from "../services/kit/generated/messages.js";
import { silentLogger } from "../services/kit/log.js";
import { connectMqtt } from "../services/kit/mqtt.js";
import { schemaRegistry } from "../services/kit/schemas.js";
import { subject } from "../services/kit/subjects.js";
import {
  type PlantSimConfig,
  type PlantSimOptions,
  plantSimConfigSchema,
} from "../services/plant-sim/config.js";
import { type PlantSimService, start } from "../services/plant-sim/index.js";
import { mqttUrl, testSite, waitFor } from "./support/brokers.js";

const ROOT = new URL("../", import.meta.url).pathname;
const demo = (
  parse(readFileSync(`${ROOT}services/plant-sim/kestrel-r1.config.yaml`, "utf8")) as {
    plantSim: PlantSimOptions;
  }
).plantSim;
const SECRET = "integration-test-key-0123456789abcdef";
const WRONG = "someone-else-s-key-0123456789abcdefgh";

describe("plant-sim on a real MQTT broker", () => {
  const site = testSite("psim");
  let url: string;
  let service: PlantSimService;
  let watcher: Bus;
  let beat: NodeJS.Timeout | undefined;
  const batches: Measurements[] = [];
  const readbacks: Readback[] = [];
  const emitter: Emitter = {
    site,
    service: "validate",
    instance: "0",
    clock: systemClock,
    registry: schemaRegistry(),
  };

  const publish = async <T extends "rto.command.v1" | "rto.heartbeat.v1" | "rto.plant-control.v1">(
    stream: string,
    type: T,
    data: Parameters<typeof createEvent<T>>[2],
  ) => watcher.publish(subject(site, stream), encodeEvent(createEvent(emitter, type, data)));

  const command = (seq: number, fb: number, key = SECRET) => {
    const now = Date.now();
    const data: UnsignedCommand = {
      target: { site, unit: "R-1" },
      seq,
      issuedAt: now,
      expiresAt: now + 60_000,
      mode: "closed-loop",
      proposalId: `p-${seq}`,
      cycleId: `c-${seq}`,
      setpoints: [
        { tag: "FI-102", value: fb, unit: "kg/s" },
        { tag: "TI-101", value: 72, unit: "degC" },
      ],
    };
    return signCommand(data, { id: "k1", secret: key });
  };
  const answer = (seq: number) => readbacks.find((r) => r.trigger === "command" && r.commandSeq === seq);
  const lastFb = () => batches.at(-1)?.values.find((v) => v.tag === "FI-102")?.value ?? Number.NaN;

  beforeAll(async () => {
    url = await mqttUrl();
    watcher = await connectMqtt({ url });
    await watcher.subscribe(subject(site, "raw.sim"), (m) => {
      batches.push(JSON.parse(Buffer.from(m.payload).toString()).data as Measurements);
    });
    await watcher.subscribe(subject(site, "readback"), (m) => {
      readbacks.push(JSON.parse(Buffer.from(m.payload).toString()).data as Readback);
    });
    const config = loadConfig<PlantSimConfig>(plantSimConfigSchema, {
      site,
      bus: { transport: "mqtt", url },
      http: { enabled: false },
      logLevel: "silent",
      plantSim: {
        ...demo,
        plantModel: `${ROOT}${demo.plantModel}`,
        timeScale: 300,
        periodS: 30,
        tickMs: 20,
        statusPeriodS: 1,
        gateway: { keys: { k1: SECRET }, watchdogS: 1.5, heartbeatFrom: "validate" },
      },
    });
    service = await start(config, { log: silentLogger() });
  });

  afterAll(async () => {
    if (beat) clearInterval(beat);
    await service?.stop();
    await watcher?.close();
  });

  it("publishes measurement batches with every tag of the plant", async () => {
    expect(await waitFor(() => batches.length >= 3, 10_000)).toBe(true);
    const tags = new Set(batches[0]?.values.map((v) => v.tag));
    for (const t of ["FI-101", "FI-102", "FI-103", "TI-101", "TI-201", "TI-202", "FI-201", "AI-103"])
      expect(tags.has(t)).toBe(true);
    // simulated time runs about 300× the wall clock: batches 30 simulated s apart are stamped 30 000 ms apart
    const [a, b] = [batches.at(-2), batches.at(-1)];
    expect((b?.values[0]?.time ?? 0) - (a?.values[0]?.time ?? 0)).toBe(30_000);
  });

  it("refuses commands until validate's heartbeat arrives, then applies a signed command and the flow moves", async () => {
    await publish("command", "rto.command.v1", command(1, 2.4));
    expect(await waitFor(() => answer(1) !== undefined, 5000)).toBe(true);
    expect(answer(1)?.accepted).toBe(false);
    expect(answer(1)?.code).toBe("GATEWAY_SHED");

    const heartbeat = () =>
      publish("heartbeat.validate", "rto.heartbeat.v1", {
        service: "validate",
        instance: "0",
        status: "running",
        intervalS: 0.3,
      });
    await heartbeat();
    beat = setInterval(() => void heartbeat().catch(() => undefined), 300);
    expect(await waitFor(() => !service.gateway.state().shed, 5000)).toBe(true);

    const before = lastFb();
    await publish("command", "rto.command.v1", command(2, 2.4));
    expect(await waitFor(() => answer(2) !== undefined, 5000)).toBe(true);
    expect(answer(2)?.accepted).toBe(true);
    expect(answer(2)?.setpoints.find((s) => s.tag === "FI-102")?.target).toBe(2.4);
    // FB ramps at 0.002 kg/s per s: 0.6 kg/s takes 300 simulated s, about 1 s of wall time here
    expect(await waitFor(() => lastFb() > 2.3, 10_000)).toBe(true);
    expect(before).toBeLessThan(1.9);
  });

  it("answers a forged command with a refused readback and leaves the setpoints alone", async () => {
    await publish("command", "rto.command.v1", command(3, 1.0, WRONG));
    expect(await waitFor(() => answer(3) !== undefined, 5000)).toBe(true);
    expect(answer(3)?.accepted).toBe(false);
    expect(answer(3)?.code).toBe("GATEWAY_SIGNATURE_INVALID");
    expect(service.simulator.plant.loops().find((l) => l.symbol === "FB")?.target).toBe(2.4);
  });

  it("drops a tag from the batches when told to by a plant-control event", async () => {
    await publish("plant-control", "rto.plant-control.v1", {
      action: "inject",
      faults: [{ kind: "dropout", tag: "AI-104", durationS: 3600 }],
    });
    const seen = batches.length;
    expect(
      await waitFor(
        () =>
          batches.length > seen + 2 &&
          batches.slice(-2).every((b) => !b.values.some((v) => v.tag === "AI-104")),
        5000,
      ),
    ).toBe(true);
  });

  it("sheds and holds its setpoints within the watchdog time when the heartbeats stop", async () => {
    // given a command under way: FB heading down slowly
    await publish("command", "rto.command.v1", command(4, 0.6));
    expect(await waitFor(() => answer(4)?.accepted === true, 5000)).toBe(true);
    // when the heartbeats stop
    if (beat) clearInterval(beat);
    beat = undefined;
    const stoppedAt = Date.now();
    // then a shed readback arrives within the watchdog (1.5 s) plus a tick
    expect(await waitFor(() => readbacks.some((r) => r.trigger === "shed"), 5000)).toBe(true);
    expect(Date.now() - stoppedAt).toBeLessThan(3000);
    const shed = readbacks.find((r) => r.trigger === "shed");
    expect(shed?.shed).toBe(true);
    expect(shed?.mode).toBe("local");
    // and the plant holds: the FB target is where the ramp was when it shed, not 0.6
    const fb = service.simulator.plant.loops().find((l) => l.symbol === "FB");
    expect(fb?.target).toBeGreaterThan(0.6);
    expect(fb?.target).toBe(fb?.sp);
    // and a valid command is now refused
    await publish("command", "rto.command.v1", command(5, 2.0));
    expect(await waitFor(() => answer(5) !== undefined, 5000)).toBe(true);
    expect(answer(5)?.code).toBe("GATEWAY_SHED");
  });
});
