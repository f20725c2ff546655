/** Decoding and validating raw input records. Never throws: a bad input becomes a reason. */
import { INPUT_TYPES, type InputType } from './constants.ts';
import { INPUT_SCHEMAS, type InputMsg, type SpotMsg } from './inputs.ts';
import { outputSchema, type OutputMsg } from './outputs.ts';
import { formatIssues } from './reasons.ts';
import { contractTsMsAt, isContractTs } from './time.ts';

export type DecodeResult = { ok: true; msg: InputMsg } | { ok: false; reason: string };

const TYPE_REASON = `type must be one of ${INPUT_TYPES.join(', ')}`;

function isInputType(t: unknown): t is InputType {
  return typeof t === 'string' && (INPUT_TYPES as readonly string[]).includes(t);
}

const NAME = /^[^\s/=]{1,64}$/;

/**
 * Spots are most of the traffic: a valid one is recognised by hand, several times faster than
 * the schema. Anything it does not accept goes through the schema, which alone words reasons,
 * so the result is the same either way (a test holds the two to it).
 */
function fastSpot(o: Record<string, unknown>): DecodeResult | null {
  const { underlying, price, ts } = o;
  if (
    typeof underlying === 'string' &&
    NAME.test(underlying) &&
    typeof price === 'number' &&
    Number.isFinite(price) &&
    price > 0 &&
    typeof ts === 'string' &&
    isContractTs(ts)
  ) {
    return { ok: true, msg: { type: 'spot', underlying, price, ts } };
  }
  return null;
}

/** Validate one already-parsed object against the contract. */
export function validateInput(obj: unknown): DecodeResult {
  if (typeof obj !== 'object' || obj === null || Array.isArray(obj)) {
    return { ok: false, reason: 'message must be a JSON object' };
  }
  const type = (obj as { type?: unknown }).type;
  if (type === 'spot') {
    try {
      const fast = fastSpot(obj as Record<string, unknown>);
      if (fast !== null) return fast;
    } catch {
      // a throwing getter: let the schema path below report it
    }
  }
  if (!isInputType(type)) {
    return {
      ok: false,
      reason: type === undefined ? `type is required; ${TYPE_REASON}` : TYPE_REASON,
    };
  }
  try {
    const result = INPUT_SCHEMAS[type].safeParse(obj);
    if (result.success) return { ok: true, msg: result.data as InputMsg };
    return { ok: false, reason: formatIssues(type, result.error.issues) };
  } catch (err) {
    // A getter or proxy in a hand-built object could throw; the contract says never throw.
    return { ok: false, reason: `${type} could not be validated: ${String(err)}` };
  }
}

const SPOT_HEAD = '{"type":"spot","underlying":"';
const PRICE_KEY = '","price":';
const TS_KEY = ',"ts":"';

/** raw.startsWith(lit, at), several times faster in V8 as a slice compared whole. */
function hasAt(raw: string, at: number, lit: string): boolean {
  return raw.slice(at, at + lit.length) === lit;
}

/** What scanSpot read: reused from record to record (nothing is allocated per record but the name). */
export interface SpotScan {
  underlying: string;
  price: number;
  /** Epoch ms of the timestamp. */
  tsMs: number;
  /** The timestamp is raw.slice(tsFrom, raw.length - 2). */
  tsFrom: number;
}

/**
 * A spot record in exactly the form JSON.stringify gives a contract spot (keys in contract order,
 * no whitespace, no escapes) is read here without JSON.parse, into `out`; for anything else it
 * returns false and the record takes the general path. Every record this accepts, JSON.parse
 * plus the validator accept too, with the same message (a test holds the two to it).
 */
export function scanSpot(raw: string, out: SpotScan): boolean {
  if (!hasAt(raw, 0, SPOT_HEAD)) return false;
  const uStart = SPOT_HEAD.length;
  const uEnd = raw.indexOf('"', uStart);
  if (uEnd < 0 || !hasAt(raw, uEnd, PRICE_KEY)) return false;
  const pStart = uEnd + PRICE_KEY.length;
  const pEnd = raw.indexOf(',', pStart);
  if (pEnd < 0 || !hasAt(raw, pEnd, TS_KEY)) return false;
  const tStart = pEnd + TS_KEY.length;
  const tEnd = raw.length - 2;
  if (tEnd < tStart || raw.charCodeAt(tEnd) !== 34 || raw.charCodeAt(tEnd + 1) !== 125) return false;
  // The name: NAME's rule (1 to 64 code units, no \s, / or =) checked in place.
  if (uEnd - uStart < 1 || uEnd - uStart > 64) return false;
  for (let i = uStart; i < uEnd; i++) {
    const c = raw.charCodeAt(i);
    // JSON strings hold no raw control characters; an escape is left to JSON.parse
    if (c < 0x20 || c === 92 || c === 47 || c === 61 || isJsSpaceFrom20(c)) return false;
  }
  const price = jsonNumberAt(raw, pStart, pEnd);
  if (!(price > 0) || !Number.isFinite(price)) return false;
  // ts: contract timestamps are plain ASCII, so a range contractTsMsAt accepts has no escape
  const tsMs = contractTsMsAt(raw, tStart, tEnd);
  if (Number.isNaN(tsMs)) return false;
  const underlying = raw.slice(uStart, uEnd);
  out.underlying = underlying;
  out.price = price;
  out.tsMs = tsMs;
  out.tsFrom = tStart;
  return true;
}

/** The message scanSpot read from `raw`. */
export function scannedSpot(raw: string, scan: SpotScan): SpotMsg {
  return {
    type: 'spot',
    underlying: scan.underlying,
    price: scan.price,
    ts: raw.slice(scan.tsFrom, raw.length - 2),
  };
}

const scratch: SpotScan = { underlying: '', price: 0, tsMs: 0, tsFrom: 0 };

// Module-level, not a closure per call: the streaming path reads one number per record.
function isDigitAt(s: string, k: number): boolean {
  const c = s.charCodeAt(k);
  return c >= 48 && c <= 57;
}

const POW10 = [
  1, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19,
  1e20, 1e21, 1e22,
];

/**
 * The JSON number (RFC 8259 section 6: -? (0 | [1-9][0-9]*) (. [0-9]+)? ([eE] [+-]? [0-9]+)?)
 * written in s[from..to), or NaN when that is not one. A plain decimal of at most 15 digits is
 * m / 10^k with m and 10^k exact doubles, which IEEE division rounds correctly, the value Number()
 * gives (Clinger's fast path); anything else is read by Number().
 */
function jsonNumberAt(s: string, from: number, to: number): number {
  let i = from;
  const negative = s.charCodeAt(i) === 45;
  if (negative) i++;
  if (i >= to || !isDigitAt(s, i)) return Number.NaN;
  let m = 0;
  let digits = 0;
  let scale = 0;
  if (s.charCodeAt(i) === 48) i++;
  else
    while (i < to && isDigitAt(s, i)) {
      m = m * 10 + (s.charCodeAt(i++) - 48);
      digits++;
    }
  if (i < to && s.charCodeAt(i) === 46) {
    i++;
    if (i >= to || !isDigitAt(s, i)) return Number.NaN;
    while (i < to && isDigitAt(s, i)) {
      m = m * 10 + (s.charCodeAt(i++) - 48);
      digits++;
      scale++;
    }
  }
  let plain = true;
  if (i < to && (s.charCodeAt(i) === 101 || s.charCodeAt(i) === 69)) {
    plain = false;
    i++;
    if (i < to && (s.charCodeAt(i) === 43 || s.charCodeAt(i) === 45)) i++;
    if (i >= to || !isDigitAt(s, i)) return Number.NaN;
    while (i < to && isDigitAt(s, i)) i++;
  }
  if (i !== to) return Number.NaN;
  if (!plain || digits > 15) return Number(s.slice(from, to));
  const v = m / (POW10[scale] as number);
  return negative ? -v : v;
}

/** JSON's whitespace is not the question here: the characters JavaScript's \s matches at or above U+0020. */
function isJsSpaceFrom20(c: number): boolean {
  return (
    c === 0x20 ||
    c === 0xa0 ||
    c === 0x1680 ||
    (c >= 0x2000 && c <= 0x200a) ||
    c === 0x2028 ||
    c === 0x2029 ||
    c === 0x202f ||
    c === 0x205f ||
    c === 0x3000 ||
    c === 0xfeff
  );
}

/** Parse one raw record or tape line: JSON.parse, then validate. */
export function decodeInput(raw: string): DecodeResult {
  if (scanSpot(raw, scratch)) return { ok: true, msg: scannedSpot(raw, scratch) };
  let obj: unknown;
  try {
    obj = JSON.parse(raw);
  } catch (err) {
    const detail = err instanceof Error ? err.message : String(err);
    return { ok: false, reason: `invalid JSON: ${detail}` };
  }
  return validateInput(obj);
}

export type OutputCheck = { ok: true; msg: OutputMsg } | { ok: false; reason: string };

const OUTPUT_TYPES = ['exposure', 'alert', 'stale-feed', 'rejected'] as const;

/**
 * Validate a message we are about to publish (or one a consumer read): tests and the
 * aggregator use it to prove nothing NaN, unknown or malformed leaves the system.
 */
export function validateOutput(obj: unknown): OutputCheck {
  if (typeof obj !== 'object' || obj === null || Array.isArray(obj)) {
    return { ok: false, reason: 'message must be a JSON object' };
  }
  const type = (obj as { type?: unknown }).type;
  if (typeof type !== 'string' || !(OUTPUT_TYPES as readonly string[]).includes(type)) {
    return { ok: false, reason: `type must be one of ${OUTPUT_TYPES.join(', ')}` };
  }
  const result = outputSchema.safeParse(obj);
  if (result.success) return { ok: true, msg: result.data };
  return { ok: false, reason: formatIssues(type, result.error.issues) };
}
