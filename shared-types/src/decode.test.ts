/** The spot fast path must agree with the schema on every input, valid or not. */
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { decodeInput, validateInput } from './decode.ts';
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

  it('reading a raw spot by hand gives what JSON.parse and the validator give, on every string', () => {
    // The reference: JSON.parse (ECMAScript) then validateInput. Strings: JSON.stringify of
    // spot-like objects (the form the hand reader takes), then mutated at one place.
    const general = (raw: string) => {
      let obj: unknown;
      try {
        obj = JSON.parse(raw);
      } catch {
        return 'invalid JSON';
      }
      return validateInput(obj);
    };
    const name = fc.oneof(
      fc.constantFrom(
        'NIMBUS',
        'A',
        'A/B',
        'A=B',
        'A B',
        'A\u00a0B',
        'A\u2028B',
        '\ufeffA',
        'A\u3000',
        'x'.repeat(64),
        'x'.repeat(65),
        'A"B',
        'A\\B',
        'é',
        '\u0001',
        '',
      ),
      fc.string(),
    );
    const price = fc.oneof(
      fc.double(),
      fc.constantFrom(0, 1, 101.25, 1e-7, 1e21, 5e-324, Number.MAX_VALUE),
      fc.constant('1'),
    );
    const ts = fc.oneof(
      fc.constantFrom(
        '2026-03-02T14:30:00Z',
        '2026-03-02T14:30:00.125Z',
        '2026-02-30T00:00:00Z',
        '0050-01-01T00:00:00.5Z',
      ),
      fc.date({ noInvalidDate: true }).map((d) => d.toISOString()),
    );
    const edit = fc.record({
      at: fc.nat(),
      ch: fc.constantFrom('', ' ', '\u0001', '\t', '"', ',', '\\', '0', '-', '.', 'e', '+', '}', 'x'),
      keep: fc.boolean(),
    });
    fc.assert(
      fc.property(name, price, ts, fc.option(edit), (underlying, p, t, e) => {
        let raw = JSON.stringify({ type: 'spot', underlying, price: p, ts: t });
        if (e) {
          const at = e.at % (raw.length + 1);
          raw = raw.slice(0, at) + e.ch + raw.slice(e.keep ? at : at + 1);
        }
        const want = general(raw);
        const got = decodeInput(raw);
        if (want === 'invalid JSON') expect(got.ok, raw).toBe(false);
        else expect(got, raw).toEqual(want);
      }),
      { numRuns: 20_000, seed: 7 },
    );
    // numbers JSON does not allow, which Number() would read
    for (const p of ['01', '+1', '.5', '1.', '0x10', 'Infinity', '1e', '1_0'])
      expect(
        decodeInput(`{"type":"spot","underlying":"A","price":${p},"ts":"2026-03-02T14:30:00Z"}`).ok,
        p,
      ).toBe(false);
    expect(decodeInput('{"type":"spot","underlying":"A","price":1.5e2,"ts":"2026-03-02T14:30:00Z"}')).toEqual(
      {
        ok: true,
        msg: { type: 'spot', underlying: 'A', price: 150, ts: '2026-03-02T14:30:00Z' },
      },
    );
  });

  it('reads plain decimal prices of up to 15 digits exactly as Number() does (ECMAScript, correctly rounded)', () => {
    let seed = 99;
    const r = () => (seed = (Math.imul(seed, 1103515245) + 12345) >>> 0) / 2 ** 32;
    for (let n = 0; n < 50_000; n++) {
      const digits = 1 + Math.floor(r() * 15);
      let d = String(1 + Math.floor(r() * 9));
      for (let k = 1; k < digits; k++) d += String(Math.floor(r() * 10));
      const point = Math.floor(r() * digits);
      const text = point === 0 ? d : `${d.slice(0, point)}.${d.slice(point)}`;
      const raw = `{"type":"spot","underlying":"A","price":${text},"ts":"2026-03-02T14:30:00Z"}`;
      const got = decodeInput(raw);
      expect(got.ok && got.msg.type === 'spot' && got.msg.price, text).toBe(Number(text));
    }
  });
});
