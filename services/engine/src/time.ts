// Timestamps on the hot path. Inputs reaching the engine have passed the contract schemas, whose
// timestamp rule (ISO-8601 UTC with Z, real calendar dates) Date.parse reads exactly, so the
// regular-expression check of parseTs is not repeated per message.
import { formatTs } from '@keelson/shared-types';

export function msOf(validatedTs: string): number {
  return Date.parse(validatedTs);
}

let lastMs = Number.NaN;
let lastIso = '';

/** formatTs, remembering the last value: a drain stamps most nodes with the same valuation time. */
export function isoOf(ms: number): string {
  if (ms !== lastMs) {
    lastIso = formatTs(ms);
    lastMs = ms;
  }
  return lastIso;
}
