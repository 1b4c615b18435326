/** /healthz (alive), /readyz (connected and subscribed) and /metrics (Prometheus) for one service. */
import { createServer, type Server } from "node:http";
import type { Registry } from "prom-client";

/** A running health/metrics endpoint. */
export interface HealthServer {
  port: number;
  close(): Promise<void>;
}

/** Serves the endpoints; `ready()` decides /readyz. */
export async function startHealthServer(options: {
  host: string;
  port: number;
  registry: Registry;
  ready: () => boolean;
}): Promise<HealthServer> {
  const server: Server = createServer((req, res) => {
    const url = req.url ?? "/";
    if (url === "/healthz") {
      res.writeHead(200, { "content-type": "text/plain" }).end("ok\n");
    } else if (url === "/readyz") {
      const ok = options.ready();
      res.writeHead(ok ? 200 : 503, { "content-type": "text/plain" }).end(ok ? "ready\n" : "not ready\n");
    } else if (url === "/metrics") {
      options.registry.metrics().then(
        (text) => res.writeHead(200, { "content-type": options.registry.contentType }).end(text),
        (err: Error) => res.writeHead(500).end(err.message),
      );
    } else {
      res.writeHead(404).end();
    }
  });
  await new Promise<void>((resolve, reject) => {
    server.once("error", reject);
    server.listen(options.port, options.host, () => resolve());
  });
  const address = server.address();
  return {
    port: typeof address === "object" && address ? address.port : options.port,
    close: () => new Promise<void>((resolve) => server.close(() => resolve())),
  };
}
