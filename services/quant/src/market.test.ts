// Curve, surface and year-fraction rules, checked against the worked numbers of the message
// contract (/work/shared/contract-v1.md), which is their specification. Expected values are
// worked by hand from the contract's text, written out so a reader can redo them.
import { describe, expect, it } from 'vitest';
import { discountFactor, zeroRate } from './curve.ts';
import { surfaceVol } from './surface.ts';
import { MS_PER_YEAR, yearFraction } from './time.ts';

describe('yearFraction: ACT/365 fixed in milliseconds', () => {
  it('counts calendar time over 365 days, leap years included', () => {
    expect(MS_PER_YEAR).toBe(31_536_000_000);
    expect(yearFraction(Date.UTC(2026, 0, 1), Date.UTC(2027, 0, 1))).toBe(1);
    expect(yearFraction(Date.UTC(2028, 0, 1), Date.UTC(2029, 0, 1))).toBe(366 / 365); // 2028 is a leap year
    expect(yearFraction(Date.parse('2026-03-02T14:30:00.125Z'), Date.parse('2026-03-03T14:30:00.125Z'))).toBe(
      1 / 365,
    );
    expect(yearFraction(Date.UTC(2026, 5, 1), Date.UTC(2026, 4, 31))).toBe(-1 / 365);
  });
});

describe('zero curve: linear in rate, flat outside (the contract example curve)', () => {
  const usd = { tenors: [0.25, 0.5, 1, 2, 5], zeroRates: [0.043, 0.042, 0.04, 0.038, 0.037] };
  it('interpolates and extrapolates', () => {
    expect(zeroRate(usd, 0.25)).toBe(0.043);
    expect(zeroRate(usd, 0.1)).toBe(0.043);
    expect(zeroRate(usd, 0)).toBe(0.043);
    expect(zeroRate(usd, 30)).toBe(0.037);
    expect(zeroRate(usd, 0.75)).toBeCloseTo(0.041, 15); // halfway between 0.042 and 0.040
    expect(zeroRate(usd, 3)).toBeCloseTo(0.038 - 0.001 / 3, 15); // a third of the way to 0.037
    expect(zeroRate(usd, 2)).toBe(0.038);
  });
  it('discounts at exp(-r(t) t), 1 at t = 0', () => {
    expect(discountFactor(usd, 0)).toBe(1);
    expect(discountFactor(usd, 3)).toBeCloseTo(Math.exp(-(0.038 - 0.001 / 3) * 3), 15);
    expect(
      discountFactor({ tenors: new Float64Array([1]), zeroRates: new Float64Array([0.05]) }, 2),
    ).toBeCloseTo(Math.exp(-0.1), 15);
  });
  it('refuses an empty or ragged curve', () => {
    expect(() => zeroRate({ tenors: [], zeroRates: [] }, 1)).toThrow(/at least one/);
    expect(() => zeroRate({ tenors: [1, 2], zeroRates: [0.01] }, 1)).toThrow(/as many zeroRates as tenors/);
  });
});

describe('vol surface: linear in strike, total variance in time (the contract example surface)', () => {
  // Expiries 2026-03-20T20:00Z and 2026-06-19T20:00Z seen from 2026-03-02T14:30Z.
  const now = Date.parse('2026-03-02T14:30:00Z');
  const t1 = yearFraction(now, Date.parse('2026-03-20T20:00:00Z'));
  const t2 = yearFraction(now, Date.parse('2026-06-19T20:00:00Z'));
  const grid = {
    pillarTaus: [t1, t2],
    strikes: [80, 90, 100, 110, 120],
    vols: [
      [0.31, 0.28, 0.26, 0.25, 0.25],
      [0.29, 0.27, 0.255, 0.245, 0.24],
    ],
  };
  it('on a pillar: linear in vol between strikes, flat beyond the wings', () => {
    expect(surfaceVol(grid, 100, t1)).toBe(0.26);
    expect(surfaceVol(grid, 95, t1)).toBeCloseTo(0.27, 15);
    expect(surfaceVol(grid, 112.5, t2)).toBeCloseTo(0.245 - 0.005 / 4, 15);
    expect(surfaceVol(grid, 50, t1)).toBe(0.31);
    expect(surfaceVol(grid, 500, t2)).toBe(0.24);
  });
  it('between pillars: total variance linear in time', () => {
    const t = (t1 + t2) / 2;
    // strike 95: 0.27 on the first pillar, 0.2625 on the second
    const w = (0.27 ** 2 * t1 + 0.2625 ** 2 * t2) / 2;
    expect(surfaceVol(grid, 95, t)).toBeCloseTo(Math.sqrt(w / t), 15);
    const tq = t1 + 0.25 * (t2 - t1);
    const wq = 0.26 ** 2 * t1 + 0.25 * (0.255 ** 2 * t2 - 0.26 ** 2 * t1);
    expect(surfaceVol(grid, 100, tq)).toBeCloseTo(Math.sqrt(wq / tq), 15);
  });
  it('flat before the first future pillar and after the last', () => {
    expect(surfaceVol(grid, 100, t1 / 10)).toBe(0.26);
    expect(surfaceVol(grid, 100, 0)).toBe(0.26);
    expect(surfaceVol(grid, 100, 5)).toBe(0.255);
  });
  it('ignores pillars already in the past', () => {
    // Seen from 2026-04-01 the March pillar is past: everything uses the June smile flat.
    const later = Date.parse('2026-04-01T00:00:00Z');
    const g = {
      ...grid,
      pillarTaus: [
        yearFraction(later, Date.parse('2026-03-20T20:00:00Z')),
        yearFraction(later, Date.parse('2026-06-19T20:00:00Z')),
      ],
    };
    expect(surfaceVol(g, 95, 0.01)).toBeCloseTo(0.2625, 15);
    expect(surfaceVol(g, 95, 1)).toBeCloseTo(0.2625, 15);
    // A pillar exactly at the valuation time is not in the future either.
    expect(surfaceVol({ ...grid, pillarTaus: [0, t2] }, 100, t2 / 2)).toBe(0.255);
    // With every pillar past, the option is after the last pillar: its smile, flat.
    expect(surfaceVol({ ...grid, pillarTaus: [-0.2, -0.1] }, 100, 0.5)).toBe(0.255);
  });
  it('a single expiry and strike is a flat surface', () => {
    const flat = { pillarTaus: [0.5], strikes: [100], vols: [[0.2]] };
    for (const [k, t] of [
      [50, 0.01],
      [100, 0.5],
      [300, 10],
    ] as const)
      expect(surfaceVol(flat, k, t)).toBe(0.2);
  });
  it('refuses malformed grids with the reason', () => {
    expect(() => surfaceVol({ pillarTaus: [], strikes: [100], vols: [] }, 100, 1)).toThrow(
      /at least one pillar/,
    );
    expect(() => surfaceVol({ pillarTaus: [0.5], strikes: [100, 110], vols: [[0.2]] }, 105, 0.5)).toThrow(
      /row 0 needs 2 vols/,
    );
  });
});
