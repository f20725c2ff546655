/* global document -- browser globals: this file runs in the page */
// The alert log: limit transitions and feed silences, newest first. Breaches are also read out
// at once through an assertive live region, so a screen-reader user hears them the moment they land.
import { clockTime, compact, percent } from './format.js';

const MAX_ITEMS = 400;
const SEVERITY_ICON = { breach: '\u25c6', warning: '\u25b3', ok: '\u25cb' };

function keyOf(s) {
  return s.type === 'alert' ? `a|${s.alertId}|${s.state}|${s.ts}` : `s|${s.underlying}|${s.state}|${s.ts}`;
}

function el(tag, cls, text) {
  const e = document.createElement(tag);
  if (cls) e.className = cls;
  if (text !== undefined) e.textContent = text;
  return e;
}

export class SignalsView {
  constructor(host, announcer) {
    this.list = el('ol', 'signals');
    this.list.setAttribute('role', 'log');
    this.list.setAttribute('aria-live', 'polite');
    this.list.setAttribute('aria-relevant', 'additions');
    this.list.setAttribute('aria-label', 'Alerts, newest first');
    this.empty = el('p', 'empty-note', 'No alerts this session.');
    host.append(this.empty, this.list);
    this.announcer = announcer;
    this.seen = new Set();
    this.onlyBreach = false;
  }

  setOnlyBreach(on) {
    this.onlyBreach = on;
    this.list.classList.toggle('only-breach', on);
  }

  /** Replaces the log (a fresh state on connect). */
  reset(signals) {
    this.list.textContent = '';
    this.seen.clear();
    const sorted = [...signals].sort((a, b) => (a.ts < b.ts ? -1 : a.ts > b.ts ? 1 : 0));
    for (const s of sorted) this.add(s, false);
  }

  add(s, announce = true) {
    const k = keyOf(s);
    if (this.seen.has(k)) return;
    this.seen.add(k);
    const li = s.type === 'alert' ? this.#alert(s) : this.#feed(s);
    this.list.prepend(li);
    this.empty.hidden = true;
    while (this.list.childElementCount > MAX_ITEMS) {
      const last = this.list.lastElementChild;
      this.seen.delete(last.dataset.key);
      last.remove();
    }
    li.dataset.key = k;
    if (announce && s.type === 'alert' && s.severity === 'breach') {
      this.announcer.textContent = `Breach ${s.state}: ${s.limitId}, ${s.metric} at ${percent(s.utilization)} of its limit.`;
    }
  }

  #alert(a) {
    const li = el('li', `sig sig-alert sev-${a.severity} st-${a.state}`);
    li.dataset.severity = a.severity;
    li.dataset.state = a.state;
    const icon = el('span', 'sig-icon', SEVERITY_ICON[a.severity] ?? '\u25cb');
    icon.setAttribute('aria-hidden', 'true');
    const head = el('div', 'sig-head');
    head.append(
      icon,
      el('span', 'sig-state', a.state),
      el('span', 'sig-sev', a.severity === 'ok' ? 'back within' : a.severity),
    );
    const time = el('time', 'sig-time', clockTime(a.ts));
    time.dateTime = a.ts;
    head.append(time);
    const body = el('div', 'sig-body');
    body.append(el('span', 'sig-limit', a.limitId), el('span', 'sig-node', a.nodeKey));
    const figures = el(
      'div',
      'sig-figures',
      `${a.metric} ${compact(a.value)} of ${compact(a.bound)} \u00b7 ${percent(a.utilization)} \u00b7 was ${a.previous}`,
    );
    li.append(head, body, figures);
    return li;
  }

  #feed(f) {
    const quiet = f.state === 'raised';
    const li = el('li', `sig sig-feed ${quiet ? 'feed-quiet' : 'feed-back'}`);
    li.dataset.state = f.state;
    li.dataset.underlying = f.underlying;
    const icon = el('span', 'sig-icon', quiet ? '\u25d4' : '\u25cf');
    icon.setAttribute('aria-hidden', 'true');
    const head = el('div', 'sig-head');
    const time = el('time', 'sig-time', clockTime(f.ts));
    time.dateTime = f.ts;
    head.append(
      icon,
      el('span', 'sig-state', quiet ? 'feed quiet' : 'feed resumed'),
      el('span', 'sig-sev', f.underlying),
      time,
    );
    const figures = el('div', 'sig-figures', `last tick ${clockTime(f.lastTick)}`);
    li.append(head, figures);
    return li;
  }
}
