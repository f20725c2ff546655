/** The spot fast path must agree with the schema on every input, valid or not. */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { validateInput } from './decode.ts';
import { formatIssues } from './reasons.ts';
import { spotSchema } from './inputs.ts';

function viaSchema(obj: unknown) {
  const r = spotSchema.safeParse(obj);
  return r.success ? { ok: true, msg: r.data } : { ok: false, reason: formatIssues('spot', r.error.issues) };
}

describe('spot fast path', () => {
  it('agrees with the schema on arbitrary spot-like objects', () => {
    const name = fc.oneof(
      fc.constantFrom('NIMBUS', 'A', 'A/B', 'A B', '', 'x'.repeat(65), 'EURUSD'),
      fc.string(),
    );
    const price = fc.oneof(
      fc.double(),
      fc.constantFrom(0, -1, 1, 1e-300, Number.MAX_VALUE),
      fc.string(),
      fc.constant(null),
    );
    const ts = fc.oneof(
      fc.constantFrom(
        '2026-03-02T14:30:00Z',
        '2026-03-02T14:30:00.125Z',
        '2026-02-30T00:00:00Z',
        '2026-03-02T14:30:00+00:00',
        '',
      ),
      fc.date({ noInvalidDate: true }).map((d) => d.toISOString()),
      fc.string(),
    );
    fc.assert(
      fc.property(name, price, ts, fc.option(fc.string()), (underlying, p, t, extra) => {
        const obj = { type: 'spot', underlying, price: p, ts: t, ...(extra === null ? {} : { extra }) };
        expect(validateInput(obj)).toEqual(viaSchema(obj));
      }),
      { numRuns: 3000, seed: 42 },
    );
  });
});
