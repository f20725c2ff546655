/* global atob -- present in browsers and in node */
// The reading side of the hub's compact `nodes` event (format: the file comment of
// services/http/src/sse.ts). One NodeDictionary per connection: the hub names each node key once,
// with a small integer, and by that integer afterwards; the dictionary starts over on every
// `state` event, which is the first event of every connection.

/** The doubles of each row in the event's binary block, in order (sse.ts NODE_METRICS). */
export const ROW_METRICS = ['pv', 'pnl', 'delta', 'cashDelta', 'gamma', 'cashGamma', 'vega', 'theta', 'rho'];
const M = ROW_METRICS.length;
/** A row: [id, asOfIndex, positions, stale]. */
export const ROW_LENGTH = 4;

const NO_UNPRICED = Object.freeze({});
// Typed arrays use the machine's byte order; the block is little-endian.
const LITTLE_ENDIAN = new Uint8Array(new Float64Array([1]).buffer)[7] === 0x3f;

function base64Bytes(text) {
  if (typeof Uint8Array.fromBase64 === 'function') return Uint8Array.fromBase64(text);
  const bin = atob(text);
  const out = new Uint8Array(bin.length);
  for (let i = 0; i < bin.length; i++) out[i] = bin.charCodeAt(i);
  return out;
}

/**
 * The event's metrics, nine doubles per row, NaN where the contract has null. Throws, naming the
 * field, when the block is not base64 or not the size the rows call for.
 */
export function metricsOf(payload) {
  if (typeof payload.metrics !== 'string') throw new Error('nodes.metrics: not a string');
  let bytes;
  try {
    bytes = base64Bytes(payload.metrics);
  } catch {
    throw new Error('nodes.metrics: not base64');
  }
  const want = payload.rows.length * M * 8;
  if (bytes.length !== want)
    throw new Error(`nodes.metrics: ${bytes.length} bytes for ${payload.rows.length} rows, expected ${want}`);
  if (LITTLE_ENDIAN) return new Float64Array(bytes.buffer, bytes.byteOffset, bytes.length / 8);
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.length);
  const out = new Float64Array(bytes.length / 8);
  for (let i = 0; i < out.length; i++) out[i] = view.getFloat64(i * 8, true);
  return out;
}

export class NodeDictionary {
  constructor() {
    /** @type {(string | undefined)[]} wire id -> node key */
    this.keys = [];
  }

  reset() {
    this.keys = [];
  }

  /**
   * Learns an event's new keys. Returns a description of what was wrong with the event's shape,
   * or '' when it is well formed; the caller skips only what it cannot read.
   */
  learn(payload) {
    if (payload === null || typeof payload !== 'object') return 'nodes: not an object';
    if (!Array.isArray(payload.rows)) return 'nodes.rows: not an array';
    if (!Array.isArray(payload.asOf)) return 'nodes.asOf: not an array';
    const keys = payload.keys ?? [];
    if (!Array.isArray(keys)) return 'nodes.keys: not an array';
    for (let i = 0; i < keys.length; i++) {
      const pair = keys[i];
      if (!Array.isArray(pair) || !Number.isInteger(pair[0]) || pair[0] < 0 || typeof pair[1] !== 'string')
        return `nodes.keys[${i}]: expected [id, "nodeKey"]`;
      this.keys[pair[0]] = pair[1];
    }
    return '';
  }

  /** Why a row cannot be read ('' when it can), naming the offending field. */
  rowProblem(row, r, asOfCount) {
    if (!Array.isArray(row) || row.length !== ROW_LENGTH)
      return `nodes.rows[${r}]: expected [id, asOfIndex, positions, stale]`;
    if (this.keys[row[0]] === undefined)
      return `nodes.rows[${r}][0]: id ${row[0]} was never named on this connection`;
    if (!Number.isInteger(row[1]) || row[1] < 0 || row[1] >= asOfCount)
      return `nodes.rows[${r}][1]: asOf index ${row[1]} outside the event's table of ${asOfCount}`;
    return '';
  }
}

const orNull = (v) => (Number.isNaN(v) ? null : v);

/**
 * Decodes one parsed `nodes` payload into exposure-shaped objects: what the page reads of an
 * exposure, values exactly as published. Rows that cannot be read are reported in `problems` and
 * left out; the others are kept.
 */
export function decodeNodes(payload, dict) {
  const problems = [];
  const shape = dict.learn(payload);
  if (shape) return { list: [], problems: [shape] };
  let vals;
  try {
    vals = metricsOf(payload);
  } catch (err) {
    return { list: [], problems: [err.message] };
  }
  const unpriced = new Map();
  for (const u of payload.unpriced ?? []) if (Array.isArray(u)) unpriced.set(u[0], u[1]);
  const list = [];
  const rows = payload.rows;
  for (let r = 0; r < rows.length; r++) {
    const row = rows[r];
    const problem = dict.rowProblem(row, r, payload.asOf.length);
    if (problem) {
      problems.push(problem);
      continue;
    }
    const o = r * M;
    list.push({
      type: 'exposure',
      nodeKey: dict.keys[row[0]],
      asOf: payload.asOf[row[1]],
      pv: vals[o],
      pnl: vals[o + 1],
      delta: orNull(vals[o + 2]),
      cashDelta: vals[o + 3],
      gamma: orNull(vals[o + 4]),
      cashGamma: vals[o + 5],
      vega: vals[o + 6],
      theta: vals[o + 7],
      rho: vals[o + 8],
      positions: row[2],
      stale: row[3] === 1,
      unpriced: unpriced.get(row[0]) ?? NO_UNPRICED,
    });
  }
  return { list, problems };
}
