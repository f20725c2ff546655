/* global EventSource, Option, URL, URLSearchParams, Worker, document, location, performance, requestAnimationFrame -- browser globals: this file runs in the page */
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
import { NodeDictionary, ROW_METRICS, decodeNodes } from './wire.js';

const $ = (id) => document.getElementById(id);

/** Writes text only when it differs, so an unchanged header costs no layout. */
function setText(id, text) {
  const node = document.getElementById(id);
  if (node.textContent !== text) node.textContent = text;
}

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
  for (const c of COLUMNS.slice(1, 10))
    metricSelect.append(new Option(c.title, c.id, c.id === 'pnl', c.id === 'pnl'));
  $('only-breach').addEventListener('change', (ev) => signals.setOnlyBreach(ev.target.checked));

  // Main-thread time spent per stage, cumulative ms: read by the frame-time benchmark.
  const counters = {
    nodesMsgs: 0,
    frames: 0,
    lastAsOf: '',
    quiet: new Map(),
    parseMs: 0,
    applyMs: 0,
    renderMs: 0,
  };
  let chartKey = 'firm';
  let everShown = false;
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
      // A small book opens down to its underlyings; a large one to its books, the user opens the rest.
      if (!everShown) tree.expandTo(tree.byKey.size < 60 ? 3 : 2);
      everShown = true;
      treeView.invalidate();
      document.body.dataset.ready = 'true';
    },
    nodes(list) {
      const now = performance.now();
      counters.nodesMsgs += list.length;
      for (const e of list) applyExposure(e, now);
      counters.applyMs += performance.now() - now;
    },
    signal(s) {
      applySignal(s, true);
    },
    bounds(list) {
      for (const v of list) limits.setView(v);
    },
  };

  const status = $('conn');
  (source ?? eventSource)(handlers, counters, (state) => {
    status.dataset.state = state;
    status.textContent =
      {
        live: '\u25cf live',
        connecting: '\u25cc connecting\u2026',
        retrying: '\u25cc reconnecting\u2026',
        closed: '\u2715 disconnected',
      }[state] ?? state;
  });

  function frame(now) {
    counters.frames++;
    const started = performance.now();
    treeView.render(now);
    // The slower panels redraw twice a second: bars and chart need no more to read well.
    if (now - lastSlow > 500) {
      lastSlow = now;
      limitsView.render();
      const label = COLUMNS.find((c) => c.id === metricSelect.value)?.title ?? metricSelect.value;
      chart.draw(history.series.get(chartKey), chartKey, metricSelect.value, label);
      setText('chart-node', chartKey);
      setText('as-of', counters.lastAsOf ? clockTime(counters.lastAsOf) : '\u2013');
      setText('node-count', String(tree.byKey.size));
      let breach = 0;
      let warning = 0;
      let top = 0;
      for (const v of limits.views.values()) {
        if (v.level === 'breach') breach++;
        else if (v.level === 'warning') warning++;
        top = Math.max(top, v.utilization);
      }
      setText('breach-count', String(breach));
      setText('warning-count', String(warning));
      setText('top-util', limits.views.size ? percent(top) : '\u2013');
      const quiet = [...counters.quiet.keys()].sort();
      setText('quiet-count', String(quiet.length));
      setText(
        'quiet-list',
        quiet.length
          ? quiet.slice(0, 8).join(', ') + (quiet.length > 8 ? ` +${quiet.length - 8}` : '')
          : 'none',
      );
      document.body.classList.toggle('has-breach', breach > 0);
    }
    counters.renderMs += performance.now() - started;
    requestAnimationFrame(frame);
  }
  requestAnimationFrame(frame);
  // `ingest` lets a benchmark feed the page without a server: the same handlers the stream calls.
  return { tree, limits, history, counters, ingest: handlers };
}

/**
 * EventSource cannot send an Authorization header, so a guarded server takes the bearer token as
 * the `access_token` query parameter (RFC 6750 section 2.3): open the page as /?access_token=...
 */
function streamUrl() {
  const q = new URLSearchParams(location.search);
  const token = q.get('access_token') ?? q.get('token');
  return token ? `/events?access_token=${encodeURIComponent(token)}` : '/events';
}

const NO_UNPRICED = Object.freeze({});

/**
 * Rebuilds exposure-shaped objects from the worker's packed batch (only what the page reads).
 * `keyTable` is the page's side of the worker's key numbering (feed-worker.js keyIds): the batch's
 * first-seen keys are appended to it, in the worker's order.
 */
export function unpack(p, keyTable, intern = (k) => k) {
  for (const k of p.newKeys) keyTable.push(intern(k));
  const n = p.ids.length;
  // The worker hands over the event's metrics block: nine doubles a row (wire.js ROW_METRICS).
  const M = ROW_METRICS.length;
  const out = new Array(n);
  const unpriced = new Map(p.unpriced);
  for (let i = 0; i < n; i++) {
    const o = i * M;
    // One object literal with a fixed shape: property reads on these stay monomorphic and fast.
    const e = {
      type: 'exposure',
      nodeKey: keyTable[p.ids[i]],
      asOf: p.asOfTable[p.asOf[i]],
      pv: p.vals[o],
      pnl: p.vals[o + 1],
      delta: Number.isNaN(p.vals[o + 2]) ? null : p.vals[o + 2],
      cashDelta: p.vals[o + 3],
      gamma: Number.isNaN(p.vals[o + 4]) ? null : p.vals[o + 4],
      cashGamma: p.vals[o + 5],
      vega: p.vals[o + 6],
      theta: p.vals[o + 7],
      rho: p.vals[o + 8],
      positions: p.positions[i],
      stale: p.stale[i] === 1,
      unpriced: unpriced.get(i) ?? NO_UNPRICED,
    };
    out[i] = e;
  }
  return out;
}

/**
 * The live stream: /events on this origin (the page's access token passed through), read in a
 * worker where the browser has them, on the main thread otherwise.
 */
export function eventSource(handlers, counters, onStatus) {
  if (typeof Worker === 'function') {
    const worker = new Worker(new URL('./feed-worker.js', import.meta.url), { type: 'module' });
    // One string object per node key for the page's lifetime, whichever event named the node first:
    // the model's Maps then match keys by pointer rather than by hashing and comparing text.
    const canonical = new Map();
    const intern = (k) => {
      const c = canonical.get(k);
      if (c !== undefined) return c;
      canonical.set(k, k);
      return k;
    };
    const keyTable = [];
    worker.onmessage = (ev) => {
      const msg = ev.data;
      if (msg.t === 'status') onStatus(msg.state);
      else if (msg.t === 'nodes') {
        const t0 = performance.now();
        const list = unpack(msg, keyTable, intern);
        counters.parseMs += performance.now() - t0;
        counters.workerMs = (counters.workerMs ?? 0) + msg.workerMs;
        handlers.nodes(list);
      } else if (msg.t === 'bad') console.error(`keelson board: unreadable ${msg.name} event: ${msg.error}`);
      else {
        if (msg.t === 'state') for (const e of msg.data?.exposures ?? []) e.nodeKey = intern(e.nodeKey);
        handlers[msg.t]?.(msg.data);
      }
    };
    worker.onerror = (err) => console.error('keelson board: feed worker failed', err.message);
    worker.postMessage({ url: new URL(streamUrl(), location.href).href });
    return worker;
  }
  onStatus('connecting');
  const es = new EventSource(streamUrl());
  es.addEventListener('open', () => onStatus('live'));
  es.addEventListener('error', () => onStatus(es.readyState === EventSource.CLOSED ? 'closed' : 'retrying'));
  const dict = new NodeDictionary();
  for (const [name, fn] of Object.entries(handlers)) {
    es.addEventListener(name, (ev) => {
      // Every connection opens with a state event: the hub's key numbering starts over with it.
      if (name === 'state') dict.reset();
      let data;
      const t0 = performance.now();
      try {
        data = JSON.parse(ev.data);
        if (name === 'nodes') {
          const { list, problems } = decodeNodes(data, dict);
          if (problems.length)
            console.error(
              `keelson board: ${problems.length} node row(s) left out: ${problems.slice(0, 3).join('; ')}`,
            );
          data = list;
        }
        counters.parseMs += performance.now() - t0;
      } catch (err) {
        console.error(`keelson board: unreadable ${name} event`, err);
        return;
      }
      fn(data);
    });
  }
  return es;
}
