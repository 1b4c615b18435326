/**
 * Runs the demo site's closed loop for an end-to-end test: the suite from cli/demo.ts (one scaled
 * clock, an embedded or external broker, every stage) with a test's changes to demo.yaml, and a
 * record of what the control side accepted.
 */
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { type BusChoice, type DemoConfig, readDemoConfig, type Suite, startSuite } from "../../cli/demo.js";
import { captureIo } from "../../cli/io.js";
import type { Bus } from "../../services/kit/bus.js";
import type { AnyEvent } from "../../services/kit/envelope.js";
import { decodeEvent } from "../../services/kit/envelope.js";
import { connectMqtt } from "../../services/kit/mqtt.js";
import { schemaRegistry } from "../../services/kit/schemas.js";

export const DEMO_FILE = new URL("../../infra/sites/kestrel-r1/demo.yaml", import.meta.url).pathname;

/** A running loop and what it has seen. */
export interface Loop {
  suite: Suite;
  /** Every event on the site's streams, in arrival order. */
  events: AnyEvent[];
  ofType<T extends AnyEvent["type"]>(type: T): Array<Extract<AnyEvent, { type: T }>>;
  stop(): Promise<void>;
}

/** Starts the demo suite with `change` applied to demo.yaml and watches every stream of the site. */
export async function startLoop(
  change: (base: Readonly<DemoConfig>) => DemoConfig,
  bus: BusChoice = { kind: "embedded", host: "127.0.0.1", port: 0 },
): Promise<Loop> {
  const dataDir = mkdtempSync(join(tmpdir(), "sf-loop-"));
  const config = { ...change(readDemoConfig(DEMO_FILE)), dataDir };
  const suite = await startSuite({ config, bus, io: captureIo() });
  const events: AnyEvent[] = [];
  let watcher: Bus | undefined;
  try {
    watcher = await connectMqtt(
      suite.transport === "embedded"
        ? { url: suite.brokerUrl, protocolVersion: 4, transportLabel: "embedded" }
        : { url: suite.brokerUrl },
    );
    const registry = schemaRegistry();
    await watcher.subscribe(`rto.${config.site}.>`, (m) => {
      const d = decodeEvent(registry, m.payload, 1 << 20);
      if (d.ok) events.push(d.event);
    });
  } catch (err) {
    await suite.stop();
    throw err;
  }
  return {
    suite,
    events,
    ofType: <T extends AnyEvent["type"]>(type: T) =>
      events.filter((e): e is Extract<AnyEvent, { type: T }> => e.type === type),
    stop: async () => {
      await watcher?.close().catch(() => undefined);
      await suite.stop();
      rmSync(dataDir, { recursive: true, force: true });
    },
  };
}
