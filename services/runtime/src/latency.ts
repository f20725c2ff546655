// The last N latency samples, for the live summary and the benchmark's percentiles. Prometheus
// gets the histogram; people watching a terminal want "p99 right now", which a fixed window gives.
export class LatencyWindow {
  private readonly buf: Float64Array;
  private size = 0;
  private next = 0;
  private total = 0;

  constructor(capacity = 16_384) {
    if (!(capacity >= 1)) throw new RangeError('LatencyWindow capacity must be >= 1');
    this.buf = new Float64Array(capacity);
  }

  record(ms: number): void {
    this.buf[this.next] = ms;
    this.next = (this.next + 1) % this.buf.length;
    if (this.size < this.buf.length) this.size++;
    this.total++;
  }

  get count(): number {
    return this.size;
  }

  /** Samples ever recorded, including those that left the window. */
  get recorded(): number {
    return this.total;
  }

  /** Nearest-rank percentiles (q in [0, 1]) of the samples in the window; NaN when empty. */
  percentiles(qs: readonly number[]): number[] {
    if (this.size === 0) return qs.map(() => Number.NaN);
    const sorted = this.buf.slice(0, this.size).sort();
    return qs.map((q) => sorted[Math.min(this.size - 1, Math.max(0, Math.ceil(q * this.size) - 1))]!);
  }

  reset(): void {
    this.size = 0;
    this.next = 0;
  }
}
