// Which spot feeds have gone quiet: a min-heap of deadlines (last tick + threshold), at most one
// entry per feed, checked lazily, so that moving time costs O(log n) per feed that crosses its
// deadline and nothing for the others.
export interface FeedEntry {
  lastTickMs: number;
  stale: boolean;
  inHeap: boolean;
}

export class DeadlineHeap<T extends FeedEntry> {
  private readonly keys: number[] = [];
  private readonly items: T[] = [];

  get size(): number {
    return this.items.length;
  }

  push(deadline: number, item: T): void {
    item.inHeap = true;
    const keys = this.keys;
    const items = this.items;
    let i = items.length;
    keys.push(deadline);
    items.push(item);
    while (i > 0) {
      const p = (i - 1) >> 1;
      if ((keys[p] as number) <= deadline) break;
      keys[i] = keys[p] as number;
      items[i] = items[p] as T;
      i = p;
    }
    keys[i] = deadline;
    items[i] = item;
  }

  peekKey(): number {
    return this.keys.length > 0 ? (this.keys[0] as number) : Number.POSITIVE_INFINITY;
  }

  pop(): T | undefined {
    const keys = this.keys;
    const items = this.items;
    if (items.length === 0) return undefined;
    const top = items[0] as T;
    const lastK = keys.pop() as number;
    const lastI = items.pop() as T;
    const n = items.length;
    if (n > 0) {
      let i = 0;
      for (;;) {
        const l = 2 * i + 1;
        if (l >= n) break;
        const r = l + 1;
        const c = r < n && (keys[r] as number) < (keys[l] as number) ? r : l;
        if ((keys[c] as number) >= lastK) break;
        keys[i] = keys[c] as number;
        items[i] = items[c] as T;
        i = c;
      }
      keys[i] = lastK;
      items[i] = lastI;
    }
    top.inHeap = false;
    return top;
  }
}
