/* global document, getComputedStyle, window -- browser globals: this file runs in the page */
// A line of one node's metric over the session, drawn on a canvas (no chart library). The canvas
// carries a text summary for screen readers; the readout under it repeats the latest figure.
import { clockTime, compact, precise } from './format.js';

function cssVar(name) {
  return getComputedStyle(document.documentElement).getPropertyValue(name).trim();
}

export class Chart {
  constructor(canvas, readout) {
    this.canvas = canvas;
    this.readout = readout;
    this.drawnKey = '';
  }

  /** @param {import('./history.js').Series | undefined} series */
  draw(series, nodeKey, metric, label) {
    const c = this.canvas;
    const dpr = window.devicePixelRatio || 1;
    const w = c.clientWidth;
    const h = c.clientHeight;
    if (w === 0 || h === 0) return;
    const n = series ? series.t.length : 0;
    const key = `${nodeKey}|${metric}|${n}|${n ? series.t[n - 1] : 0}|${w}|${h}|${document.documentElement.dataset.theme ?? ''}|${this.schemeDark()}`;
    if (key === this.drawnKey) return;
    this.drawnKey = key;
    if (c.width !== Math.round(w * dpr) || c.height !== Math.round(h * dpr)) {
      c.width = Math.round(w * dpr);
      c.height = Math.round(h * dpr);
    }
    const g = c.getContext('2d');
    g.setTransform(dpr, 0, 0, dpr, 0, 0);
    g.clearRect(0, 0, w, h);
    const ink = cssVar('--ink-2') || '#555';
    const line = cssVar('--accent') || '#0072b2';
    const grid = cssVar('--rule') || '#ddd';
    g.font = '11px system-ui, sans-serif';
    g.fillStyle = ink;

    const xs = [];
    const ys = [];
    if (series) {
      for (let i = 0; i < n; i++) {
        const v = series.points[i][metric];
        if (typeof v === 'number' && Number.isFinite(v)) {
          xs.push(series.t[i]);
          ys.push(v);
        }
      }
    }
    if (ys.length === 0) {
      g.fillText(
        metric === 'delta' || metric === 'gamma'
          ? `${label}: not defined on this node (no single underlying)`
          : `${label}: no values yet for ${nodeKey}`,
        12,
        h / 2,
      );
      this.canvas.setAttribute('aria-label', `Chart of ${label} for ${nodeKey}: no data yet`);
      this.readout.textContent = '';
      return;
    }
    const padL = 56;
    const padR = 12;
    const padT = 10;
    const padB = 22;
    let lo = 0;
    let hi = 0;
    for (const v of ys) {
      if (v < lo) lo = v;
      if (v > hi) hi = v;
    }
    let low = Infinity;
    let high = -Infinity;
    for (const v of ys) {
      if (v < low) low = v;
      if (v > high) high = v;
    }
    if (hi === lo) {
      hi += 1;
      lo -= 1;
    }
    const t0 = xs[0];
    const t1 = Math.max(xs[xs.length - 1], t0 + 1);
    const X = (t) => padL + ((t - t0) / (t1 - t0)) * (w - padL - padR);
    const Y = (v) => padT + (1 - (v - lo) / (hi - lo)) * (h - padT - padB);

    g.strokeStyle = grid;
    g.lineWidth = 1;
    g.setLineDash([]);
    for (const v of [lo, hi]) {
      g.beginPath();
      g.moveTo(padL, Y(v));
      g.lineTo(w - padR, Y(v));
      g.stroke();
      g.fillText(compact(v), 4, Y(v) + 4);
    }
    // The zero line dashed: above it long, below it short, whatever the colours look like.
    g.setLineDash([4, 3]);
    g.strokeStyle = ink;
    g.beginPath();
    g.moveTo(padL, Y(0));
    g.lineTo(w - padR, Y(0));
    g.stroke();
    g.setLineDash([]);
    if (lo < 0 && hi > 0) g.fillText('0', 4, Y(0) + 4);

    g.strokeStyle = line;
    g.lineWidth = 2;
    g.beginPath();
    for (let i = 0; i < xs.length; i++) {
      const x = X(xs[i]);
      const y = Y(ys[i]);
      if (i === 0) g.moveTo(x, y);
      else g.lineTo(x, y);
    }
    g.stroke();
    const lastX = X(xs[xs.length - 1]);
    const lastY = Y(ys[ys.length - 1]);
    g.fillStyle = line;
    g.fillRect(lastX - 3, lastY - 3, 6, 6);

    g.fillStyle = ink;
    const start = clockTime(new Date(t0).toISOString());
    const end = clockTime(new Date(xs[xs.length - 1]).toISOString());
    g.fillText(start, padL, h - 6);
    const endW = g.measureText(end).width;
    g.fillText(end, w - padR - endW, h - 6);

    const last = ys[ys.length - 1];
    const since = `since ${start}`;
    this.readout.textContent = `${label} of ${nodeKey}: ${precise(last)} \u00b7 low ${compact(low)} \u00b7 high ${compact(high)} \u00b7 ${since}`;
    this.canvas.setAttribute(
      'aria-label',
      `Chart of ${label} for ${nodeKey} from ${start} to ${end}: latest ${precise(last)}, lowest ${precise(low)}, highest ${precise(high)}`,
    );
  }

  schemeDark() {
    return window.matchMedia?.('(prefers-color-scheme: dark)').matches ? 1 : 0;
  }
}
