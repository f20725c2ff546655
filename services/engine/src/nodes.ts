// The node cube: every aggregation node the contract keeps, each with compensated sums per metric,
// and the node sets that a (desk, book, underlying, tenor) combination contributes to. A position
// holds a reference to its node set, so moving it costs one removal and one addition per node.
import { TENORS, nodeKey } from '@keelson/shared-types';
import { isoOf } from './time.ts';
import type { ExposureMsg, NodeDims, Tenor } from '@keelson/shared-types';
import { METRIC_COUNT, compensatedAdd } from './sums.ts';

export const REASON_COUNT = 5;

export class Node {
  readonly key: string;
  readonly dims: NodeDims;
  readonly hasUnderlying: boolean;
  /** One of the kinds kept for every position (firm, desk, desk/book, desk/book/underlying, underlying). */
  readonly fixed: boolean;
  readonly sum = new Float64Array(METRIC_COUNT);
  readonly comp = new Float64Array(METRIC_COUNT);
  positions = 0;
  readonly unpriced = new Int32Array(REASON_COUNT);
  /** Priced holdings on a stale feed. */
  staleCount = 0;
  /** Limits naming this node. */
  limitRefs = 0;
  asOfMs = 0;
  /** Input sequence number of the last change, to list a node once per input. */
  changedSeq = -1;
  /** Whether the node was in the kept set at the last change (to publish its farewell once). */
  wasKept = false;
  /** Listed among the nodes changed since the last drain. */
  outPending = false;
  /** Changes staged by the current input, applied once per node when the input is done. */
  readonly pending = new Pending();
  /** The node's publication handle, made on first use (see ExposureView). */
  view: ExposureView | null = null;

  constructor(dims: NodeDims, fixed: boolean) {
    this.dims = dims;
    this.key = nodeKey(dims);
    this.hasUnderlying = dims.underlying !== undefined;
    this.fixed = fixed;
  }

  get kept(): boolean {
    return this.positions > 0 || this.limitRefs > 0;
  }

  value(k: number): number {
    return (this.sum[k] as number) + (this.comp[k] as number);
  }

  add(k: number, x: number): void {
    compensatedAdd(this.sum, this.comp, k, x);
  }

  /** Exact zeros once no position is left, so a node never carries residue of rounding. */
  clearSums(): void {
    this.sum.fill(0);
    this.comp.fill(0);
  }
}

/**
 * Differences staged for one node or node set: the holdings of one input add into their set, the
 * sets into their nodes, and each node takes one compensated update however many holdings moved.
 */
export class Pending {
  staged = false;
  readonly vec = new Float64Array(METRIC_COUNT);
  positions = 0;
  readonly unpriced = new Int32Array(REASON_COUNT);
  stale = 0;

  addInto(o: Pending): void {
    for (let k = 0; k < METRIC_COUNT; k++) o.vec[k] = (o.vec[k] as number) + (this.vec[k] as number);
    o.positions += this.positions;
    for (let r = 0; r < REASON_COUNT; r++)
      o.unpriced[r] = (o.unpriced[r] as number) + (this.unpriced[r] as number);
    o.stale += this.stale;
  }

  clear(): void {
    this.staged = false;
    this.vec.fill(0);
    this.positions = 0;
    this.unpriced.fill(0);
    this.stale = 0;
  }
}

/**
 * Node sets with the same node list share one group and stage into its one Pending: without a
 * tenor-named limit, the sets of one (desk, book, underlying) in different tenor buckets have the
 * same nodes, so a tick moving options in five buckets adds into the nodes once, not five times.
 */
export class NodeGroup {
  readonly pending = new Pending();
  constructor(readonly nodes: readonly Node[]) {}
}

/** The nodes one (desk, book, underlying, tenor) combination contributes to. */
export class NodeSet {
  readonly nodes: Node[];
  /** Where its holdings stage their differences; reassigned when limit scopes join or leave. */
  group!: NodeGroup;
  constructor(
    readonly desk: string,
    readonly book: string,
    readonly underlying: string,
    /** index into TENORS, -1 for linear positions (no tenor) */
    readonly tenor: number,
    nodes: Node[],
  ) {
    this.nodes = nodes;
  }

  matches(dims: NodeDims): boolean {
    if (dims.desk !== undefined && dims.desk !== this.desk) return false;
    if (dims.book !== undefined && dims.book !== this.book) return false;
    if (dims.underlying !== undefined && dims.underlying !== this.underlying) return false;
    if (dims.tenor !== undefined && (this.tenor < 0 || TENORS[this.tenor] !== dims.tenor)) return false;
    return true;
  }
}

/** Whether a scope is one of the node kinds kept for every position anyway. */
export function isFixedKind(dims: NodeDims): boolean {
  if (dims.tenor !== undefined) return false;
  const d = dims.desk !== undefined;
  const b = dims.book !== undefined;
  const u = dims.underlying !== undefined;
  if (!d) return !b; // firm, or underlying alone
  return b || !u; // desk, desk/book, desk/book/underlying; not desk/underlying
}

export class NodeCube {
  private readonly nodes = new Map<string, Node>();
  private readonly sets = new Map<string, NodeSet>();
  /** Limit-named scopes that are not fixed kinds: they join node sets only while named. */
  private readonly extra = new Map<string, Node>();
  private readonly groups = new Map<string, NodeGroup>();

  getNode(key: string): Node | undefined {
    return this.nodes.get(key);
  }

  private nodeFor(dims: NodeDims, fixed: boolean): Node {
    const key = nodeKey(dims);
    let n = this.nodes.get(key);
    if (!n) {
      n = new Node(dims, fixed);
      this.nodes.set(key, n);
    }
    return n;
  }

  nodeSet(desk: string, book: string, underlying: string, tenor: number): NodeSet {
    const key = `${desk}\u0000${book}\u0000${underlying}\u0000${tenor}`;
    let s = this.sets.get(key);
    if (s) return s;
    const nodes = [
      this.nodeFor({}, true),
      this.nodeFor({ desk }, true),
      this.nodeFor({ desk, book }, true),
      this.nodeFor({ desk, book, underlying }, true),
      this.nodeFor({ underlying }, true),
    ];
    s = new NodeSet(desk, book, underlying, tenor, nodes);
    for (const n of this.extra.values()) if (s.matches(n.dims)) nodes.push(n);
    this.sets.set(key, s);
    this.assignGroup(s);
    return s;
  }

  private assignGroup(s: NodeSet): void {
    let key = '';
    for (const n of s.nodes) key += `${n.key}\u0000`;
    let g = this.groups.get(key);
    if (!g) {
      g = new NodeGroup(s.nodes.slice());
      this.groups.set(key, g);
    }
    s.group = g;
  }

  /** Node lists changed (a scope joined or left): regroup. Nothing may be staged at this point. */
  private regroup(): void {
    this.groups.clear();
    for (const s of this.sets.values()) this.assignGroup(s);
  }

  /**
   * A limit names a scope. Returns the node and, when the scope just joined the node sets, true:
   * the caller must then add the contributions of the positions already in it.
   */
  nameScope(dims: NodeDims): { node: Node; joined: boolean } {
    const fixed = isFixedKind(dims);
    const node = this.nodeFor(dims, fixed);
    node.limitRefs += 1;
    if (fixed || this.extra.has(node.key)) return { node, joined: false };
    this.extra.set(node.key, node);
    for (const s of this.sets.values()) if (s.matches(node.dims)) s.nodes.push(node);
    this.regroup();
    return { node, joined: true };
  }

  /**
   * A limit stops naming a scope. A non-fixed scope no longer named leaves every node set and is
   * emptied: the caller publishes it once more (with zeros) like any node that is dropped.
   */
  unnameScope(key: string): Node | undefined {
    const node = this.nodes.get(key);
    if (!node) return undefined;
    node.limitRefs -= 1;
    if (node.limitRefs > 0 || node.fixed) return node;
    this.extra.delete(key);
    for (const s of this.sets.values()) {
      const i = s.nodes.indexOf(node);
      if (i >= 0) s.nodes.splice(i, 1);
    }
    this.regroup();
    node.clearSums();
    node.positions = 0;
    node.unpriced.fill(0);
    node.staleCount = 0;
    return node;
  }

  /** Nodes currently kept, sorted by nodeKey. */
  kept(): Node[] {
    const out: Node[] = [];
    for (const n of this.nodes.values()) if (n.kept) out.push(n);
    return out.sort((a, b) => (a.key < b.key ? -1 : a.key > b.key ? 1 : 0));
  }

  all(): IterableIterator<Node> {
    return this.nodes.values();
  }
}

export function tenorIndex(t: Tenor): number {
  return TENORS.indexOf(t);
}

/** The contract's exposure message of a node, in reporting currency. */
export function exposureOf(n: Node, currency: string, reasons: readonly string[]): ExposureMsg {
  const z = n.positions === 0;
  const unpriced: Record<string, number> = {};
  for (let r = 0; r < REASON_COUNT; r++) {
    const c = n.unpriced[r] as number;
    if (c > 0) unpriced[reasons[r] as string] = c;
  }
  return {
    type: 'exposure',
    nodeKey: n.key,
    node: { ...n.dims },
    currency,
    asOf: isoOf(n.asOfMs),
    pv: z ? 0 : n.value(0),
    pnl: z ? 0 : n.value(1),
    delta: n.hasUnderlying ? (z ? 0 : n.value(2)) : null,
    cashDelta: z ? 0 : n.value(3),
    gamma: n.hasUnderlying ? (z ? 0 : n.value(4)) : null,
    cashGamma: z ? 0 : n.value(5),
    vega: z ? 0 : n.value(6),
    theta: z ? 0 : n.value(7),
    rho: z ? 0 : n.value(8),
    positions: n.positions,
    unpriced,
    stale: n.staleCount > 0,
  };
}

/**
 * A changed node as the runner holds it until it publishes: the exposure is read from the node at
 * publication time, so a node that changes in many batches between two flushes is built and
 * serialised once, not once per batch. `json()` is byte for byte JSON.stringify(exposure()): the
 * constant part (type, key, dims, currency) is serialised once per node.
 */
export class ExposureView {
  readonly key: string;
  readonly underlying: string | undefined;
  private readonly head: string;
  constructor(
    readonly node: Node,
    private readonly currency: string,
    private readonly reasons: readonly string[],
  ) {
    this.key = node.key;
    this.underlying = node.dims.underlying;
    this.head = `{"type":"exposure","nodeKey":${JSON.stringify(node.key)},"node":${JSON.stringify(node.dims)},"currency":${JSON.stringify(currency)},"asOf":`;
  }

  exposure(): ExposureMsg {
    return exposureOf(this.node, this.currency, this.reasons);
  }

  json(): string {
    const n = this.node;
    const z = n.positions === 0;
    const u = n.hasUnderlying;
    let unpriced = '';
    for (let r = 0; r < REASON_COUNT; r++) {
      const c = n.unpriced[r] as number;
      if (c > 0) unpriced += `${unpriced ? ',' : ''}${JSON.stringify(this.reasons[r])}:${c}`;
    }
    return (
      `${this.head}"${isoOf(n.asOfMs)}","pv":${num(z ? 0 : n.value(0))},"pnl":${num(z ? 0 : n.value(1))}` +
      `,"delta":${u ? num(z ? 0 : n.value(2)) : 'null'},"cashDelta":${num(z ? 0 : n.value(3))}` +
      `,"gamma":${u ? num(z ? 0 : n.value(4)) : 'null'},"cashGamma":${num(z ? 0 : n.value(5))}` +
      `,"vega":${num(z ? 0 : n.value(6))},"theta":${num(z ? 0 : n.value(7))},"rho":${num(z ? 0 : n.value(8))}` +
      `,"positions":${n.positions},"unpriced":{${unpriced}},"stale":${n.staleCount > 0}}`
    );
  }
}

/** A number as JSON.stringify writes it (shortest round trip; non-finite as null). */
function num(x: number): string {
  return Number.isFinite(x) ? `${x}` : 'null';
}
