// The reading side of the hub's compact `nodes` event (format: the file comment of
// services/http/src/sse.ts). One NodeDictionary per connection: the hub names each node key once,
// with a small integer, and by that integer afterwards; the dictionary starts over on every
// `state` event, which is the first event of every connection.

/** A row's fields after its id and asOf index, in wire order (sse.ts NODE_ROW_FIELDS). */
export const ROW_FIELDS = [
  'pv',
  'pnl',
  'delta',
  'cashDelta',
  'gamma',
  'cashGamma',
  'vega',
  'theta',
  'rho',
  'positions',
  'stale',
];
/** The metrics come first in a row: pv .. rho. */
export const ROW_METRICS = 9;
/** id, asOf index, then the fields. */
export const ROW_LENGTH = 2 + ROW_FIELDS.length;

const NO_UNPRICED = Object.freeze({});

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
      return `nodes.rows[${r}]: expected an array of ${ROW_LENGTH} values`;
    if (this.keys[row[0]] === undefined)
      return `nodes.rows[${r}][0]: id ${row[0]} was never named on this connection`;
    if (!Number.isInteger(row[1]) || row[1] < 0 || row[1] >= asOfCount)
      return `nodes.rows[${r}][1]: asOf index ${row[1]} outside the event's table of ${asOfCount}`;
    return '';
  }
}

/**
 * Decodes one parsed `nodes` payload into exposure-shaped objects: what the page reads of an
 * exposure, values exactly as published. Rows that cannot be read are reported in `problems` and
 * left out; the others are kept.
 */
export function decodeNodes(payload, dict) {
  const problems = [];
  const shape = dict.learn(payload);
  if (shape) return { list: [], problems: [shape] };
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
    list.push({
      type: 'exposure',
      nodeKey: dict.keys[row[0]],
      asOf: payload.asOf[row[1]],
      pv: row[2],
      pnl: row[3],
      delta: row[4],
      cashDelta: row[5],
      gamma: row[6],
      cashGamma: row[7],
      vega: row[8],
      theta: row[9],
      rho: row[10],
      positions: row[11],
      stale: row[12] === 1,
      unpriced: unpriced.get(row[0]) ?? NO_UNPRICED,
    });
  }
  return { list, problems };
}
