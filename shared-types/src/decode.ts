/** Decoding and validating raw input records. Never throws: a bad input becomes a reason. */
import { INPUT_TYPES, type InputType } from './constants.ts';
import { INPUT_SCHEMAS, type InputMsg } from './inputs.ts';
import { outputSchema, type OutputMsg } from './outputs.ts';
import { formatIssues } from './reasons.ts';
import { isContractTs } from './time.ts';

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

/** Parse one raw record or tape line: JSON.parse, then validate. */
export function decodeInput(raw: string): DecodeResult {
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
