/**
 * Prometheus metrics per service (prom-client), in a registry of the service's own so that two
 * services in one process (the demo) do not collide.
 */
import { Counter, collectDefaultMetrics, Histogram, Registry } from "prom-client";

/** The kit's message metrics. */
export interface KitMetrics {
  registry: Registry;
  messagesIn: Counter<"stream">;
  messagesOut: Counter<"stream">;
  deadLettered: Counter<"stream" | "reason">;
  handlerSeconds: Histogram<"stream">;
}

/** Creates the metrics of one service. `processMetrics` adds Node's default process metrics. */
export function createMetrics(service: string, options: { processMetrics?: boolean } = {}): KitMetrics {
  const registry = new Registry();
  registry.setDefaultLabels({ service });
  if (options.processMetrics) collectDefaultMetrics({ register: registry });
  return {
    registry,
    messagesIn: new Counter({
      name: "steadfast_messages_in_total",
      help: "Messages received, per stream",
      labelNames: ["stream"],
      registers: [registry],
    }),
    messagesOut: new Counter({
      name: "steadfast_messages_out_total",
      help: "Events published, per stream",
      labelNames: ["stream"],
      registers: [registry],
    }),
    deadLettered: new Counter({
      name: "steadfast_dead_lettered_total",
      help: "Messages sent to the dead-letter stream, per stream and reason",
      labelNames: ["stream", "reason"],
      registers: [registry],
    }),
    handlerSeconds: new Histogram({
      name: "steadfast_handler_seconds",
      help: "Time spent handling one message, per stream",
      labelNames: ["stream"],
      buckets: [0.0001, 0.0005, 0.001, 0.005, 0.01, 0.05, 0.1, 0.5, 1, 5],
      registers: [registry],
    }),
  };
}

/** Stream label of a neutral subject: the part after `rto.<site>.`. */
export function streamLabel(subject: string): string {
  const parts = subject.split(".");
  return parts.length > 2 ? parts.slice(2).join(".") : subject;
}
