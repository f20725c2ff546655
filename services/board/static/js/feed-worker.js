/* global EventSource, performance, self -- browser globals: this file runs in the page */
// Reads the event stream off the main thread. The heavy event is `nodes` (thousands of nodes ten
// times a second, in the hub's compact form: wire.js): it is parsed here and handed over packed,
// numbers in one transferable Float64Array, so the page's main thread spends its time drawing
// rather than parsing JSON. The rare events (state, signal, bounds) are passed on as parsed objects.
import { NodeDictionary, ROW_METRICS, metricsOf } from './wire.js';

const M = ROW_METRICS.length;

// Node keys cross to the page as small integers of this worker's own numbering: each key's text
// crosses once, the first time it is seen, and the page keeps one string per key. A structured
// clone of 5 000 fresh key strings per batch would cost the main thread the copy, and every Map
// lookup on a fresh string its hashing and a full comparison instead of a pointer check. This
// numbering lives as long as the worker, as does the page's table, so it survives reconnects; the
// hub's own numbering (wire ids) lasts one connection and is mapped onto it.
const keyIds = new Map();
const wire = new NodeDictionary();
/** wire id -> page id, for the current connection. */
let pageIdOf = [];

function pageId(wireId, newKeys) {
  let id = pageIdOf[wireId];
  if (id !== undefined) return id;
  const key = wire.keys[wireId];
  id = keyIds.get(key);
  if (id === undefined) {
    id = keyIds.size;
    keyIds.set(key, id);
    newKeys.push(key);
  }
  pageIdOf[wireId] = id;
  return id;
}

/** Packs one parsed nodes payload; `problems` collects what it had to leave out. */
function pack(payload, problems) {
  const shape = wire.learn(payload);
  if (shape) {
    problems.push(shape);
    return null;
  }
  let block;
  try {
    block = metricsOf(payload);
  } catch (err) {
    problems.push(err.message);
    return null;
  }
  const rows = payload.rows;
  const asOfTable = payload.asOf;
  const n = rows.length;
  const ids = new Int32Array(n);
  const newKeys = [];
  const asOf = new Int32Array(n);
  const positions = new Int32Array(n);
  const stale = new Uint8Array(n);
  const unpricedByWire = new Map();
  for (const u of payload.unpriced ?? []) if (Array.isArray(u)) unpricedByWire.set(u[0], u[1]);
  const unpriced = [];
  // The block already is the page's layout (nine doubles a row, NaN for null): it is handed over
  // as it is unless a row has to be left out.
  let vals = block;
  let k = 0;
  for (let r = 0; r < n; r++) {
    const row = rows[r];
    const problem = wire.rowProblem(row, r, asOfTable.length);
    if (problem) {
      problems.push(problem);
      if (vals === block) vals = block.slice();
      continue;
    }
    if (k !== r) vals.copyWithin(k * M, r * M, (r + 1) * M);
    ids[k] = pageId(row[0], newKeys);
    asOf[k] = row[1];
    positions[k] = row[2];
    stale[k] = row[3] === 1 ? 1 : 0;
    if (unpricedByWire.size > 0) {
      const u = unpricedByWire.get(row[0]);
      if (u !== undefined) unpriced.push([k, u]);
    }
    k++;
  }
  if (k < n)
    return {
      ids: ids.slice(0, k),
      newKeys,
      asOf: asOf.slice(0, k),
      asOfTable,
      vals: vals.slice(0, k * M),
      positions: positions.slice(0, k),
      stale: stale.slice(0, k),
      unpriced,
    };
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
      // Every connection opens with a state event: the hub's key numbering starts over with it.
      if (name === 'state') {
        wire.reset();
        pageIdOf = [];
      }
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
    let payload;
    try {
      payload = JSON.parse(e.data);
    } catch (err) {
      self.postMessage({ t: 'bad', name: 'nodes', error: String(err) });
      return;
    }
    const problems = [];
    const packet = pack(payload, problems);
    if (problems.length > 0)
      self.postMessage({
        t: 'bad',
        name: 'nodes',
        error: `${problems.length} row(s) left out: ${problems.slice(0, 3).join('; ')}`,
      });
    if (packet === null || packet.ids.length === 0) return;
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
