// The contract's level rules ("alert" section of contract v1), edge by edge. Thresholds are picked
// so that value / bound is exactly representable (950 / 1000 is the double nearest 0.95, and so is
// 1 - 0.05), so "exactly at the threshold" is tested exactly.
import { describe, expect, it } from 'vitest';
import { boundFor, nextLevel, transitionState, utilization } from './levels.ts';

const W = 0.8;
const H = 0.05;

describe('utilization (contract: value/max when value >= 0 and max set, value/min when value < 0 and min set, else 0)', () => {
  it('measures against the side the value is on', () => {
    expect(utilization(500, 1000, -2000)).toBe(0.5);
    expect(utilization(-500, 1000, -2000)).toBe(0.25);
    expect(utilization(0, 1000, -2000)).toBe(0);
  });
  it('is 0 on a side with no bound', () => {
    expect(utilization(-500, 1000, undefined)).toBe(0);
    expect(utilization(500, undefined, -1000)).toBe(0);
  });
  it('names the bound it measured against, or the other one', () => {
    expect(boundFor(5, 10, -20)).toBe(10);
    expect(boundFor(-5, 10, -20)).toBe(-20);
    expect(boundFor(5, undefined, -20)).toBe(-20);
  });
});

describe('nextLevel: the contract example (warnAt 0.8, hysteresis 0.05, in breach)', () => {
  it('u 0.97 stays breach, 0.9 eases to warning, 0.7 clears', () => {
    expect(nextLevel('breach', 0.97, W, H)).toBe('breach');
    expect(nextLevel('breach', 0.9, W, H)).toBe('warning');
    expect(nextLevel('breach', 0.7, W, H)).toBe('ok');
  });
});

describe('nextLevel: going up takes the highest level reached', () => {
  it('from ok', () => {
    expect(nextLevel('ok', 0.79, W, H)).toBe('ok');
    expect(nextLevel('ok', 0.8, W, H)).toBe('warning'); // exactly at warnAt
    expect(nextLevel('ok', 0.99, W, H)).toBe('warning');
    expect(nextLevel('ok', 1, W, H)).toBe('breach'); // exactly at 1
    expect(nextLevel('ok', 3, W, H)).toBe('breach');
  });
  it('from warning', () => {
    expect(nextLevel('warning', 1, W, H)).toBe('breach');
    expect(nextLevel('warning', 0.999, W, H)).toBe('warning');
  });
});

describe('nextLevel: going down keeps the level while u >= threshold - hysteresis', () => {
  it('breach held down to exactly 1 - h', () => {
    expect(nextLevel('breach', 950 / 1000, W, H)).toBe('breach');
    expect(nextLevel('breach', 949.999 / 1000, W, H)).toBe('warning');
  });
  it('warning held down to exactly warnAt - h', () => {
    expect(nextLevel('warning', 750 / 1000, W, H)).toBe('warning');
    expect(nextLevel('warning', 749.999 / 1000, W, H)).toBe('ok');
  });
  it('from breach straight to ok when u is below warnAt - h', () => {
    expect(nextLevel('breach', 0.749, W, H)).toBe('ok');
    expect(nextLevel('breach', 0.75, W, H)).toBe('warning');
  });
  it('with hysteresis 0 it falls as soon as u is under the threshold', () => {
    expect(nextLevel('breach', 0.9999, W, 0)).toBe('warning');
    expect(nextLevel('warning', 0.7999, W, 0)).toBe('ok');
  });
  it('is idempotent: the same u never changes the level twice', () => {
    for (const u of [0, 0.5, 0.75, 0.76, 0.8, 0.9, 0.95, 0.97, 1, 2]) {
      for (const l of ['ok', 'warning', 'breach'] as const) {
        const once = nextLevel(l, u, W, H);
        expect(nextLevel(once, u, W, H)).toBe(once);
      }
    }
  });
});

describe('transitionState', () => {
  it('names every change the contract lists', () => {
    expect(transitionState('ok', 'warning')).toBe('raised');
    expect(transitionState('ok', 'breach')).toBe('raised');
    expect(transitionState('warning', 'breach')).toBe('escalated');
    expect(transitionState('breach', 'warning')).toBe('eased');
    expect(transitionState('warning', 'ok')).toBe('cleared');
    expect(transitionState('breach', 'ok')).toBe('cleared');
  });
});
