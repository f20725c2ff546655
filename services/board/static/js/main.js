// Wires the stream to the views. Messages are applied to the model as they arrive; the screen is
// redrawn once per animation frame, from whatever changed since the last one.
import { clockTime, percent } from './format.js';
import { History } from './history.js';
import { LimitBook } from './limits.js';
import { NodeTree } from './model.js';
import { TreeView, COLUMNS } from './tree-view.js';
import { LimitsView } from './limits-view.js';
import { SignalsView } from './signals-view.js';
import { Chart } from './chart.js';
import { initTheme } from './theme.js';

const $ = (id) => document.getElementById(id);

export function startBoard({ source } = {}) {
  initTheme($('theme-toggle'));
  const tree = new NodeTree();
  const limits = new LimitBook();
  const history = new History();
  history.track('firm');
  const treeView = new TreeView($('grid-host'), tree, { onActivate: (e) => selectNode(e) });
  const limitsView = new LimitsView($('limits-host'), limits);
  const signals = new SignalsView($('signals-host'), $('announce'));
  const chart = new Chart($('chart'), $('chart-readout'));
  const metricSelect = $('chart-metric');
  for (const c of COLUMNS.slice(1, 10)) metricSelect.append(new Option(c.title, c.id, c.id === 'pnl', c.id === 'pnl'));
  $('only-breach').addEventListener('change', (ev) => signals.setOnlyBreach(ev.target.checked));

  const counters = { nodesMsgs: 0, frames: 0, lastAsOf: '', quiet: new Map() };
  let chartKey = 'firm';
  let lastSlow = 0;

  function selectNode(entry) {
    if (entry.kind === 'group') return;
    chartKey = entry.key;
    history.track(entry.key);
    if (entry.msg) history.onExposure(entry.msg);
  }

  function applyExposure(e, now) {
    const entry = tree.apply(e, now);
    treeView.touch(e.nodeKey);
    limits.onExposure(e);
    // The firm and its desks are charted from the start; other nodes from when they are first chosen.
    if (entry.depth <= 1 && entry.parent?.kind !== 'group') history.track(e.nodeKey);
    history.onExposure(e);
    if (e.asOf > counters.lastAsOf) counters.lastAsOf = e.asOf;
  }

  function applySignal(s, announce) {
    if (s.type === 'alert') limits.onAlert(s);
    else if (s.state === 'raised') counters.quiet.set(s.underlying, s);
    else counters.quiet.delete(s.underlying);
    signals.add(s, announce);
  }

  const handlers = {
    state(st) {
      const now = performance.now();
      tree.clear();
      limits.clear();
      counters.quiet.clear();
      for (const v of st.limits ?? []) limits.setView(v);
      for (const e of st.exposures ?? []) applyExposure(e, now);
      // Signals replayed in time order rebuild the feed state; the log is rebuilt whole.
      const sorted = [...(st.alerts ?? [])].sort((a, b) => (a.ts < b.ts ? -1 : a.ts > b.ts ? 1 : 0));
      signals.reset([]);
      for (const s of sorted) applySignal(s, false);
      if (tree.byKey.size < 60) tree.expandTo(3);
      treeView.invalidate();
      document.body.dataset.ready = 'true';
    },
    nodes(list) {
      const now = performance.now();
      counters.nodesMsgs += list.length;
      for (const e of list) applyExposure(e, now);
    },
    signal(s) {
      applySignal(s, true);
    },
    bounds(list) {
      for (const v of list) limits.setView(v);
    },
  };

  const status = $('conn');
  (source ?? eventSource)(handlers, (state) => {
    status.dataset.state = state;
    status.textContent = { live: '\u25cf live', connecting: '\u25cc connecting\u2026', retrying: '\u25cc reconnecting\u2026', closed: '\u2715 disconnected' }[state] ?? state;
  });

  function frame(now) {
    counters.frames++;
    treeView.render(now);
    // The slower panels redraw four times a second: bars and chart need no more to read well.
    if (now - lastSlow > 250) {
      lastSlow = now;
      limitsView.render();
      const label = COLUMNS.find((c) => c.id === metricSelect.value)?.title ?? metricSelect.value;
      chart.draw(history.series.get(chartKey), chartKey, metricSelect.value, label);
      $('chart-node').textContent = chartKey;
      $('as-of').textContent = counters.lastAsOf ? clockTime(counters.lastAsOf) : '\u2013';
      $('node-count').textContent = String(tree.byKey.size);
      let breach = 0;
      let warning = 0;
      let top = 0;
      for (const v of limits.views.values()) {
        if (v.level === 'breach') breach++;
        else if (v.level === 'warning') warning++;
        top = Math.max(top, v.utilization);
      }
      $('breach-count').textContent = String(breach);
      $('warning-count').textContent = String(warning);
      $('top-util').textContent = limits.views.size ? percent(top) : '\u2013';
      const quiet = [...counters.quiet.keys()].sort();
      $('quiet-count').textContent = String(quiet.length);
      $('quiet-list').textContent = quiet.length ? quiet.slice(0, 8).join(', ') + (quiet.length > 8 ? ` +${quiet.length - 8}` : '') : 'none';
      document.body.classList.toggle('has-breach', breach > 0);
    }
    requestAnimationFrame(frame);
  }
  requestAnimationFrame(frame);
  return { tree, limits, history, counters };
}

/** The live stream: /events on this origin (a `?token=` on the page is passed through). */
export function eventSource(handlers, onStatus) {
  const token = new URLSearchParams(location.search).get('token');
  const url = token ? `/events?token=${encodeURIComponent(token)}` : '/events';
  onStatus('connecting');
  const es = new EventSource(url);
  es.addEventListener('open', () => onStatus('live'));
  es.addEventListener('error', () => onStatus(es.readyState === EventSource.CLOSED ? 'closed' : 'retrying'));
  for (const [name, fn] of Object.entries(handlers)) {
    es.addEventListener(name, (ev) => {
      let data;
      try {
        data = JSON.parse(ev.data);
      } catch (err) {
        console.error(`keelson board: unreadable ${name} event`, err);
        return;
      }
      fn(data);
    });
  }
  return es;
}
