/**
 * Neutral subject names `rto.<site>.<stream>` and their spelling on each transport:
 * MQTT separates words with `/`, NATS with `.`. Wildcards: `*` one word, `>` the rest.
 */
import { KitError } from "./errors.js";

const WORD = /^[a-z0-9-]+$/;

/** Checks a site id ([a-z0-9-], 1–40 characters). */
export function assertSiteId(site: string): void {
  if (!WORD.test(site) || site.length > 40) {
    throw new KitError("KIT_SUBJECT_INVALID", `site id '${site}' must be 1–40 characters of [a-z0-9-]`);
  }
}

/** The neutral subject of a site's stream, e.g. subject("r1", "heartbeat.ingest") → "rto.r1.heartbeat.ingest". */
export function subject(site: string, stream: string): string {
  assertSiteId(site);
  const words = stream.split(".");
  for (const w of words) {
    if (!WORD.test(w)) {
      throw new KitError(
        "KIT_SUBJECT_INVALID",
        `stream '${stream}': each word must be [a-z0-9-], got '${w}'`,
      );
    }
  }
  return `rto.${site}.${stream}`;
}

/** Checks a neutral subject or filter: words of [A-Za-z0-9_-], or `*`, or a final `>`. */
export function assertSubject(s: string, allowWildcards = false): void {
  // Services publish to a handful of subjects over and over: remember the ones already checked.
  if (checkedSubjects.has(s)) return;
  const words = s.split(".");
  words.forEach((w, i) => {
    const wild = w === "*" || (w === ">" && i === words.length - 1);
    if (wild && allowWildcards) return;
    if (!/^[A-Za-z0-9_-]+$/.test(w)) {
      throw new KitError("KIT_SUBJECT_INVALID", `subject '${s}': word '${w}' is not allowed`);
    }
  });
  // Only wildcard-free subjects are remembered: a filter passes only where wildcards are allowed.
  if (!s.includes("*") && !s.includes(">")) {
    if (checkedSubjects.size >= 1024) checkedSubjects.clear();
    checkedSubjects.add(s);
  }
}

const checkedSubjects = new Set<string>();

/** Neutral subject (or filter) → MQTT topic (or filter). */
export function toMqtt(s: string): string {
  return s
    .split(".")
    .map((w) => (w === "*" ? "+" : w === ">" ? "#" : w))
    .join("/");
}

/** MQTT topic → neutral subject. */
export function fromMqtt(topic: string): string {
  return topic.split("/").join(".");
}

/** True when a neutral subject matches a neutral filter with `*` and `>` wildcards. */
export function matches(filter: string, s: string): boolean {
  const f = filter.split(".");
  const w = s.split(".");
  for (let i = 0; i < f.length; i++) {
    const fw = f[i];
    if (fw === ">") return w.length > i;
    if (i >= w.length) return false;
    if (fw !== "*" && fw !== w[i]) return false;
  }
  return f.length === w.length;
}
