/**
 * Field schemas shared by the messages. Each carries its human-readable reason as the issue
 * message ("must be > 0"); `reasons.ts` prefixes it with the message type and the field path.
 */
import { z } from 'zod';
import { isContractTs, tsProblem } from './time.ts';

/**
 * Names of desks, books and underlyings become parts of node keys (`desk=X/book=Y`), so they
 * may not contain the key separators '/' and '=' nor whitespace, which would make keys ambiguous.
 * The 64-character cap keeps keys and metric labels bounded.
 */
const NAME = /^[^\s/=]{1,64}$/;
export const nameField = z.string().regex(NAME, "must be 1 to 64 characters without spaces, '/' or '='");

/** Trade and limit ids: opaque to us, but never empty and without whitespace (they are bus keys). */
const ID = /^\S{1,128}$/;
export const idField = z.string().regex(ID, 'must be 1 to 128 characters without spaces');

export const currencyField = z
  .string()
  .regex(/^[A-Z]{3}$/, 'must be a three-letter upper-case currency code');

export const tsField = z.string().superRefine((s, ctx) => {
  if (isContractTs(s)) return;
  ctx.addIssue({
    code: 'custom',
    message:
      tsProblem(s) === 'calendar'
        ? `must be a real date and time (got ${JSON.stringify(s)})`
        : 'must be an ISO-8601 UTC timestamp with Z, like 2026-03-02T14:30:00.125Z',
  });
});

/** Finite is implied: zod 4 numbers reject NaN and the infinities. */
export const finiteNumber = z.number();
export const positiveNumber = z.number().gt(0, 'must be > 0');

export const versionField = z.number().int('must be an integer >= 1').gte(1, 'must be an integer >= 1');

/**
 * Rates and yields are decimals. A magnitude above 1 (100%) is taken for a units mistake
 * (4.3 meant 4.3%) and rejected rather than guessed at.
 */
export const rateField = z
  .number()
  .gte(-1, 'must be a decimal between -1 and 1 (0.04 = 4%)')
  .lte(1, 'must be a decimal between -1 and 1 (0.04 = 4%)');

/** Adds "must be strictly increasing" on the array, naming the first pair out of order. */
export function checkStrictlyIncreasing(
  values: readonly number[] | readonly string[],
  path: (string | number)[],
  ctx: z.RefinementCtx,
  compareAs: (v: number | string) => number = Number,
): void {
  const name = String(path.at(-1) ?? 'values');
  for (let i = 1; i < values.length; i++) {
    const prev = values[i - 1];
    const cur = values[i];
    if (prev === undefined || cur === undefined) continue;
    if (!(compareAs(cur) > compareAs(prev))) {
      ctx.addIssue({
        code: 'custom',
        path,
        message: `must be strictly increasing (${name}[${i}] = ${JSON.stringify(cur)} is not above ${name}[${i - 1}] = ${JSON.stringify(prev)})`,
      });
      return;
    }
  }
}

/** Run a refinement only when the object parsed cleanly, so it never sees half-valid data. */
export const whenClean = {
  when: (payload: { issues: readonly unknown[] }) => payload.issues.length === 0,
};
