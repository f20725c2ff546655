import { describe, expect, it } from 'vitest';
import { Market, pillarExpiries, zeroRate } from './market.ts';
import { Rng } from './rng.ts';
import { buildUniverse } from './universe.ts';

const START = Date.UTC(2026, 2, 2, 14, 30);

function market(mode: 'sticky-strike' | 'sticky-moneyness') {
  const universe = buildUniverse(new Rng(1, 1), {
    underlyings: 20,
    marketLoading: 0.5,
    sectorLoading: 0.3,
    jumpsPerDay: 0,
  });
  return new Market(universe, START, mode, 1);
}

describe('surfaces and spot (sticky rules as commonly defined: sticky-strike keeps the vol of a fixed strike, sticky-moneyness the vol of a fixed K/S)', () => {
  it('sticky-strike: a spot move leaves every vol of the grid unchanged and no republish due', () => {
    const m = market('sticky-strike');
    const i = m.indexOf.get('HARBOR500') ?? -1;
    const before = m.surfaceVols(i, START);
    m.markSurfacePublished(i);
    m.logSpot[i] = (m.logSpot[i] ?? 0) + 0.05;
    expect(m.surfaceDue(i)).toBe(false);
    expect(m.surfaceVols(i, START)).toEqual(before);
  });

  it('sticky-moneyness: after a 5% rise the vol at 1.05 K equals the old vol at K, and a republish is due', () => {
    const m = market('sticky-moneyness');
    const i = m.indexOf.get('HARBOR500') ?? -1;
    const tau = 0.5;
    const s0 = m.spot(i);
    const k = 5000;
    const v0 = m.modelVol(i, k, tau, m.referenceSpot(i));
    m.markSurfacePublished(i);
    m.logSpot[i] = (m.logSpot[i] ?? 0) + Math.log(1.05);
    expect(m.spot(i)).toBeCloseTo(s0 * 1.05, 6);
    expect(m.surfaceDue(i)).toBe(true);
    expect(m.modelVol(i, k * 1.05, tau, m.referenceSpot(i))).toBeCloseTo(v0, 12);
    // and a put skew: lower strikes carry higher vols (common practice for equity indices)
    expect(m.modelVol(i, 4000, tau, m.referenceSpot(i))).toBeGreaterThan(
      m.modelVol(i, 6000, tau, m.referenceSpot(i)),
    );
  });

  it('a vol-level shock makes a surface due in either mode; vols stay within the contract range', () => {
    for (const mode of ['sticky-strike', 'sticky-moneyness'] as const) {
      const m = market(mode);
      const i = m.indexOf.get('EURUSD') ?? -1;
      m.markSurfacePublished(i);
      m.shockVolLevel(i, 0.05);
      expect(m.surfaceDue(i)).toBe(true);
      for (const row of m.surfaceVols(i, START)) for (const v of row) expect(v > 0 && v <= 10).toBe(true);
    }
  });
});

describe('curves and calendar', () => {
  it('zero rate: linear between tenors, flat outside (contract rule)', () => {
    const c = { tenors: [0.25, 0.5, 1, 2, 5], zeroRates: [0.043, 0.042, 0.04, 0.038, 0.037] }; // the contract's example curve
    expect(zeroRate(c, 0.1)).toBe(0.043);
    expect(zeroRate(c, 0.75)).toBeCloseTo(0.041, 12);
    expect(zeroRate(c, 3.5)).toBeCloseTo(0.0375, 12);
    expect(zeroRate(c, 30)).toBe(0.037);
  });

  it('pillar expiries fall on Fridays at 20:00 UTC, strictly increasing and after the start', () => {
    const ex = pillarExpiries(START);
    // 2026-03-06 and 2026-03-20 are Fridays (Gregorian calendar); the third Friday of April 2026 is the 17th.
    expect(new Date(ex[0] ?? 0).toISOString()).toBe('2026-03-06T20:00:00.000Z');
    expect(new Date(ex[1] ?? 0).toISOString()).toBe('2026-04-17T20:00:00.000Z');
    for (let k = 0; k < ex.length; k++) {
      expect(new Date(ex[k] ?? 0).getUTCDay()).toBe(5);
      if (k > 0) expect(ex[k] ?? 0).toBeGreaterThan(ex[k - 1] ?? 0);
    }
    expect(ex[0] ?? 0).toBeGreaterThan(START);
  });

  it('curve moves stay bounded and pull back toward the base shape', () => {
    const m = market('sticky-strike');
    const rng = new Rng(9, 6);
    for (let k = 0; k < 5000; k++) m.moveCurve(rng, 'USD');
    for (const r of m.curve('USD').zeroRates) expect(Math.abs(r - 0.041)).toBeLessThan(0.01);
  });
});
