// The page's model modules are plain browser JavaScript with no DOM in them, so they load in node
// as they are. Typed here by hand: the page ships no declarations, and needs none.
import { describe, expect, it } from 'vitest';

interface Entry {
  key: string;
  kind: 'node' | 'group' | 'placeholder';
  label: string;
  depth: number;
  parent: Entry | null;
  children: Entry[];
  expanded: boolean;
  moveDir: Int8Array;
  moveAt: Float64Array;
}
interface TreeCtor {
  new (): {
    apply(msg: object, at: number): Entry;
    rows(): Entry[];
    expandTo(d: number): void;
    toggle(e: Entry, open?: boolean): boolean;
    byKey: Map<string, Entry>;
    clear(): void;
  };
}
const model = (await import('../static/js/model.js' as string)) as {
  NodeTree: TreeCtor;
  keyOf(d: object): string;
  dimsOf(k: string): Record<string, string>;
};
const limits = (await import('../static/js/limits.js' as string)) as {
  utilizationOf(v: number, max?: number, min?: number): number;
  LimitBook: new () => {
    onAlert(a: object): void;
    onExposure(e: object): void;
    setView(v: object): void;
    ranked(): {
      limitId: string;
      utilization: number;
      level: string;
      assumed: boolean;
      max?: number;
      min?: number;
    }[];
  };
};
const format = (await import('../static/js/format.js' as string)) as {
  compact(v: number | null): string;
  clockTime(s: string): string;
};
const history = (await import('../static/js/history.js' as string)) as {
  Series: new (
    cap: number,
    gap: number,
  ) => { add(t: number, v: object): void; t: number[]; minGapMs: number };
};

const exposure = (nodeKey: string, pv = 0, extra: object = {}) => ({
  type: 'exposure',
  nodeKey,
  pv,
  pnl: 0,
  delta: null,
  cashDelta: 0,
  gamma: null,
  cashGamma: 0,
  vega: 0,
  theta: 0,
  rho: 0,
  positions: 1,
  unpriced: {},
  stale: false,
  asOf: '2026-03-02T14:30:00Z',
  ...extra,
});

describe('node keys', () => {
  it('follow the contract order desk, book, underlying, tenor, and firm when empty (contract-v1.md, exposure)', () => {
    expect(model.keyOf({ underlying: 'NIMBUS', desk: 'VOLATILITY' })).toBe(
      'desk=VOLATILITY/underlying=NIMBUS',
    );
    expect(model.keyOf({})).toBe('firm');
    expect(model.dimsOf('desk=VOLATILITY/book=INDEX-1/underlying=NIMBUS/tenor=31-90d')).toEqual({
      desk: 'VOLATILITY',
      book: 'INDEX-1',
      underlying: 'NIMBUS',
      tenor: '31-90d',
    });
  });
});

describe('NodeTree', () => {
  it('hangs the natural chain firm > desk > book > underlying > tenor and groups the cross-cuts', () => {
    const t = new model.NodeTree();
    for (const k of [
      'firm',
      'desk=ORCA',
      'desk=ORCA/book=ORCA-1',
      'desk=ORCA/book=ORCA-1/underlying=TERN',
      'underlying=TERN',
      'underlying=TERN/tenor=0-30d',
      'desk=ORCA/underlying=TERN',
      'tenor=366d+',
      'tenor=181-365d',
      'tenor=31-90d',
      'tenor=0-30d',
    ]) {
      t.apply(exposure(k), 0);
    }
    const parentOf = (k: string) => t.byKey.get(k)!.parent!.key;
    expect(parentOf('desk=ORCA/book=ORCA-1/underlying=TERN')).toBe('desk=ORCA/book=ORCA-1');
    expect(parentOf('underlying=TERN')).toBe('firm#by-underlying');
    expect(parentOf('underlying=TERN/tenor=0-30d')).toBe('underlying=TERN');
    expect(parentOf('desk=ORCA/underlying=TERN')).toBe('desk=ORCA#by-underlying');
    // Tenor buckets in time order; by name '181-365d' would come before '31-90d'.
    expect(t.byKey.get('firm#by-tenor')!.children.map((c) => c.label)).toEqual([
      '0-30d',
      '31-90d',
      '181-365d',
      '366d+',
    ]);
    // Natural children before the groups.
    expect(t.byKey.get('firm')!.children.map((c) => c.key)).toEqual([
      'desk=ORCA',
      'firm#by-underlying',
      'firm#by-tenor',
    ]);
  });

  it('keeps a placeholder for a parent the engine does not publish, until it does', () => {
    const t = new model.NodeTree();
    t.apply(exposure('desk=ORCA/book=ORCA-2/underlying=SKUA'), 0);
    expect(t.byKey.get('desk=ORCA/book=ORCA-2')!.kind).toBe('placeholder');
    t.apply(exposure('desk=ORCA/book=ORCA-2'), 0);
    expect(t.byKey.get('desk=ORCA/book=ORCA-2')!.kind).toBe('node');
  });

  it('records which way each metric moved and when, and nothing for an unchanged one', () => {
    const t = new model.NodeTree();
    t.apply(exposure('firm', 100, { vega: 5 }), 1);
    const e = t.apply(exposure('firm', 90, { vega: 5 }), 2);
    expect([e.moveDir[0], e.moveAt[0]]).toEqual([-1, 2]); // pv fell at t=2
    expect([e.moveDir[6], e.moveAt[6]]).toEqual([0, 0]); // vega unchanged
  });

  it('lists only rows under open parents and remembers what was open across a fresh state', () => {
    const t = new model.NodeTree();
    for (const k of ['firm', 'desk=A', 'desk=A/book=A1', 'desk=B']) t.apply(exposure(k), 0);
    expect(t.rows().map((r) => r.key)).toEqual(['firm', 'desk=A', 'desk=B']);
    t.toggle(t.byKey.get('desk=A')!, true);
    expect(t.rows().map((r) => r.key)).toEqual(['firm', 'desk=A', 'desk=A/book=A1', 'desk=B']);
    t.clear();
    for (const k of ['firm', 'desk=A', 'desk=A/book=A1']) t.apply(exposure(k), 0);
    expect(t.rows().map((r) => r.key)).toEqual(['firm', 'desk=A', 'desk=A/book=A1']);
  });
});

describe('limit bars', () => {
  it('use the contract utilization rule (contract-v1.md, alert: 262000 / 250000 = 1.048)', () => {
    expect(limits.utilizationOf(262000, 250000, -250000)).toBeCloseTo(1.048, 12);
    expect(limits.utilizationOf(-100, 250000, undefined)).toBe(0);
  });

  it('learn a limit from its first alert, mark the bounds assumed, and move its value with the node', () => {
    const b = new limits.LimitBook();
    b.onAlert({
      type: 'alert',
      alertId: 'L#1',
      limitId: 'L',
      nodeKey: 'desk=ORCA',
      metric: 'vega',
      value: 210,
      bound: 250,
      utilization: 0.84,
      severity: 'warning',
      previous: 'ok',
      state: 'raised',
      ts: '2026-03-02T14:30:00Z',
    });
    b.onExposure(exposure('desk=ORCA', 0, { vega: 125 }));
    expect(b.ranked()[0]).toMatchObject({
      limitId: 'L',
      utilization: 0.5,
      level: 'warning',
      assumed: true,
      max: 250,
    });
    b.setView({
      limitId: 'L',
      nodeKey: 'desk=ORCA',
      metric: 'vega',
      max: 250,
      min: -200,
      warnAt: 0.8,
      hysteresis: 0.05,
      value: -100,
      utilization: 0.5,
      level: 'ok',
    });
    b.onExposure(exposure('desk=ORCA', 0, { vega: -150 }));
    expect(b.ranked()[0]).toMatchObject({ utilization: 0.75, assumed: false });
  });
});

describe('figures and times', () => {
  it('print short with a true minus sign, and a dash for a metric the node does not define', () => {
    expect(format.compact(1_234_567)).toBe('1.23M');
    expect(format.compact(-45_600)).toBe('\u221245.6k');
    expect(format.compact(812.4)).toBe('812');
    expect(format.compact(0.012345)).toBe('0.0123');
    expect(format.compact(null)).toBe('\u2013');
    expect(format.clockTime('2026-03-02T14:30:00.125Z')).toBe('14:30:00.125Z');
  });
});

describe('session series', () => {
  it('stays bounded: when full it keeps every other point and samples half as often', () => {
    const s = new history.Series(8, 10);
    for (let t = 0; t < 200; t += 10) s.add(t, { pv: t });
    expect(s.t.length).toBeLessThan(8);
    expect(s.t[0]).toBe(0);
    expect(s.t.at(-1)).toBe(190);
    expect(s.minGapMs).toBeGreaterThan(10);
  });
});
