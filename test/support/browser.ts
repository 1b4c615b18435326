/**
 * Debian's Chromium driven by playwright-core, never a downloaded browser; the flags keep it off
 * the network (this machine's closed network refuses Chromium's background connections).
 */
import { existsSync, mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { type BrowserContext, chromium } from "playwright-core";

export const CHROMIUM = "/usr/bin/chromium";

/** A headless Chromium with a fresh profile; close() also removes the profile. */
export async function launchChromium(): Promise<{ context: BrowserContext; close(): Promise<void> }> {
  if (!existsSync(CHROMIUM)) throw new Error(`${CHROMIUM} is missing: apt-get install chromium`);
  const profile = mkdtempSync(join(tmpdir(), "sf-chromium-"));
  const context = await chromium.launchPersistentContext(profile, {
    executablePath: CHROMIUM,
    headless: true,
    viewport: { width: 1440, height: 1000 },
    args: [
      "--headless",
      "--no-sandbox",
      "--disable-gpu",
      "--disable-quic",
      "--no-first-run",
      "--disable-background-networking",
      "--disable-component-update",
      "--disable-sync",
    ],
  });
  return {
    context,
    close: async () => {
      await context.close();
      rmSync(profile, { recursive: true, force: true });
    },
  };
}
