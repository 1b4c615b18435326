/**
 * Seeded pseudo-random numbers, so a simulated run can be repeated exactly.
 * mulberry32 (Tommy Ettinger, 2017, public-domain 32-bit generator; from memory) and Box–Muller
 * normal deviates (Box & Muller 1958, Ann. Math. Stat. 29(2):610–611).
 */

/** A seeded source of uniform [0, 1) and standard normal numbers. */
export interface Random {
  /** Uniform on [0, 1). */
  uniform(): number;
  /** Standard normal N(0, 1). */
  normal(): number;
}

/** Creates a seeded generator; the same seed gives the same sequence. */
export function createRandom(seed: number): Random {
  let a = seed >>> 0;
  let spare: number | undefined;
  const uniform = (): number => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
  return {
    uniform,
    normal() {
      if (spare !== undefined) {
        const s = spare;
        spare = undefined;
        return s;
      }
      // 1 − u keeps the logarithm's argument in (0, 1].
      const r = Math.sqrt(-2 * Math.log(1 - uniform()));
      const th = 2 * Math.PI * uniform();
      spare = r * Math.sin(th);
      return r * Math.cos(th);
    },
  };
}
