/**
 * The console service's configuration: the shared service options plus the web server, the users
 * file, sessions and the bounds of the in-memory view. Validated once at start-up, then frozen.
 */
import { type BaseConfig, serviceConfigSchema } from "../kit/config.js";

/** The console's own options (after defaults). */
export interface ConsoleOptions {
  /** Interface the web page and API listen on. Default 127.0.0.1 (loopback only). */
  host: string;
  /** Port of the web page and API; 0 picks a free one. Default 8080. */
  port: number;
  /** Path of the users file (YAML, see users.example.yaml). Absent: nobody can log in; the page is read-only. */
  usersFile?: string;
  /** A session ends this long after its last use, s. Default 28800 (8 h). */
  sessionTtlS: number;
  /** Most sessions kept at once; the least recently used is dropped beyond it. Default 1000. */
  maxSessions: number;
  /** Mark the session cookie Secure (set true behind HTTPS). Default false. */
  secureCookie: boolean;
  /** Require a login (any role) to read the page's data, not only to act. Default false. */
  requireLoginToRead: boolean;
  /** Failed logins per user within loginWindowS before further tries are refused. Default 5. */
  loginFailures: number;
  /** Window of the failed-login count, s. Default 300. */
  loginWindowS: number;
  /** Shortest time between two live-update pushes to the browsers, ms. Default 250. */
  pushIntervalMs: number;
  /** Most browsers on the live-update stream at once. Default 50. */
  maxSseClients: number;
  /** Trend resolution: one point (the mean) per this much sample time, s. Default 5. */
  trendStepS: number;
  /** Points kept per trend. Default 720 (one hour at 5 s). */
  trendPoints: number;
  /** Tags to trend; empty: the snapshot's key tags first, then any others, up to maxTrendTags. Default []. */
  trendTags: string[];
  /** Most tags trended. Default 24. */
  maxTrendTags: number;
  /** RTO cycles kept on the timeline. Default 30. */
  cycles: number;
  /** Accepted estimates kept per parameter. Default 200. */
  parameterPoints: number;
  /** Points kept on the profit curve. Default 1000. */
  profitPoints: number;
  /** Folder of index.html, app.js, style.css. Default: public/ beside this file. */
  publicDir?: string;
}

/** The console's whole config. */
export type ConsoleConfig = BaseConfig & { console: ConsoleOptions };

const int = (min: number, max: number, dflt: number, description: string) => ({
  type: "integer",
  minimum: min,
  maximum: max,
  default: dflt,
  description,
});

/** JSON Schema of the console's config, with defaults. */
export const consoleConfigSchema = serviceConfigSchema({
  console: {
    type: "object",
    additionalProperties: false,
    default: {},
    properties: {
      host: {
        type: "string",
        minLength: 1,
        maxLength: 255,
        default: "127.0.0.1",
        description: "Interface. Default loopback.",
      },
      port: int(0, 65535, 8080, "Port; 0 picks a free one. Default 8080."),
      usersFile: { type: "string", minLength: 1, maxLength: 1000, description: "Users file (YAML)." },
      sessionTtlS: int(60, 604800, 28800, "Session idle lifetime, s. Default 28800."),
      maxSessions: int(1, 100000, 1000, "Most sessions kept. Default 1000."),
      secureCookie: { type: "boolean", default: false, description: "Secure cookie flag. Default false." },
      requireLoginToRead: {
        type: "boolean",
        default: false,
        description: "Login needed to read. Default false.",
      },
      loginFailures: int(1, 1000, 5, "Failed logins per user before refusing. Default 5."),
      loginWindowS: int(1, 86400, 300, "Failed-login window, s. Default 300."),
      pushIntervalMs: int(20, 10000, 250, "Least time between pushes, ms. Default 250."),
      maxSseClients: int(1, 1000, 50, "Most live-update clients. Default 50."),
      trendStepS: {
        type: "number",
        exclusiveMinimum: 0,
        maximum: 86400,
        default: 5,
        description: "Trend step, s. Default 5.",
      },
      trendPoints: int(10, 100000, 720, "Points per trend. Default 720."),
      trendTags: {
        type: "array",
        maxItems: 200,
        default: [],
        items: { type: "string", minLength: 1, maxLength: 64 },
        description: "Tags to trend. Default: key tags first.",
      },
      maxTrendTags: int(1, 200, 24, "Most trended tags. Default 24."),
      cycles: int(1, 1000, 30, "Cycles on the timeline. Default 30."),
      parameterPoints: int(2, 10000, 200, "Estimates kept per parameter. Default 200."),
      profitPoints: int(2, 100000, 1000, "Profit points kept. Default 1000."),
      publicDir: {
        type: "string",
        minLength: 1,
        maxLength: 1000,
        description: "Folder of the page's files.",
      },
    },
  },
});
