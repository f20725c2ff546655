import { describe, expect, it } from 'vitest';
import { formatTs, isContractTs, parseTs } from './time.ts';

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
});
