// Time enters the engine only through a Clock, so that replay never reads the wall clock and tests
// can move time by hand.
export interface Clock {
  /** Epoch milliseconds. */
  now(): number;
}

/** A clock that only moves when told to: tests, and a decay clock driven from outside. */
export class ManualClock implements Clock {
  private ms: number;
  constructor(startMs = 0) {
    this.ms = startMs;
  }
  now(): number {
    return this.ms;
  }
  set(ms: number): void {
    if (!Number.isFinite(ms)) throw new RangeError(`ManualClock.set: not a finite epoch ms: ${ms}`);
    this.ms = ms;
  }
  advance(ms: number): void {
    this.set(this.ms + ms);
  }
}

/** The wall clock, for live mode; the one place outside tests where real time is read. */
export class WallClock implements Clock {
  now(): number {
    return Date.now();
  }
}
