import { type Logger, pino } from "pino";

export type { Logger } from "pino";

/** Options of a service's logger. */
export interface LogOptions {
  /** pino level: trace, debug, info, warn, error, fatal, silent. Default "info". */
  level?: string;
}

/** A structured JSON logger named after the service (one line per record, to stdout). */
export function createLogger(service: string, options: LogOptions = {}): Logger {
  return pino({ name: service, level: options.level ?? "info" });
}

/** A logger that writes nothing (tests, benchmarks). */
export function silentLogger(): Logger {
  return pino({ level: "silent" });
}
