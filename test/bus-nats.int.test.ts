import { jetstreamManager } from "@nats-io/jetstream";
import { connect } from "@nats-io/transport-node";
import { connectNats, siteStream } from "../services/kit/nats.js";
import { busContract } from "./bus-contract.js";
import { natsUrl, startNatsServer, stopOwnBrokers } from "./support/brokers.js";

busContract("NATS JetStream", {
  connect: async (site) => connectNats({ servers: await natsUrl(), streams: [siteStream(site)] }),
  ownBroker: async () => {
    const server = await startNatsServer();
    return {
      connect: (site) => connectNats({ servers: server.url, streams: [siteStream(site)] }),
      restart: server.restart,
      stop: server.stop,
    };
  },
  cleanup: async (site) => {
    const nc = await connect({ servers: await natsUrl() });
    try {
      const jsm = await jetstreamManager(nc);
      await jsm.streams.delete(siteStream(site).name).catch(() => undefined);
    } finally {
      await nc.close();
    }
  },
  teardown: stopOwnBrokers,
});
