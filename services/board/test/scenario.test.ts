// The demo book keeps its parent nodes the way the engine does, by adding each leaf's change to
// the nodes that hold it. Summation is the check (common practice: a parent's additive Greeks are
// the sums of its children's, no source needed): after many ticks every parent must still equal
// the sum of its leaves, up to the rounding a running sum collects.
import { describe, expect, it } from 'vitest';
import type { ExposureMsg } from '@keelson/shared-types';
import { DemoBook } from '../demo/scenario.ts';

const ADDITIVE = ['pv', 'pnl', 'cashDelta', 'cashGamma', 'vega', 'theta', 'rho'] as const;

function leavesOf(all: ExposureMsg[], parent: ExposureMsg): ExposureMsg[] {
  return all.filter(
    (e) =>
      e.node.underlying !== undefined &&
      e.node.desk !== undefined &&
      (parent.node.desk === undefined || e.node.desk === parent.node.desk) &&
      (parent.node.book === undefined || e.node.book === parent.node.book) &&
      (parent.node.underlying === undefined || e.node.underlying === parent.node.underlying),
  );
}

describe('demo book', () => {
  it('keeps every parent the sum of its leaves over many ticks', () => {
    const book = new DemoBook({ seed: 9 });
    for (let i = 0; i < 2_000; i++) book.tick(100);
    book.bumpVega('HERON', 12_345);
    const all = book.exposures();
    const parents = all.filter((e) => e.node.underlying === undefined || e.node.desk === undefined);
    expect(parents.map((p) => p.nodeKey)).toContain('firm');
    for (const p of parents) {
      const leaves = leavesOf(all, p);
      expect(leaves.length).toBeGreaterThan(0);
      for (const m of ADDITIVE) {
        const sum = leaves.reduce((s, l) => s + l[m], 0);
        expect(Math.abs(p[m] - sum)).toBeLessThanOrEqual(1e-9 * Math.max(1, Math.abs(sum)));
      }
      expect(p.positions).toBe(leaves.reduce((s, l) => s + l.positions, 0));
      // Units of one underlying add only where the node fixes one (contract: null elsewhere).
      if (p.node.underlying === undefined) expect(p.delta).toBeNull();
      else
        expect(p.delta).toBeCloseTo(
          leaves.reduce((s, l) => s + l.delta!, 0),
          6,
        );
    }
  });

  it('marks stale exactly the nodes that hold the stale underlying, and clears them again', () => {
    const book = new DemoBook({ seed: 9 });
    book.setStale('TERN', true);
    book.setStale('TERN', true); // twice is once
    const all = book.exposures();
    const holding = all.filter((e) => leavesOf(all, e).some((l) => l.node.underlying === 'TERN'));
    expect(holding.map((e) => e.nodeKey)).toContain('underlying=TERN');
    expect(all.filter((e) => e.stale).map((e) => e.nodeKey)).toEqual(holding.map((e) => e.nodeKey));
    book.setStale('TERN', false);
    expect(book.exposures().filter((e) => e.stale)).toEqual([]);
  });
});
