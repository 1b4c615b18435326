/**
 * The console's web server: the page and its files, login and logout, the JSON API under /api/,
 * and live updates over Server-Sent Events. It knows nothing of the bus: approvals and mode requests
 * go out through the two callbacks it is given. Every input is checked and refused with a 4xx and a
 * stable code (CONSOLE_HTTP_CODES).
 *
 * Security: sessions are an HttpOnly, SameSite=Strict cookie; every state-changing POST also needs
 * the session's CSRF token in the x-csrf-token header (the page gets it in a meta tag and from the
 * login answer), a JSON body, and no cross-origin Origin. Responses carry a strict CSP.
 */
import { createServer, type IncomingMessage, type Server, type ServerResponse } from "node:http";
import type { Clock } from "../kit/clock.js";
import type { OperatorApproval, OperatorMode } from "../kit/generated/messages.js";
import type { Logger } from "../kit/log.js";
import type { ConsoleHttpCode } from "./errors.js";
import {
  type LoginLimiter,
  type Role,
  roleAllows,
  type Session,
  type SessionStore,
  tokensEqual,
  type UserDirectory,
} from "./users.js";
import type { ConsoleView, Section } from "./view.js";

/** A file served as is. */
export interface Asset {
  type: string;
  body: Buffer;
}

/** What the web server needs. */
export interface ConsoleHttpOptions {
  /** Interface to listen on. */
  host: string;
  /** Port; 0 picks a free one. */
  port: number;
  view: ConsoleView;
  /** Absent: nobody can log in. */
  users: UserDirectory | undefined;
  sessions: SessionStore;
  limiter: LoginLimiter;
  clock: Clock;
  log: Logger;
  /** Session idle lifetime, s (the cookie's Max-Age). */
  sessionTtlS: number;
  /** Mark the cookie Secure. */
  secureCookie: boolean;
  /** Any role must be logged in to read. */
  requireLoginToRead: boolean;
  /** Least time between two pushes, ms. */
  pushIntervalMs: number;
  /** Most SSE clients. */
  maxSseClients: number;
  /** index.html as a template: `{{CSRF}}`, `{{USER}}`, `{{ROLE}}` and `{{SITE}}` are filled per request. */
  indexHtml: string;
  /** Other files by path, e.g. "/app.js". */
  assets: ReadonlyMap<string, Asset>;
  /** The site id shown on the page. */
  site: string;
  /** Publishes an approval or rejection; rejects when the broker did not take it. */
  publishApproval(data: OperatorApproval): Promise<void>;
  /** Publishes a mode request. */
  publishMode(data: OperatorMode): Promise<void>;
}

/** The running web server. */
export interface ConsoleHttp {
  readonly port: number;
  /** Base URL, e.g. http://127.0.0.1:8080. */
  readonly url: string;
  /** Tells the server which sections changed; it pushes them at most every pushIntervalMs. */
  notify(changed: Iterable<Section>): void;
  /** Live-update clients connected now. */
  readonly clients: number;
  close(): Promise<void>;
}

const COOKIE = "sf_session";
const MAX_BODY_BYTES = 16 * 1024;
const CSP =
  "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' data:; connect-src 'self'; font-src 'self'; base-uri 'none'; form-action 'self'; frame-ancestors 'none'";

class HttpRefusal extends Error {
  constructor(
    readonly status: number,
    readonly code: ConsoleHttpCode,
    message: string,
  ) {
    super(message);
  }
}

const refuse = (status: number, code: ConsoleHttpCode, message: string): never => {
  throw new HttpRefusal(status, code, message);
};

function securityHeaders(res: ServerResponse): void {
  res.setHeader("content-security-policy", CSP);
  res.setHeader("x-content-type-options", "nosniff");
  res.setHeader("x-frame-options", "DENY");
  res.setHeader("referrer-policy", "no-referrer");
  res.setHeader("cross-origin-opener-policy", "same-origin");
}

function sendJson(
  res: ServerResponse,
  status: number,
  body: unknown,
  headers: Record<string, string> = {},
): void {
  const text = JSON.stringify(body);
  res.writeHead(status, {
    "content-type": "application/json; charset=utf-8",
    "cache-control": "no-store",
    "content-length": Buffer.byteLength(text),
    ...headers,
  });
  res.end(text);
}

function cookies(req: IncomingMessage): Map<string, string> {
  const out = new Map<string, string>();
  for (const part of (req.headers.cookie ?? "").split(";")) {
    const i = part.indexOf("=");
    if (i > 0) out.set(part.slice(0, i).trim(), part.slice(i + 1).trim());
  }
  return out;
}

function htmlEscape(s: string): string {
  return s.replace(/[&<>"']/g, (c) => `&#${c.charCodeAt(0)};`);
}

async function readJson(req: IncomingMessage): Promise<Record<string, unknown>> {
  const type = (req.headers["content-type"] ?? "").split(";")[0]?.trim().toLowerCase();
  if (type !== "application/json")
    refuse(415, "CONSOLE_UNSUPPORTED_MEDIA", "send the body as application/json");
  const declared = Number(req.headers["content-length"] ?? 0);
  if (declared > MAX_BODY_BYTES) refuse(413, "CONSOLE_TOO_LARGE", `the body exceeds ${MAX_BODY_BYTES} bytes`);
  const chunks: Buffer[] = [];
  let size = 0;
  for await (const chunk of req) {
    size += (chunk as Buffer).length;
    if (size > MAX_BODY_BYTES) refuse(413, "CONSOLE_TOO_LARGE", `the body exceeds ${MAX_BODY_BYTES} bytes`);
    chunks.push(chunk as Buffer);
  }
  let value: unknown;
  try {
    value = JSON.parse(Buffer.concat(chunks).toString("utf8"));
  } catch {
    refuse(400, "CONSOLE_BAD_REQUEST", "the body is not valid JSON");
  }
  if (!value || typeof value !== "object" || Array.isArray(value)) {
    refuse(400, "CONSOLE_BAD_REQUEST", "the body must be a JSON object");
  }
  return value as Record<string, unknown>;
}

/** Checks that the body has only `allowed` fields. */
function onlyFields(body: Record<string, unknown>, allowed: string[]): void {
  for (const k of Object.keys(body)) {
    if (!allowed.includes(k))
      refuse(400, "CONSOLE_BAD_REQUEST", `unknown field '${k}' (expected ${allowed.join(", ")})`);
  }
}

function text(
  body: Record<string, unknown>,
  field: string,
  max: number,
  required: boolean,
): string | undefined {
  const v = body[field];
  if (v === undefined || v === null || v === "") {
    if (required) refuse(400, "CONSOLE_BAD_REQUEST", `'${field}' is required`);
    return undefined;
  }
  if (typeof v !== "string") return refuse(400, "CONSOLE_BAD_REQUEST", `'${field}' must be a string`);
  const t = v.trim();
  if (t.length === 0 && required) refuse(400, "CONSOLE_BAD_REQUEST", `'${field}' is required`);
  if (t.length > max) refuse(400, "CONSOLE_BAD_REQUEST", `'${field}' is longer than ${max} characters`);
  return t.length ? t : undefined;
}

/** Starts the console's web server. */
export async function startConsoleHttp(o: ConsoleHttpOptions): Promise<ConsoleHttp> {
  const clients = new Set<ServerResponse>();
  const changed = new Set<Section>();
  let flushTimer: NodeJS.Timeout | undefined;
  let lastFlushMs = 0;

  const sessionOf = (req: IncomingMessage): Session | undefined => {
    const id = cookies(req).get(COOKIE);
    return id ? o.sessions.touch(id, o.clock.now()) : undefined;
  };

  const sameOrigin = (req: IncomingMessage): void => {
    // Browsers send Origin on every cross-site POST; Sec-Fetch-Site where they support it.
    const site = req.headers["sec-fetch-site"];
    if (site === "cross-site" || site === "same-site")
      refuse(403, "CONSOLE_ORIGIN", "cross-site requests are refused");
    const origin = req.headers.origin;
    if (origin && origin !== "null") {
      let host: string | undefined;
      try {
        host = new URL(origin).host;
      } catch {
        host = undefined;
      }
      if (host !== req.headers.host) refuse(403, "CONSOLE_ORIGIN", `origin ${origin} is not this console`);
    } else if (origin === "null") refuse(403, "CONSOLE_ORIGIN", "opaque origins are refused");
  };

  const needSession = (req: IncomingMessage, role: Role, checkCsrf: boolean): Session => {
    const s = sessionOf(req);
    if (!s) return refuse(401, "CONSOLE_LOGIN_REQUIRED", "log in first");
    if (checkCsrf) {
      const token = req.headers["x-csrf-token"];
      if (!tokensEqual(typeof token === "string" ? token : undefined, s.csrf)) {
        refuse(403, "CONSOLE_CSRF", "the x-csrf-token header is missing or wrong; reload the page");
      }
    }
    if (!roleAllows(s.user.role, role)) {
      const what = role === "engineer" ? "change the mode" : "approve or reject proposals";
      refuse(
        403,
        "CONSOLE_FORBIDDEN",
        `${s.user.username} is a ${s.user.role} and may not ${what} (needs ${role})`,
      );
    }
    return s;
  };

  const cookieHeader = (value: string, maxAgeS: number): string =>
    `${COOKIE}=${value}; Path=/; HttpOnly; SameSite=Strict; Max-Age=${maxAgeS}${o.secureCookie ? "; Secure" : ""}`;

  const writeSse = (res: ServerResponse, event: string, data: unknown): void => {
    res.write(`event: ${event}\ndata: ${JSON.stringify(data)}\n\n`);
  };

  const flush = (): void => {
    flushTimer = undefined;
    lastFlushMs = o.clock.now();
    const now = o.clock.now();
    const sections: Record<string, unknown> = {};
    for (const name of changed) if (name !== "trends") sections[name] = o.view.section(name, now);
    changed.clear();
    // Always taken, so that points do not pile up as "changed" while nobody watches.
    const trends = o.view.takeTrendPatch();
    if (clients.size === 0 || (Object.keys(sections).length === 0 && trends.length === 0)) return;
    const payload = { atMs: now, sections, trends };
    for (const c of clients) writeSse(c, "patch", payload);
  };

  const notify = (names: Iterable<Section>): void => {
    for (const n of names) changed.add(n);
    if (changed.size === 0 || flushTimer) return;
    const wait = Math.max(0, lastFlushMs + o.pushIntervalMs - o.clock.now());
    flushTimer = setTimeout(flush, Math.min(wait, o.pushIntervalMs));
  };

  // Silence of services and expiry of approvals are judged against the clock: refresh them now and then.
  const tick = setInterval(() => {
    notify(["services", "pending", "overview"]);
    for (const c of clients) c.write(": keep-alive\n\n");
  }, 5000);
  tick.unref();

  const approval = async (req: IncomingMessage, res: ServerResponse): Promise<void> => {
    sameOrigin(req);
    const s = needSession(req, "operator", true);
    const body = await readJson(req);
    onlyFields(body, ["proposalId", "decision", "reason"]);
    const proposalId = text(body, "proposalId", 64, true) as string;
    if (!/^[A-Za-z0-9_-]+$/.test(proposalId))
      refuse(400, "CONSOLE_BAD_REQUEST", "'proposalId' has characters an event id cannot have");
    const decision = body.decision;
    if (decision !== "approve" && decision !== "reject") {
      refuse(400, "CONSOLE_BAD_REQUEST", "'decision' must be 'approve' or 'reject'");
    }
    const reason = text(body, "reason", 500, decision === "reject");
    const now = o.clock.now();
    if (!o.view.isPending(proposalId, now)) {
      refuse(
        409,
        "CONSOLE_NOT_PENDING",
        `proposal ${proposalId} is not waiting for approval (answered, superseded, expired or unknown)`,
      );
    }
    const data: OperatorApproval = {
      proposalId,
      decision: decision as "approve" | "reject",
      user: s.user.username,
      at: now,
    };
    if (reason) data.reason = reason;
    try {
      await o.publishApproval(data);
    } catch (err) {
      o.log.warn({ err }, "approval not published");
      refuse(502, "CONSOLE_PUBLISH_FAILED", "the broker did not take the approval; try again");
    }
    o.log.info({ user: s.user.username, proposalId, decision }, "operator answered a proposal");
    sendJson(res, 202, { ok: true, approval: data });
  };

  const mode = async (req: IncomingMessage, res: ServerResponse): Promise<void> => {
    sameOrigin(req);
    const s = needSession(req, "engineer", true);
    const body = await readJson(req);
    onlyFields(body, ["mode", "reason"]);
    const m = body.mode;
    if (m !== "off" && m !== "advisory" && m !== "closed-loop") {
      refuse(400, "CONSOLE_BAD_REQUEST", "'mode' must be 'off', 'advisory' or 'closed-loop'");
    }
    const reason = text(body, "reason", 500, true) as string;
    const data: OperatorMode = {
      mode: m as OperatorMode["mode"],
      user: s.user.username,
      reason,
      at: o.clock.now(),
    };
    try {
      await o.publishMode(data);
    } catch (err) {
      o.log.warn({ err }, "mode request not published");
      refuse(502, "CONSOLE_PUBLISH_FAILED", "the broker did not take the mode request; try again");
    }
    o.log.info({ user: s.user.username, mode: m }, "mode requested");
    sendJson(res, 202, { ok: true, request: data });
  };

  const login = async (req: IncomingMessage, res: ServerResponse): Promise<void> => {
    sameOrigin(req);
    const body = await readJson(req);
    onlyFields(body, ["username", "password"]);
    const username = body.username;
    const password = body.password;
    if (typeof username !== "string" || username.length < 1 || username.length > 64) {
      refuse(400, "CONSOLE_BAD_REQUEST", "'username' must be a string of 1–64 characters");
    }
    if (typeof password !== "string" || password.length < 1 || password.length > 1024) {
      refuse(400, "CONSOLE_BAD_REQUEST", "'password' must be a string of 1–1024 characters");
    }
    const name = username as string;
    const now = o.clock.now();
    if (o.limiter.blocked(name, now)) {
      refuse(429, "CONSOLE_LOGIN_THROTTLED", "too many failed logins for this user; wait a few minutes");
    }
    const result = o.users?.authenticate(name, password as string);
    if (!result?.ok) {
      o.limiter.fail(name, now);
      o.log.warn({ username: name.slice(0, 64) }, "failed login");
      refuse(
        401,
        "CONSOLE_LOGIN_FAILED",
        o.users ? "unknown user or wrong password" : "no users are configured",
      );
      return;
    }
    o.limiter.succeed(name);
    const old = cookies(req).get(COOKIE);
    if (old) o.sessions.delete(old);
    const s = o.sessions.create(result.user, now);
    o.log.info({ user: name, role: result.user.role }, "login");
    sendJson(
      res,
      200,
      { user: s.user.username, displayName: s.user.displayName, role: s.user.role, csrf: s.csrf },
      { "set-cookie": cookieHeader(s.id, o.sessionTtlS) },
    );
  };

  const logout = (req: IncomingMessage, res: ServerResponse): void => {
    sameOrigin(req);
    const s = needSession(req, "viewer", true);
    o.sessions.delete(s.id);
    sendJson(res, 200, { ok: true }, { "set-cookie": cookieHeader("", 0) });
  };

  const events = (req: IncomingMessage, res: ServerResponse): void => {
    if (clients.size >= o.maxSseClients) refuse(503, "CONSOLE_BUSY", "too many live-update clients");
    res.writeHead(200, {
      "content-type": "text/event-stream; charset=utf-8",
      "cache-control": "no-store",
      connection: "keep-alive",
      "x-accel-buffering": "no",
    });
    res.write("retry: 3000\n\n");
    writeSse(res, "state", o.view.state(o.clock.now()));
    clients.add(res);
    const drop = () => clients.delete(res);
    req.on("close", drop);
    res.on("error", drop);
  };

  const readGate = (req: IncomingMessage): void => {
    if (o.requireLoginToRead) needSession(req, "viewer", false);
  };

  const index = (req: IncomingMessage, res: ServerResponse): void => {
    const s = sessionOf(req);
    const html = o.indexHtml
      .replaceAll("{{CSRF}}", s ? s.csrf : "")
      .replaceAll("{{USER}}", htmlEscape(s?.user.username ?? ""))
      .replaceAll("{{ROLE}}", s?.user.role ?? "")
      .replaceAll("{{SITE}}", htmlEscape(o.site));
    res.writeHead(200, { "content-type": "text/html; charset=utf-8", "cache-control": "no-store" });
    res.end(html);
  };

  const route = async (req: IncomingMessage, res: ServerResponse): Promise<void> => {
    const url = new URL(req.url ?? "/", "http://console.invalid");
    const path = url.pathname;
    const method = req.method ?? "GET";
    const posts: Record<string, (req: IncomingMessage, res: ServerResponse) => Promise<void> | void> = {
      "/login": login,
      "/logout": logout,
      "/api/approval": approval,
      "/api/mode": mode,
    };
    const post = posts[path];
    if (post) {
      if (method !== "POST") refuse(405, "CONSOLE_METHOD", `${path} takes POST`);
      return post(req, res);
    }
    if (method !== "GET" && method !== "HEAD") refuse(405, "CONSOLE_METHOD", `${path} takes GET`);
    if (path === "/" || path === "/index.html") return index(req, res);
    if (path === "/api/session") {
      const s = sessionOf(req);
      return sendJson(
        res,
        200,
        s
          ? { user: s.user.username, displayName: s.user.displayName, role: s.user.role, csrf: s.csrf }
          : { user: null, loginEnabled: o.users !== undefined && o.users.size > 0 },
      );
    }
    if (path === "/api/state") {
      readGate(req);
      return sendJson(res, 200, o.view.state(o.clock.now()));
    }
    if (path === "/api/events") {
      readGate(req);
      return events(req, res);
    }
    const asset = o.assets.get(path);
    if (asset) {
      res.writeHead(200, {
        "content-type": asset.type,
        "cache-control": "no-cache",
        "content-length": asset.body.length,
      });
      res.end(method === "HEAD" ? undefined : asset.body);
      return;
    }
    refuse(404, "CONSOLE_NOT_FOUND", `no route ${path}`);
  };

  const server: Server = createServer((req, res) => {
    securityHeaders(res);
    route(req, res).catch((err: unknown) => {
      if (res.headersSent) {
        res.end();
        return;
      }
      if (err instanceof HttpRefusal) {
        sendJson(res, err.status, { code: err.code, message: err.message });
      } else {
        o.log.error({ err }, "console request failed");
        sendJson(res, 500, { code: "CONSOLE_INTERNAL", message: "internal error; see the console's log" });
      }
    });
  });
  server.headersTimeout = 10_000;
  server.requestTimeout = 30_000;
  await new Promise<void>((resolve, reject) => {
    server.once("error", reject);
    server.listen(o.port, o.host, () => resolve());
  });
  const address = server.address();
  const port = typeof address === "object" && address ? address.port : o.port;
  const hostForUrl = o.host.includes(":") ? `[${o.host}]` : o.host;
  return {
    port,
    url: `http://${hostForUrl}:${port}`,
    notify,
    get clients() {
      return clients.size;
    },
    close: async () => {
      clearInterval(tick);
      if (flushTimer) clearTimeout(flushTimer);
      for (const c of clients) c.end();
      clients.clear();
      await new Promise<void>((resolve) => {
        server.close(() => resolve());
        server.closeAllConnections();
      });
    },
  };
}
