/** services/kit: the shared runtime of every Steadfast service (a library, not a service). */
export * from "./bus.js";
export * from "./clock.js";
export * from "./config.js";
export * from "./connect.js";
export * from "./embedded.js";
export * from "./envelope.js";
export * from "./errors.js";
export * from "./events.js";
export type * from "./generated/messages.js";
export * from "./http.js";
export * from "./ids.js";
export * from "./log.js";
export * from "./metrics.js";
export * from "./mqtt.js";
export * from "./nats.js";
export * from "./schemas.js";
export * from "./service.js";
export * from "./subjects.js";
