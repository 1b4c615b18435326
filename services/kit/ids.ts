import { randomFillSync } from "node:crypto";

const ALPHABET = "0123456789ABCDEFGHJKMNPQRSTVWXYZ";

// One getrandom call per 256 ids instead of one per id: ids are made on the hot path of every event.
const POOL = Buffer.alloc(16 * 256);
let poolOffset = POOL.length;

/**
 * A time-ordered id (ULID layout: 48-bit milliseconds + 80 random bits, Crockford base32), so ids
 * sort by creation time in the audit store. Time comes from the caller's clock.
 */
export function newId(nowMs: number): string {
  let t = Math.floor(nowMs);
  let time = "";
  for (let i = 0; i < 10; i++) {
    time = ALPHABET[t % 32] + time;
    t = Math.floor(t / 32);
  }
  if (poolOffset + 16 > POOL.length) {
    randomFillSync(POOL);
    poolOffset = 0;
  }
  let rand = "";
  for (let i = 0; i < 16; i++) rand += ALPHABET[(POOL[poolOffset + i] ?? 0) & 31];
  poolOffset += 16;
  return time + rand;
}
