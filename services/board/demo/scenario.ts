// An invented book for the page's browser test, screenshot and frame-time benchmark: desks, books
// and underlyings of our own naming, with leaf exposures that move a little on every tick and every
// parent node the sum of its leaves. Parents are kept the way the engine keeps them: a leaf's
// change is added to each node that holds it, and a publication builds one plain exposure object
// per node from those running sums, so a benchmark's producer costs what the engine's hand-off to
// the hub costs, no more.
import { nodeKey, type ExposureMsg } from '@keelson/shared-types';

type Sums = Pick<ExposureMsg, 'pv' | 'pnl' | 'cashDelta' | 'cashGamma' | 'vega' | 'theta' | 'rho'>;

/** A node's running sums over its leaves. */
type Totals = Sums & { delta: number; gamma: number };

interface NodeSums {
  key: string;
  node: ExposureMsg['node'];
  /** delta and gamma are published only where the node fixes one underlying. */
  fixed: boolean;
  sums: Totals;
  positions: number;
  /** Leaves under the node whose underlying is stale. */
  staleLeaves: number;
}

interface Leaf {
  desk: string;
  book: string;
  underlying: string;
  spot: number;
  delta: number;
  gamma: number;
  sums: Sums;
  positions: number;
  /** Every node this leaf is summed into: firm, desk, desk/book, desk/book/underlying, underlying. */
  nodes: NodeSums[];
}

/** A small deterministic generator (mulberry32), so a seed always draws the same book. */
function rng(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

export interface ScenarioOptions {
  desks?: string[];
  booksPerDesk?: number;
  underlyingsPerBook?: number;
  /** Names drawn for underlyings; generated (`U0001`, ...) when absent or too few. */
  underlyings?: string[];
  seed?: number;
  startMs?: number;
}

export const DEMO_DESKS = ['ORCA', 'HERON', 'KESTREL'];
export const DEMO_UNDERLYINGS = ['PELICAN', 'MARLIN', 'TERN', 'GANNET', 'SKUA', 'PUFFIN', 'PETREL', 'GREBE'];

export class DemoBook {
  private readonly leaves: Leaf[] = [];
  private readonly random: () => number;
  private nowMs: number;
  private readonly stale = new Set<string>();

  constructor(opts: ScenarioOptions = {}) {
    this.random = rng(opts.seed ?? 7);
    this.nowMs = opts.startMs ?? Date.parse('2026-03-02T14:30:00.000Z');
    const desks = opts.desks ?? DEMO_DESKS;
    const booksPerDesk = opts.booksPerDesk ?? 2;
    const perBook = opts.underlyingsPerBook ?? 3;
    const names = opts.underlyings ?? DEMO_UNDERLYINGS;
    let u = 0;
    for (const desk of desks) {
      for (let b = 1; b <= booksPerDesk; b++) {
        const book = `${desk}-${b}`;
        for (let i = 0; i < perBook; i++, u++) {
          const underlying =
            names.length >= desks.length * booksPerDesk * perBook ? names[u]! : names[u % names.length]!;
          const spot = 40 + this.random() * 160;
          const delta = (this.random() - 0.45) * 40_000;
          const gamma = (this.random() - 0.5) * 900;
          const pv = (this.random() - 0.3) * 2_000_000;
          this.leaves.push({
            desk,
            book,
            underlying,
            spot,
            delta,
            gamma,
            positions: 5 + Math.floor(this.random() * 60),
            nodes: [],
            sums: {
              pv,
              pnl: pv * (this.random() * 0.08 - 0.03),
              cashDelta: delta * spot,
              cashGamma: (gamma * spot * spot) / 100,
              vega: (this.random() - 0.4) * 60_000,
              theta: -(this.random() * 9_000),
              rho: (this.random() - 0.5) * 12_000,
            },
          });
        }
      }
    }
    this.buildNodes();
  }

  get size(): number {
    return this.leaves.length;
  }

  /** Marks an underlying's spot stale (or fresh again) in every node that holds it. */
  setStale(underlying: string, stale: boolean): void {
    if (stale === this.stale.has(underlying)) return;
    if (stale) this.stale.add(underlying);
    else this.stale.delete(underlying);
    for (const leaf of this.leaves)
      if (leaf.underlying === underlying) for (const n of leaf.nodes) n.staleLeaves += stale ? 1 : -1;
  }

  /** Moves every spot a little (a fraction of the leaves when `share` < 1) and advances the clock. */
  tick(dtMs = 100, share = 1): void {
    this.nowMs += dtMs;
    for (const leaf of this.leaves) {
      if (share < 1 && this.random() > share) continue;
      const s = leaf.sums;
      const move = leaf.spot * (this.random() - 0.5) * 0.004;
      const newSpot = leaf.spot + move;
      const dPv = leaf.delta * move + 0.5 * leaf.gamma * move * move;
      const dDelta = leaf.gamma * move;
      const cashDelta = (leaf.delta + dDelta) * newSpot;
      const cashGamma = (leaf.gamma * newSpot * newSpot) / 100;
      const vega = s.vega * (1 + (this.random() - 0.5) * 0.002);
      const dCashDelta = cashDelta - s.cashDelta;
      const dCashGamma = cashGamma - s.cashGamma;
      const dVega = vega - s.vega;
      leaf.delta += dDelta;
      leaf.spot = newSpot;
      s.pv += dPv;
      s.pnl += dPv;
      s.cashDelta = cashDelta;
      s.cashGamma = cashGamma;
      s.vega = vega;
      for (const n of leaf.nodes) {
        const a = n.sums;
        a.pv += dPv;
        a.pnl += dPv;
        a.delta += dDelta;
        a.cashDelta += dCashDelta;
        a.cashGamma += dCashGamma;
        a.vega += dVega;
      }
    }
  }

  /** Shifts one leaf's vega, to push a limit across its levels in a test. */
  bumpVega(desk: string, amount: number): void {
    const leaf = this.leaves.find((l) => l.desk === desk);
    if (!leaf) return;
    leaf.sums.vega += amount;
    for (const n of leaf.nodes) n.sums.vega += amount;
  }

  asOf(): string {
    return new Date(this.nowMs).toISOString();
  }

  /** Every node the engine would keep for this book: firm, desk, desk/book, desk/book/underlying, underlying. */
  exposures(): ExposureMsg[] {
    const asOf = this.asOf();
    const out: ExposureMsg[] = new Array(this.nodes.length);
    for (let i = 0; i < this.nodes.length; i++) {
      const n = this.nodes[i]!;
      const a = n.sums;
      out[i] = {
        type: 'exposure',
        nodeKey: n.key,
        node: n.node,
        currency: 'USD',
        asOf,
        pv: a.pv,
        pnl: a.pnl,
        delta: n.fixed ? a.delta : null,
        cashDelta: a.cashDelta,
        gamma: n.fixed ? a.gamma : null,
        cashGamma: a.cashGamma,
        vega: a.vega,
        theta: a.theta,
        rho: a.rho,
        positions: n.positions,
        unpriced: {},
        stale: n.staleLeaves > 0,
      };
    }
    return out;
  }

  /** Node keys in order, each node knowing its leaves' sums; built once, the book's shape never changes. */
  private readonly nodes: NodeSums[] = [];

  private buildNodes(): void {
    const byKey = new Map<string, NodeSums>();
    const add = (node: ExposureMsg['node'], leaf: Leaf): void => {
      const key = nodeKey(node);
      let n = byKey.get(key);
      if (!n) {
        n = {
          key,
          node,
          fixed: node.underlying !== undefined,
          sums: { pv: 0, pnl: 0, delta: 0, cashDelta: 0, gamma: 0, cashGamma: 0, vega: 0, theta: 0, rho: 0 },
          positions: 0,
          staleLeaves: 0,
        };
        byKey.set(key, n);
      }
      const a = n.sums;
      a.pv += leaf.sums.pv;
      a.pnl += leaf.sums.pnl;
      a.delta += leaf.delta;
      a.cashDelta += leaf.sums.cashDelta;
      a.gamma += leaf.gamma;
      a.cashGamma += leaf.sums.cashGamma;
      a.vega += leaf.sums.vega;
      a.theta += leaf.sums.theta;
      a.rho += leaf.sums.rho;
      n.positions += leaf.positions;
      leaf.nodes.push(n);
    };
    for (const leaf of this.leaves) {
      add({}, leaf);
      add({ desk: leaf.desk }, leaf);
      add({ desk: leaf.desk, book: leaf.book }, leaf);
      add({ desk: leaf.desk, book: leaf.book, underlying: leaf.underlying }, leaf);
      add({ underlying: leaf.underlying }, leaf);
    }
    this.nodes.push(...[...byKey.values()].sort((a, b) => (a.key < b.key ? -1 : a.key > b.key ? 1 : 0)));
  }
}
