import { describe, expect, it } from 'vitest';
import { contractTsMs, formatTs, isContractTs, parseTs } from './time.ts';

describe('contract timestamps', () => {
  it('parses UTC instants with and without milliseconds', () => {
    // Epoch values from the POSIX definition (seconds since 1970-01-01T00:00:00Z, 86 400 a day):
    // 2026-03-02 is day 20514 since the epoch (1 772 409 600 s), computed by hand from
    // 56 years x 365 + 14 leap days + 60 days of 2026.
    expect(parseTs('2026-03-02T00:00:00Z')).toBe(1_772_409_600_000);
    expect(parseTs('2026-03-02T14:30:00.125Z')).toBe(1_772_409_600_000 + 52_200_125);
    expect(parseTs('2026-03-02T14:30:00.1Z')).toBe(1_772_409_600_000 + 52_200_100);
    expect(parseTs('1970-01-01T00:00:00Z')).toBe(0);
  });

  it('rejects offsets, local times and precision finer than ms (ISO 8601 allows them; the contract does not)', () => {
    for (const s of [
      '2026-03-02T14:30:00+00:00',
      '2026-03-02T14:30:00+01:00',
      '2026-03-02T14:30:00',
      '2026-03-02 14:30:00Z',
      '2026-03-02',
      '2026-03-02T14:30:00.1234Z',
      '2026-03-02T14:30Z',
      '',
    ]) {
      expect(isContractTs(s), s).toBe(false);
    }
  });

  it('rejects impossible calendar dates (Gregorian leap-year rule: /4, not /100 unless /400)', () => {
    expect(isContractTs('2024-02-29T00:00:00Z')).toBe(true);
    expect(isContractTs('2000-02-29T00:00:00Z')).toBe(true);
    expect(isContractTs('2025-02-29T00:00:00Z')).toBe(false);
    expect(isContractTs('1900-02-29T00:00:00Z')).toBe(false);
    expect(isContractTs('2026-04-31T00:00:00Z')).toBe(false);
    expect(isContractTs('2026-13-01T00:00:00Z')).toBe(false);
    expect(isContractTs('2026-00-10T00:00:00Z')).toBe(false);
    expect(isContractTs('2026-03-02T24:00:00Z')).toBe(false);
    expect(isContractTs('2026-03-02T23:60:00Z')).toBe(false);
    expect(isContractTs('2026-12-31T23:59:60Z')).toBe(false); // leap second: not representable in epoch ms
  });

  it('throws on a non-timestamp instead of returning NaN', () => {
    expect(() => parseTs('yesterday')).toThrow(RangeError);
  });

  it('formats with milliseconds and round-trips', () => {
    expect(formatTs(1_772_409_600_000 + 52_200_125)).toBe('2026-03-02T14:30:00.125Z');
    expect(parseTs(formatTs(123_456_789))).toBe(123_456_789);
  });

  it('contractTsMs reads every string as isContractTs and Date.parse (ECMAScript) together do', () => {
    // The reference: `isContractTs(s) ? Date.parse(s) : NaN`. Strings: valid instants over years
    // 0..9999 (two-digit years included, which Date.UTC would shift), each mutated at one place.
    let seed = 17;
    const r = () => (seed = (Math.imul(seed, 1103515245) + 12345) >>> 0) / 2 ** 32;
    const alphabet = '0123456789-:.TZz+ 9';
    const reference = (s: string) => (isContractTs(s) ? Date.parse(s) : Number.NaN);
    let valid = 0;
    for (let i = 0; i < 40_000; i++) {
      const ms = Math.floor((r() * 2 - 1) * 62_000_000_000_000) + (r() < 0.1 ? -62_000_000_000_000 : 0);
      let s = new Date(ms).toISOString();
      if (s.startsWith('-') || s.startsWith('+')) s = '1999-12-31T23:59:59.999Z';
      const cut = r();
      if (cut < 0.2) s = s.replace(/\.\d+Z$/, 'Z');
      else if (cut < 0.3) s = s.replace(/(\.\d)\d\dZ$/, '$1Z');
      else if (cut < 0.4) s = s.replace(/(\.\d\d)\dZ$/, '$1Z');
      if (r() < 0.5) {
        const at = Math.floor(r() * (s.length + 1));
        const c = alphabet[Math.floor(r() * alphabet.length)]!;
        const op = r();
        s =
          op < 0.4
            ? s.slice(0, at) + c + s.slice(at + 1)
            : op < 0.7
              ? s.slice(0, at) + c + s.slice(at)
              : s.slice(0, at) + s.slice(at + 1);
      }
      const want = reference(s);
      if (!Number.isNaN(want)) valid++;
      expect(Object.is(contractTsMs(s), want) || contractTsMs(s) === want, s).toBe(true);
    }
    expect(valid).toBeGreaterThan(15_000);
    for (const s of [
      '0000-01-01T00:00:00Z',
      '0050-02-28T12:00:00.5Z',
      '2000-02-29T23:59:59.99Z',
      '2024-02-30T00:00:00Z',
    ])
      expect(contractTsMs(s), s).toEqual(reference(s));
  });
});
