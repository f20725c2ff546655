// One reading of numeric command-line options for every command, so that each says a bad value the
// same way: `--NAME must be an integer >= 1, got 'x'`.

/** A command-line mistake: the command prints its message and exits 1. */
export class UsageError extends Error {}

export interface NumberRule {
  min: number;
  /** true: the value must exceed min; false (default): it may equal it. */
  strict?: boolean;
  integer?: boolean;
}

/** The option's value as a number, or undefined when it was not given; a UsageError otherwise. */
export function numberOption(name: string, raw: string | undefined, rule: NumberRule): number | undefined {
  if (raw === undefined) return undefined;
  const n = Number(raw);
  const { min, strict = false, integer = false } = rule;
  const ok = Number.isFinite(n) && (strict ? n > min : n >= min) && (!integer || Number.isInteger(n));
  if (!ok)
    throw new UsageError(
      `--${name} must be ${integer ? 'an integer' : 'a number'} ${strict ? '>' : '>='} ${min}, got '${raw}'`,
    );
  return n;
}
