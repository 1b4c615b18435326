/** Source of time, injected so that algorithms and tests never read the wall clock themselves. */
export interface Clock {
  /** Milliseconds since the Unix epoch. */
  now(): number;
}

/** The wall clock. */
export const systemClock: Clock = { now: () => Date.now() };

/** A clock that only moves when told to: for tests and offline replay. */
export class ManualClock implements Clock {
  constructor(private t = 0) {}
  now(): number {
    return this.t;
  }
  /** Moves the clock forward by `ms` milliseconds. */
  advance(ms: number): void {
    this.t += ms;
  }
  /** Sets the clock to `ms` milliseconds since the epoch. */
  set(ms: number): void {
    this.t = ms;
  }
}

/**
 * Accelerated time for the demo and offline runs: `scale` simulated seconds pass per wall second,
 * starting at `startMs` (simulated). Every service of one demo shares one instance, so time stamps
 * agree across the loop.
 */
export class ScaledClock implements Clock {
  private readonly wallStart: number;
  constructor(
    readonly scale: number,
    private readonly startMs: number = Date.now(),
    private readonly wall: Clock = systemClock,
  ) {
    if (!(scale > 0)) throw new RangeError(`time scale must be > 0, got ${scale}`);
    this.wallStart = wall.now();
  }
  now(): number {
    return this.startMs + (this.wall.now() - this.wallStart) * this.scale;
  }
  /** Wall milliseconds that `simMs` simulated milliseconds take. */
  wallMs(simMs: number): number {
    return simMs / this.scale;
  }
}
