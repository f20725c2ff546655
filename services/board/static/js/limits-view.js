/* global document -- browser globals: this file runs in the page */
// Limit bars: each limit's utilization against its warning level and its bound, highest first.
// The level is spelled out and drawn with its own icon and fill pattern, never by colour alone.
import { compact, percent } from './format.js';

const SCALE = 1.25; // the bar's right end: 125% of the limit, so a breach visibly overshoots
const LEVEL = {
  ok: { icon: '\u25cb', word: 'within' },
  warning: { icon: '\u25b3', word: 'warning' },
  breach: { icon: '\u25c6', word: 'breach' },
};

function el(tag, cls, text) {
  const e = document.createElement(tag);
  if (cls) e.className = cls;
  if (text !== undefined) e.textContent = text;
  return e;
}

export class LimitsView {
  constructor(host, book, { maxShown = 40 } = {}) {
    this.book = book;
    this.maxShown = maxShown;
    this.seen = -1;
    this.list = el('ol', 'limits');
    this.more = el('p', 'limits-more');
    this.empty = el(
      'p',
      'empty-note',
      'No limits known yet: they appear with the engine\u2019s limit list or the first alert.',
    );
    host.append(this.empty, this.list, this.more);
    this.items = [];
  }

  #item() {
    const li = el('li', 'limit');
    const head = el('div', 'limit-head');
    const lvl = el('span', 'lvl');
    const id = el('span', 'lid');
    const node = el('span', 'lnode');
    head.append(lvl, id);
    const bar = el('div', 'bar');
    bar.setAttribute('role', 'meter');
    bar.setAttribute('aria-valuemin', '0');
    bar.setAttribute('aria-valuemax', String(SCALE * 100));
    const fill = el('div', 'fill');
    const warn = el('div', 'mark mark-warn');
    const limit = el('div', 'mark mark-limit');
    limit.style.left = `${(1 / SCALE) * 100}%`;
    bar.append(fill, warn, limit);
    const foot = el('div', 'limit-foot');
    li.append(head, node, bar, foot);
    this.list.append(li);
    const item = { li, lvl, id, node, bar, fill, warn, foot, key: '' };
    this.items.push(item);
    return item;
  }

  render() {
    if (this.seen === this.book.version) return;
    this.seen = this.book.version;
    const ranked = this.book.ranked();
    this.empty.hidden = ranked.length > 0;
    const shown = ranked.slice(0, this.maxShown);
    while (this.items.length < shown.length) this.#item();
    this.items.forEach((item, i) => {
      const v = shown[i];
      item.li.hidden = !v;
      if (!v) return;
      const level = LEVEL[v.level] ?? LEVEL.ok;
      const u = Math.max(0, v.utilization);
      const key = `${v.limitId}|${v.level}|${u.toFixed(4)}|${v.warnAt}|${v.assumed}`;
      if (item.key === key) return;
      item.key = key;
      item.li.dataset.level = v.level;
      item.li.dataset.limit = v.limitId;
      item.lvl.textContent = `${level.icon} ${level.word}`;
      item.id.textContent = v.limitId;
      item.node.textContent = `${v.nodeKey} \u00b7 ${v.metric}`;
      item.fill.style.width = `${(Math.min(u, SCALE) / SCALE) * 100}%`;
      item.fill.classList.toggle('over-scale', u > SCALE);
      item.warn.style.left = `${(v.warnAt / SCALE) * 100}%`;
      const bound = v.value < 0 ? v.min : v.max;
      item.bar.setAttribute('aria-valuenow', (u * 100).toFixed(1));
      item.bar.setAttribute('aria-valuetext', `${percent(u)} of the limit, ${level.word}`);
      item.bar.setAttribute('aria-label', `${v.limitId} utilization`);
      const bounds = bound === undefined ? 'no bound on this side' : `of ${compact(bound)}`;
      item.foot.textContent = `${compact(v.value)} ${bounds} \u00b7 ${percent(u)} \u00b7 warns at ${percent(v.warnAt)}${v.assumed ? ' (assumed)' : ''}`;
      item.foot.title = v.assumed
        ? 'Bounds and warning level inferred from alerts: the engine has not sent this limit\u2019s definition.'
        : `max ${v.max ?? 'none'}, min ${v.min ?? 'none'}, hysteresis ${percent(v.hysteresis)}`;
    });
    const hidden = ranked.length - shown.length;
    this.more.textContent =
      hidden > 0
        ? `${hidden} more limits, all at or below ${percent(Math.max(0, ranked[this.maxShown]?.utilization ?? 0))}`
        : '';
  }
}
