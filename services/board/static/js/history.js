// A node's metrics over the session, for the chart. Memory stays bounded however long the session
// runs: when a series fills up it keeps every other point and samples half as often from then on,
// so the whole session stays on the chart at a resolution that degrades gracefully.

export class Series {
  constructor(capacity = 2048, minGapMs = 250) {
    this.capacity = capacity;
    this.minGapMs = minGapMs;
    this.t = [];
    this.points = []; // exposure snapshots (only the numbers the chart needs)
    this.startedAt = null;
  }

  add(tMs, values) {
    if (this.startedAt === null) this.startedAt = tMs;
    const n = this.t.length;
    // Inside the sampling gap the newest value replaces the last point, so the line ends on the latest.
    if (n >= 2 && tMs - this.t[n - 2] < this.minGapMs && tMs >= this.t[n - 1]) {
      this.t[n - 1] = tMs;
      this.points[n - 1] = values;
      return;
    }
    if (n > 0 && tMs < this.t[n - 1]) return; // time never runs backwards on a chart
    this.t.push(tMs);
    this.points.push(values);
    if (this.t.length >= this.capacity) {
      this.t = this.t.filter((_, i) => i % 2 === 0 || i === this.t.length - 1);
      this.points = this.points.filter((_, i, all) => i % 2 === 0 || i === all.length - 1);
      this.minGapMs *= 2;
    }
  }
}

export class History {
  constructor() {
    /** @type {Map<string, Series>} */
    this.series = new Map();
  }

  track(nodeKey) {
    let s = this.series.get(nodeKey);
    if (!s) this.series.set(nodeKey, (s = new Series()));
    return s;
  }

  tracking(nodeKey) {
    return this.series.has(nodeKey);
  }

  onExposure(e) {
    const s = this.series.get(e.nodeKey);
    if (!s) return;
    const t = Date.parse(e.asOf);
    if (!Number.isFinite(t)) return;
    s.add(t, e);
  }
}
