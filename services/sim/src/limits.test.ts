/**
 * The demo's limits must be tested by the day: some start near or past their warning level and
 * the flow pushes more across within minutes. The level rule is the contract's (warnAt 0.8,
 * breach at 1).
 */
import { describe, expect, it } from 'vitest';
import { utilization } from './limits.ts';
import { MarketSim } from './sim.ts';

const START = Date.UTC(2026, 2, 2, 14, 30);

describe('limit sizing', () => {
  it('utilization follows the contract definition', () => {
    // The contract's alert example: vega 262000 against max 250000 is 1.048.
    expect(utilization(262_000, { max: 250_000, min: -250_000 })).toBeCloseTo(1.048, 12);
    expect(utilization(-50, { max: 100, min: -200 })).toBe(0.25);
    expect(utilization(-50, { max: 100 })).toBe(0);
    expect(utilization(50, { min: -100 })).toBe(0);
  });

  it('covers the scopes the task names and is sized so some limits warn or breach within minutes', () => {
    const sim = new MarketSim({ seed: 1, startMs: START });
    const limits = sim.bootstrap().filter((m) => m.type === 'limit');
    const kinds = new Set(
      limits.map((l) =>
        l.type === 'limit' ? `${Object.keys(l.scope).sort().join('+') || 'firm'}:${l.metric}` : '',
      ),
    );
    for (const k of [
      'underlying:delta',
      'underlying:gamma',
      'desk:vega',
      'book+desk:pv',
      'book+desk:cashDelta',
      'desk+tenor:vega',
      'firm:vega',
    ]) {
      expect(kinds).toContain(k);
    }
    const start = sim.estimatedUtilizations();
    const atStart = [...start.values()];
    const warnAtStart = atStart.filter((u) => u >= 0.8).length;
    // Most are comfortable, a handful warn at once, nearly none breach at once.
    expect(atStart.filter((u) => u < 0.8).length / atStart.length).toBeGreaterThan(0.8);
    expect(warnAtStart).toBeGreaterThan(5);
    for (let t = START + 1000; t <= START + 600_000; t += 1000) sim.step(t);
    const later = sim.estimatedUtilizations();
    let crossedUp = 0;
    for (const [id, u0] of start) if (u0 < 0.8 && (later.get(id) ?? 0) >= 0.8) crossedUp++;
    const breaches = [...later.values()].filter((u) => u >= 1).length;
    expect(crossedUp).toBeGreaterThan(2);
    expect(breaches).toBeGreaterThan(2);
    console.info(
      `limits ${limits.length}: warn at start ${warnAtStart}, crossed into warning within 10 min ${crossedUp}, in breach after 10 min ${breaches}`,
    );
  });
});
