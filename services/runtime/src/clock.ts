// Live time for the embedded demo: the wall clock, optionally running `speed` times faster so that
// theta, tenor buckets and expiries visibly move. The engine, the simulator and the decay clock all
// read this one clock, so a spot's ts and the valuation time never disagree about "now".
export class ScaledClock {
  private readonly wallStart: number;
  constructor(
    private readonly startMs: number,
    readonly speed = 1,
    private readonly wall: () => number = Date.now,
  ) {
    if (!(speed > 0) || !Number.isFinite(speed)) throw new RangeError(`speed must be a finite number > 0, got ${speed}`);
    this.wallStart = wall();
  }
  now(): number {
    return this.startMs + (this.wall() - this.wallStart) * this.speed;
  }
}
