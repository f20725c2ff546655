// The node tree behind the grid: firm > desk > book > underlying (> tenor), built from exposure
// messages as they arrive. Nodes that cut across that chain (a desk's underlyings across its books,
// the firm's tenor buckets, ...) hang under a "by <dimension>" group on the nearest natural parent,
// so every node the engine keeps has one place and the chain stays readable.

export const DIMS = ['desk', 'book', 'underlying', 'tenor'];
export const TENOR_ORDER = ['0-30d', '31-90d', '91-180d', '181-365d', '366d+'];
export const METRIC_COLUMNS = [
  'pv',
  'pnl',
  'delta',
  'cashDelta',
  'gamma',
  'cashGamma',
  'vega',
  'theta',
  'rho',
];

export function keyOf(dims) {
  const parts = [];
  for (const d of DIMS) if (dims[d] !== undefined) parts.push(`${d}=${dims[d]}`);
  return parts.length === 0 ? 'firm' : parts.join('/');
}

export function dimsOf(nodeKey) {
  const dims = {};
  if (nodeKey === 'firm') return dims;
  for (const part of nodeKey.split('/')) {
    const eq = part.indexOf('=');
    if (eq > 0) dims[part.slice(0, eq)] = part.slice(eq + 1);
  }
  return dims;
}

function lastDim(dims) {
  for (let i = DIMS.length - 1; i >= 0; i--) if (dims[DIMS[i]] !== undefined) return DIMS[i];
  return undefined;
}

function successor(dim) {
  return dim === undefined ? 'desk' : DIMS[DIMS.indexOf(dim) + 1];
}

function move(entry, i, a, b, at) {
  if (a !== b && typeof a === 'number' && typeof b === 'number') {
    entry.moveDir[i] = b > a ? 1 : -1;
    entry.moveAt[i] = at;
  }
}

function compareSiblings(a, b) {
  // Natural children first, then the "by ..." groups in dimension order.
  if (a.kind === 'group' || b.kind === 'group') {
    if (a.kind !== b.kind) return a.kind === 'group' ? 1 : -1;
    return DIMS.indexOf(a.dim) - DIMS.indexOf(b.dim);
  }
  if (a.dim === 'tenor' && b.dim === 'tenor')
    return TENOR_ORDER.indexOf(a.label) - TENOR_ORDER.indexOf(b.label);
  return a.label < b.label ? -1 : a.label > b.label ? 1 : 0;
}

export class NodeTree {
  constructor() {
    /** @type {Map<string, any>} */
    this.byKey = new Map();
    this.root = this.#make('firm', {}, null, 'node', undefined, 'Firm');
    this.root.expanded = true;
    /** Bumped whenever rows appear, disappear or fold: the flat row list must be rebuilt. */
    this.shape = 0;
    this.flat = [];
    this.flatShape = -1;
  }

  #make(key, dims, parent, kind, dim, label) {
    const entry = {
      key,
      dims,
      parent,
      kind,
      dim,
      label,
      depth: parent ? parent.depth + 1 : 0,
      children: [],
      expanded: false,
      msg: null,
      /** Per metric (METRIC_COLUMNS order): which way it last moved (1 up, -1 down) and when. */
      moveDir: new Int8Array(METRIC_COLUMNS.length),
      moveAt: new Float64Array(METRIC_COLUMNS.length),
    };
    if (this.keepOpen?.has(key)) entry.expanded = true;
    this.byKey.set(key, entry);
    if (parent) {
      const sibs = parent.children;
      let lo = 0;
      let hi = sibs.length;
      while (lo < hi) {
        const mid = (lo + hi) >> 1;
        if (compareSiblings(sibs[mid], entry) < 0) lo = mid + 1;
        else hi = mid;
      }
      sibs.splice(lo, 0, entry);
    }
    this.shape++;
    return entry;
  }

  /** The entry for a node key, created (with any missing ancestors as placeholders) if new. */
  ensure(key, dims = dimsOf(key)) {
    const found = this.byKey.get(key);
    if (found) return found;
    const dim = lastDim(dims);
    const parentDims = { ...dims };
    delete parentDims[dim];
    const parent = this.ensure(keyOf(parentDims), parentDims);
    let home = parent;
    if (dim !== successor(lastDim(parentDims))) {
      const groupKey = `${parent.key}#by-${dim}`;
      home = this.byKey.get(groupKey) ?? this.#make(groupKey, parentDims, parent, 'group', dim, `by ${dim}`);
    }
    // Until its own exposure arrives a node is a placeholder: it exists only to hold its children.
    return this.#make(key, dims, home, 'placeholder', dim, dims[dim]);
  }

  /** Applies one exposure; returns its entry. Records which metrics moved and which way. */
  apply(msg, at) {
    const entry =
      this.byKey.get(msg.nodeKey) ??
      this.ensure(
        msg.nodeKey,
        msg.node && Object.keys(msg.node).length ? { ...msg.node } : dimsOf(msg.nodeKey),
      );
    if (entry.kind === 'placeholder') entry.kind = 'node';
    const prev = entry.msg;
    if (prev) {
      // Spelled out per metric: keyed reads with a variable name are the slow path at 50 000 a second.
      move(entry, 0, prev.pv, msg.pv, at);
      move(entry, 1, prev.pnl, msg.pnl, at);
      move(entry, 2, prev.delta, msg.delta, at);
      move(entry, 3, prev.cashDelta, msg.cashDelta, at);
      move(entry, 4, prev.gamma, msg.gamma, at);
      move(entry, 5, prev.cashGamma, msg.cashGamma, at);
      move(entry, 6, prev.vega, msg.vega, at);
      move(entry, 7, prev.theta, msg.theta, at);
      move(entry, 8, prev.rho, msg.rho, at);
    }
    entry.msg = msg;
    return entry;
  }

  toggle(entry, open = !entry.expanded) {
    if (entry.children.length === 0 || entry.expanded === open) return false;
    entry.expanded = open;
    this.shape++;
    return true;
  }

  expandTo(depth) {
    for (const e of this.byKey.values())
      if (e.kind !== 'group' && e.depth < depth && e.children.length) e.expanded = true;
    this.shape++;
  }

  /** Rows in display order (only under expanded parents), with their position among siblings. */
  rows() {
    if (this.flatShape === this.shape) return this.flat;
    const out = [];
    const walk = (e, pos, size) => {
      e.pos = pos;
      e.setSize = size;
      out.push(e);
      if (!e.expanded) return;
      const n = e.children.length;
      for (let i = 0; i < n; i++) walk(e.children[i], i + 1, n);
    };
    walk(this.root, 1, 1);
    this.flat = out;
    this.flatShape = this.shape;
    return out;
  }

  /** Forgets every node (a fresh state after reconnecting) but remembers what the user had open. */
  clear() {
    this.keepOpen = new Set();
    for (const e of this.byKey.values()) if (e.expanded) this.keepOpen.add(e.key);
    this.byKey.clear();
    this.root = this.#make('firm', {}, null, 'node', undefined, 'Firm');
    this.root.expanded = true;
  }
}
