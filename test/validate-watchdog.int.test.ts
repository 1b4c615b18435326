/**
 * The control side sheds the optimizer when validate goes silent: with the real validate service
 * and the simulated plant on one broker, stopping validate makes the plant hold its own setpoints
 * within the gateway's watchdog time.
 */
import { readFileSync } from "node:fs";
import { afterAll, describe, expect, it } from "vitest";
import { parse } from "yaml";
import type { Bus } from "../services/kit/bus.js";
import { loadConfig } from "../services/kit/config.js";
import type { Readback } from "../services/kit/generated/messages.js";
import { silentLogger } from "../services/kit/log.js";
import { connectMqtt } from "../services/kit/mqtt.js";
import { subject } from "../services/kit/subjects.js";
import { loadSiteModelFile } from "../services/model/index.js";
import {
  type PlantSimConfig,
  type PlantSimOptions,
  plantSimConfigSchema,
} from "../services/plant-sim/config.js";
import { start as startPlant } from "../services/plant-sim/index.js";
import { type ValidateConfig, validateConfigSchema } from "../services/validate/config.js";
import { start as startValidate } from "../services/validate/index.js";
import { mqttUrl, testSite, waitFor } from "./support/brokers.js";

const ROOT = new URL("../", import.meta.url).pathname;
const KEY = { id: "k1", secret: "watchdog-test-key-not-secret-0123456789abcd" };
const WATCHDOG_S = 2;

describe("validate's heartbeat and the plant's watchdog", () => {
  const closers: Array<() => Promise<void>> = [];
  afterAll(async () => {
    for (const c of closers.reverse()) await c().catch(() => undefined);
  });

  it("sheds the optimizer and holds the plant's setpoints within the watchdog time after validate stops", async () => {
    const url = await mqttUrl();
    const site = testSite("wdog");
    const demo = (
      parse(readFileSync(`${ROOT}services/plant-sim/kestrel-r1.config.yaml`, "utf8")) as {
        plantSim: PlantSimOptions;
      }
    ).plantSim;
    const readbacks: Array<{ at: number; rb: Readback }> = [];
    const watcher: Bus = await connectMqtt({ url });
    closers.push(() => watcher.close());
    await watcher.subscribe(subject(site, "readback"), (m) => {
      readbacks.push({ at: Date.now(), rb: JSON.parse(Buffer.from(m.payload).toString()).data as Readback });
    });

    const plant = await startPlant(
      loadConfig<PlantSimConfig>(plantSimConfigSchema, {
        site,
        bus: { url },
        http: { enabled: false },
        logLevel: "silent",
        plantSim: {
          ...demo,
          plantModel: `${ROOT}${demo.plantModel}`,
          timeScale: 60,
          tickMs: 20,
          statusPeriodS: 0.5,
          gateway: { keys: { [KEY.id]: KEY.secret }, watchdogS: WATCHDOG_S, heartbeatFrom: "validate" },
        },
      }),
      { log: silentLogger() },
    );
    closers.push(() => plant.stop());

    const model = await loadSiteModelFile(`${ROOT}infra/sites/kestrel-r1/site.yaml`);
    const validate = await startValidate(
      loadConfig<ValidateConfig>(validateConfigSchema, {
        site,
        bus: { url },
        http: { enabled: false },
        heartbeatS: 0.5,
        logLevel: "silent",
        validate: { unit: "R-1", dispatch: { keyId: KEY.id } },
      }),
      { model, signingKey: KEY, log: silentLogger() },
    );

    // While validate beats, the gateway takes the optimizer on (it starts shed and recovers).
    expect(await waitFor(() => plant.gateway.state().shed === false, 10_000)).toBe(true);
    const stoppedAt = Date.now();
    await validate.stop();
    expect(
      await waitFor(() => readbacks.some((r) => r.at > stoppedAt && r.rb.trigger === "shed"), 10_000),
    ).toBe(true);
    const shed = readbacks.find((r) => r.at > stoppedAt && r.rb.trigger === "shed");
    // The stop itself sends a last heartbeat, so the watchdog counts from there; allow one status period.
    expect((shed?.at ?? Number.POSITIVE_INFINITY) - stoppedAt).toBeLessThan((WATCHDOG_S + 1.5) * 1000);
    expect(shed?.rb.shed).toBe(true);
    expect(shed?.rb.mode).toBe("local");
    expect(plant.gateway.state().shed).toBe(true);
  });
});
