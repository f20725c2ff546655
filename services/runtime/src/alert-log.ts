// The recent alert log behind /alerts and the board's first paint: risk control opening the page
// after a breach must still see it, so the last N alerts and stale-feed events are kept in order.
import type { Signal } from './runner.ts';

export class AlertLog {
  private items: Signal[] = [];
  private total = 0;
  constructor(private readonly capacity = 500) {
    if (!(capacity >= 1)) throw new RangeError('AlertLog capacity must be >= 1');
  }
  add(a: Signal): void {
    this.items.push(a);
    this.total++;
    // Trim in chunks: amortized O(1) per alert instead of a shift per alert past capacity.
    if (this.items.length > this.capacity * 2) this.items = this.items.slice(-this.capacity);
  }
  /** Oldest first, at most `capacity`. */
  recent(n = this.capacity): Signal[] {
    return this.items.slice(-Math.min(n, this.capacity));
  }
  get count(): number {
    return this.total;
  }
}
