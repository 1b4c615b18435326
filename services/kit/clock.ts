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
