import { connectMqtt } from "../services/kit/mqtt.js";
import { busContract } from "./bus-contract.js";
import { mqttUrl, startMosquitto, stopOwnBrokers } from "./support/brokers.js";

busContract("MQTT 5 (Mosquitto)", {
  connect: async (_site, o) =>
    connectMqtt({ url: await mqttUrl(), ...(o?.clientId ? { clientId: o.clientId } : {}) }),
  ownBroker: async () => {
    const broker = await startMosquitto();
    return {
      connect: (_site, o) =>
        connectMqtt({
          url: broker.url,
          reconnectMinMs: 50,
          reconnectMaxMs: 500,
          ...(o?.clientId ? { clientId: o.clientId } : {}),
        }),
      restart: broker.restart,
      stop: broker.stop,
    };
  },
  teardown: stopOwnBrokers,
});
