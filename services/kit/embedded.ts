/**
 * The embedded broker: an in-process MQTT broker (aedes) on a loopback port, so the one-command
 * demo needs nothing installed. Services still speak MQTT to it. aedes 1.x speaks MQTT 3.1.1 only
 * and has no shared subscriptions, and it keeps messages in memory: one instance per service, and
 * nothing survives its restart (see LIBRARY-NOTES).
 */
import { createServer, type Server } from "node:net";
import { KitError } from "./errors.js";

/** A running embedded broker. */
export interface EmbeddedBroker {
  /** mqtt://host:port */
  url: string;
  port: number;
  close(): Promise<void>;
}

/** Options of the embedded broker. */
export interface EmbeddedBrokerOptions {
  /** TCP port; 0 picks a free one. Default 0. */
  port?: number;
  /** Interface to listen on. Default 127.0.0.1 (loopback only). */
  host?: string;
}

/** Starts an aedes broker listening on a loopback port. */
export async function startEmbeddedBroker(options: EmbeddedBrokerOptions = {}): Promise<EmbeddedBroker> {
  const { Aedes } = await import("aedes");
  const broker = await Aedes.createBroker();
  const server: Server = createServer(broker.handle);
  const host = options.host ?? "127.0.0.1";
  await new Promise<void>((resolve, reject) => {
    server.once("error", (err: NodeJS.ErrnoException) =>
      reject(
        new KitError(
          "KIT_BUS_CONNECT",
          err.code === "EADDRINUSE"
            ? `port ${options.port} on ${host} is taken (a Mosquitto already running?): choose another or 0 for a free one`
            : `embedded broker could not listen: ${err.message}`,
          { cause: err },
        ),
      ),
    );
    server.listen(options.port ?? 0, host, () => resolve());
  });
  const address = server.address();
  const port = typeof address === "object" && address ? address.port : 0;
  return {
    url: `mqtt://${host}:${port}`,
    port,
    close: async () => {
      await new Promise<void>((resolve) => broker.close(() => resolve()));
      await new Promise<void>((resolve) => server.close(() => resolve()));
    },
  };
}
