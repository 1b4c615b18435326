import type { Bus } from "./bus.js";
import type { BaseConfig } from "./config.js";
import { connectMqtt } from "./mqtt.js";
import { connectNats, siteStream } from "./nats.js";

/** Connects to the broker a service's config names. The embedded broker is spoken to in MQTT 3.1.1. */
export async function connectBus(
  config: Pick<BaseConfig, "bus" | "site">,
  options: { name: string; will?: { subject: string; payload: Uint8Array }; onError?: (err: Error) => void },
): Promise<Bus> {
  const b = config.bus;
  if (b.transport === "nats") {
    return connectNats({
      servers: b.url,
      name: options.name,
      streams: [siteStream(config.site)],
      ...(b.username ? { user: b.username } : {}),
      ...(b.password ? { pass: b.password } : {}),
      ...(options.onError ? { onError: options.onError } : {}),
    });
  }
  return connectMqtt({
    url: b.url,
    protocolVersion: b.transport === "embedded" ? 4 : 5,
    transportLabel: b.transport === "embedded" ? "embedded" : "mqtt",
    ...(b.clientId ? { clientId: b.clientId } : {}),
    ...(b.username ? { username: b.username } : {}),
    ...(b.password ? { password: b.password } : {}),
    ...(options.will ? { will: options.will } : {}),
    ...(options.onError ? { onError: options.onError } : {}),
  });
}
