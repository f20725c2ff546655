// An invented book for the page's browser test, screenshot and frame-time benchmark: desks, books
// and underlyings of our own naming, with leaf exposures that move a little on every tick and every
// parent node the exact sum of its leaves (as the engine would publish them).
import { nodeKey, type ExposureMsg } from '@keelson/shared-types';

type Sums = Pick<ExposureMsg, 'pv' | 'pnl' | 'cashDelta' | 'cashGamma' | 'vega' | 'theta' | 'rho'>;
const SUMMED = ['pv', 'pnl', 'cashDelta', 'cashGamma', 'vega', 'theta', 'rho'] as const;

interface Leaf {
  desk: string;
  book: string;
  underlying: string;
  spot: number;
  delta: number;
  gamma: number;
  sums: Sums;
  positions: number;
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
  }

  get size(): number {
    return this.leaves.length;
  }

  /** Marks an underlying's spot stale (or fresh again) in every node that holds it. */
  setStale(underlying: string, stale: boolean): void {
    if (stale) this.stale.add(underlying);
    else this.stale.delete(underlying);
  }

  /** Moves every spot a little (a fraction of the leaves when `share` < 1) and advances the clock. */
  tick(dtMs = 100, share = 1): void {
    this.nowMs += dtMs;
    for (const leaf of this.leaves) {
      if (share < 1 && this.random() > share) continue;
      const move = leaf.spot * (this.random() - 0.5) * 0.004;
      const newSpot = leaf.spot + move;
      const dPv = leaf.delta * move + 0.5 * leaf.gamma * move * move;
      leaf.delta += leaf.gamma * move;
      leaf.spot = newSpot;
      leaf.sums.pv += dPv;
      leaf.sums.pnl += dPv;
      leaf.sums.cashDelta = leaf.delta * newSpot;
      leaf.sums.cashGamma = (leaf.gamma * newSpot * newSpot) / 100;
      leaf.sums.vega *= 1 + (this.random() - 0.5) * 0.002;
    }
  }

  /** Shifts one leaf's vega, to push a limit across its levels in a test. */
  bumpVega(desk: string, amount: number): void {
    const leaf = this.leaves.find((l) => l.desk === desk);
    if (leaf) leaf.sums.vega += amount;
  }

  asOf(): string {
    return new Date(this.nowMs).toISOString();
  }

  /** Node -> the leaves it sums; built once, the book's shape never changes. */
  private groups: { key: string; node: ExposureMsg['node']; leaves: Leaf[] }[] | undefined;

  private shape(): { key: string; node: ExposureMsg['node']; leaves: Leaf[] }[] {
    if (this.groups) return this.groups;
    const byKey = new Map<string, { key: string; node: ExposureMsg['node']; leaves: Leaf[] }>();
    const add = (node: ExposureMsg['node'], leaf: Leaf): void => {
      const key = nodeKey(node);
      let g = byKey.get(key);
      if (!g) byKey.set(key, (g = { key, node, leaves: [] }));
      g.leaves.push(leaf);
    };
    for (const leaf of this.leaves) {
      add({}, leaf);
      add({ desk: leaf.desk }, leaf);
      add({ desk: leaf.desk, book: leaf.book }, leaf);
      add({ desk: leaf.desk, book: leaf.book, underlying: leaf.underlying }, leaf);
      add({ underlying: leaf.underlying }, leaf);
    }
    this.groups = [...byKey.values()].sort((a, b) => (a.key < b.key ? -1 : a.key > b.key ? 1 : 0));
    return this.groups;
  }

  /** Every node the engine would keep for this book: firm, desk, desk/book, desk/book/underlying, underlying. */
  exposures(): ExposureMsg[] {
    const asOf = this.asOf();
    const out: ExposureMsg[] = [];
    for (const { key, node, leaves } of this.shape()) {
      const sums = { pv: 0, pnl: 0, cashDelta: 0, cashGamma: 0, vega: 0, theta: 0, rho: 0 };
      let delta = 0;
      let gamma = 0;
      let positions = 0;
      let stale = false;
      for (const l of leaves) {
        for (const m of SUMMED) sums[m] += l.sums[m];
        delta += l.delta;
        gamma += l.gamma;
        positions += l.positions;
        stale ||= this.stale.has(l.underlying);
      }
      const fixed = node.underlying !== undefined;
      out.push({
        type: 'exposure',
        nodeKey: key,
        node,
        currency: 'USD',
        asOf,
        ...sums,
        delta: fixed ? delta : null,
        gamma: fixed ? gamma : null,
        positions,
        unpriced: {},
        stale,
      });
    }
    return out;
  }
}
