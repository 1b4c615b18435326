import { afterAll, beforeAll } from "vitest";
import { type EmbeddedBroker, startEmbeddedBroker } from "../services/kit/embedded.js";
import { connectMqtt } from "../services/kit/mqtt.js";
import { busContract } from "./bus-contract.js";

let broker: EmbeddedBroker;
beforeAll(async () => {
  broker = await startEmbeddedBroker({ port: 0 });
});
afterAll(async () => {
  await broker.close();
});

busContract("embedded broker (aedes, MQTT 3.1.1)", {
  connect: (_site, o) =>
    connectMqtt({
      url: broker.url,
      protocolVersion: 4,
      transportLabel: "embedded",
      ...(o?.clientId ? { clientId: o.clientId } : {}),
    }),
});
