/* global EventSource, performance, self -- browser globals: this file runs in the page */
// Reads the event stream off the main thread. The heavy event is `nodes` (thousands of exposures
// ten times a second): it is parsed here and handed over packed, numbers in one transferable
// Float64Array, so the page's main thread spends its time drawing rather than parsing JSON.
// The rare events (state, signal, bounds) are passed on as parsed objects.

const METRICS = ['pv', 'pnl', 'delta', 'cashDelta', 'gamma', 'cashGamma', 'vega', 'theta', 'rho'];
const M = METRICS.length;

// Node keys travel as small integers: each key's text crosses to the page once, the first time
// it is seen, and the page keeps one string per key. A structured clone of 5 000 fresh key strings
// per batch would cost the main thread the copy, and every Map lookup on a fresh string its hashing
// and a full comparison instead of a pointer check. The numbering lives as long as this worker,
// as does the page's table, so it survives reconnects.
const keyIds = new Map();

function pack(list) {
  const n = list.length;
  const ids = new Int32Array(n);
  const newKeys = [];
  // A batch carries a handful of distinct asOf stamps: each is sent once, nodes point at it.
  const asOfTable = [];
  const asOfSeen = new Map();
  const asOf = new Int32Array(n);
  const vals = new Float64Array(n * M);
  const positions = new Int32Array(n);
  const stale = new Uint8Array(n);
  const unpriced = [];
  for (let i = 0; i < n; i++) {
    const e = list[i];
    let id = keyIds.get(e.nodeKey);
    if (id === undefined) {
      id = keyIds.size;
      keyIds.set(e.nodeKey, id);
      newKeys.push(e.nodeKey);
    }
    ids[i] = id;
    let a = asOfSeen.get(e.asOf);
    if (a === undefined) {
      a = asOfTable.length;
      asOfSeen.set(e.asOf, a);
      asOfTable.push(e.asOf);
    }
    asOf[i] = a;
    for (let m = 0; m < M; m++) {
      const v = e[METRICS[m]];
      // null (delta and gamma where no single underlying) travels as NaN and comes back as null.
      vals[i * M + m] = typeof v === 'number' ? v : NaN;
    }
    positions[i] = e.positions;
    stale[i] = e.stale ? 1 : 0;
    if (e.unpriced && Object.keys(e.unpriced).length > 0) unpriced.push([i, e.unpriced]);
  }
  return { ids, newKeys, asOf, asOfTable, vals, positions, stale, unpriced };
}

let source = null;

self.onmessage = (ev) => {
  const { url } = ev.data;
  if (source) source.close();
  const es = new EventSource(url);
  source = es;
  self.postMessage({ t: 'status', state: 'connecting' });
  es.addEventListener('open', () => self.postMessage({ t: 'status', state: 'live' }));
  es.addEventListener('error', () =>
    self.postMessage({ t: 'status', state: es.readyState === EventSource.CLOSED ? 'closed' : 'retrying' }),
  );
  for (const name of ['state', 'signal', 'bounds']) {
    es.addEventListener(name, (e) => {
      let data;
      try {
        data = JSON.parse(e.data);
      } catch (err) {
        self.postMessage({ t: 'bad', name, error: String(err) });
        return;
      }
      self.postMessage({ t: name, data });
    });
  }
  es.addEventListener('nodes', (e) => {
    const t0 = performance.now();
    let list;
    try {
      list = JSON.parse(e.data);
    } catch (err) {
      self.postMessage({ t: 'bad', name: 'nodes', error: String(err) });
      return;
    }
    const packet = pack(list);
    packet.t = 'nodes';
    packet.workerMs = performance.now() - t0;
    self.postMessage(packet, [
      packet.ids.buffer,
      packet.asOf.buffer,
      packet.vals.buffer,
      packet.positions.buffer,
      packet.stale.buffer,
    ]);
  });
};
