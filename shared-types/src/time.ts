/**
 * Contract timestamps: ISO-8601 instants in UTC with a `Z` suffix, milliseconds optional.
 *
 * Decisions the contract leaves open (documented here and in the package README):
 * - The fraction of a second may have 1 to 3 digits. Finer precision (microseconds) is rejected
 *   rather than truncated, so that a timestamp always round-trips exactly through epoch ms.
 * - Offsets other than `Z` (`+00:00`, `+01:00`) and bare local times are rejected.
 * - Second 60 (a leap second) is rejected: epoch milliseconds cannot represent it.
 * - Impossible calendar dates (2026-02-30, 2025-02-29, month 13, hour 24) are rejected.
 */

const ISO_UTC = /^(\d{4})-(\d{2})-(\d{2})T(\d{2}):(\d{2}):(\d{2})(?:\.(\d{1,3}))?Z$/;

const DAYS_IN_MONTH = [31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31] as const;

function isLeapYear(y: number): boolean {
  return (y % 4 === 0 && y % 100 !== 0) || y % 400 === 0;
}

export type TsProblem = 'format' | 'calendar';

/** Why a string is not a contract timestamp, or null when it is one. */
export function tsProblem(s: string): TsProblem | null {
  const m = ISO_UTC.exec(s);
  if (m === null) return 'format';
  const year = Number(m[1]);
  const month = Number(m[2]);
  const day = Number(m[3]);
  const hour = Number(m[4]);
  const minute = Number(m[5]);
  const second = Number(m[6]);
  if (month < 1 || month > 12) return 'calendar';
  const monthDays = month === 2 && isLeapYear(year) ? 29 : (DAYS_IN_MONTH[month - 1] ?? 0);
  if (day < 1 || day > monthDays) return 'calendar';
  if (hour > 23 || minute > 59 || second > 59) return 'calendar';
  return null;
}

export function isContractTs(s: string): boolean {
  return tsProblem(s) === null;
}

/**
 * Epoch milliseconds of a contract timestamp. Throws a RangeError on anything that is not one,
 * so that a NaN never leaks into valuation time.
 */
export function parseTs(iso: string): number {
  const problem = tsProblem(iso);
  if (problem !== null) {
    throw new RangeError(`not an ISO-8601 UTC timestamp: ${JSON.stringify(iso)}`);
  }
  return Date.parse(iso);
}

/** The contract form of an instant, always with milliseconds: 2026-03-02T14:30:00.125Z. */
export function formatTs(ms: number): string {
  if (!Number.isFinite(ms)) throw new RangeError(`not a finite epoch ms: ${ms}`);
  return new Date(ms).toISOString();
}
