/* global EventSource, performance, self -- browser globals: this file runs in the page */
// Reads the event stream off the main thread. The heavy event is `nodes` (thousands of exposures
// ten times a second): it is parsed here and handed over packed, numbers in one transferable
// Float64Array, so the page's main thread spends its time drawing rather than parsing JSON.
// The rare events (state, signal, bounds) are passed on as parsed objects.

const METRICS = ['pv', 'pnl', 'delta', 'cashDelta', 'gamma', 'cashGamma', 'vega', 'theta', 'rho'];
const M = METRICS.length;

function pack(list) {
  const n = list.length;
  const keys = new Array(n);
  const asOf = new Array(n);
  const vals = new Float64Array(n * M);
  const positions = new Int32Array(n);
  const stale = new Uint8Array(n);
  const unpriced = [];
  for (let i = 0; i < n; i++) {
    const e = list[i];
    keys[i] = e.nodeKey;
    asOf[i] = e.asOf;
    for (let m = 0; m < M; m++) {
      const v = e[METRICS[m]];
      // null (delta and gamma where no single underlying) travels as NaN and comes back as null.
      vals[i * M + m] = typeof v === 'number' ? v : NaN;
    }
    positions[i] = e.positions;
    stale[i] = e.stale ? 1 : 0;
    if (e.unpriced && Object.keys(e.unpriced).length > 0) unpriced.push([i, e.unpriced]);
  }
  return { keys, asOf, vals, positions, stale, unpriced };
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
    self.postMessage(packet, [packet.vals.buffer, packet.positions.buffer, packet.stale.buffer]);
  });
};
