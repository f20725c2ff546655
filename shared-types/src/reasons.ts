/**
 * Turns zod issues into the contract's reasons: message type, then the field path, then what is
 * wrong, e.g. `vol-surface.vols[1][3] must be > 0 and <= 10`.
 */
import type { z } from 'zod';

/** How many problems one reason lists at most; the rest would only bury the first. */
export const MAX_REASONS = 3;

export function formatPath(prefix: string, path: readonly PropertyKey[]): string {
  let out = prefix;
  for (const seg of path) {
    if (typeof seg === 'number') out += `[${seg}]`;
    else out += out === '' ? String(seg) : `.${String(seg)}`;
  }
  return out;
}

function article(word: string): string {
  return /^[aeiou]/.test(word) ? `an ${word}` : `a ${word}`;
}

function listValues(values: readonly unknown[]): string {
  return values.map((v) => String(v)).join(', ');
}

/** zod's own messages start so; anything else is a reason written in our schemas. */
const ZOD_DEFAULT = /^(Invalid|Too (small|big))/;

function describe(issue: z.core.$ZodIssue): string {
  if (!ZOD_DEFAULT.test(issue.message)) return issue.message;
  switch (issue.code) {
    case 'invalid_type': {
      if (issue.message.endsWith('received undefined')) return 'is required';
      const received = (issue as { received?: unknown }).received;
      if (received === 'NaN' || received === 'Infinity' || received === '-Infinity') {
        return 'must be a finite number';
      }
      if (issue.expected === 'int') return 'must be an integer';
      return `must be ${article(String(issue.expected))}`;
    }
    case 'invalid_value':
      return issue.values.length === 1
        ? `must be ${JSON.stringify(issue.values[0])}`
        : `must be one of ${listValues(issue.values)}`;
    case 'invalid_union':
      if ('options' in issue && Array.isArray(issue.options) && issue.options.length > 0) {
        return `must be one of ${listValues(issue.options)}`;
      }
      return 'does not match any allowed shape';
    case 'too_small':
      return `must be ${issue.inclusive ? '>=' : '>'} ${String(issue.minimum)}`;
    case 'too_big':
      return `must be ${issue.inclusive ? '<=' : '<'} ${String(issue.maximum)}`;
    default:
      return issue.message;
  }
}

/** One issue as a reason, e.g. prefix 'spot' and path ['price'] give `spot.price must be > 0`. */
export function formatIssue(prefix: string, issue: z.core.$ZodIssue): string {
  const subject = formatPath(prefix, issue.path);
  return `${subject === '' ? 'message' : subject} ${describe(issue)}`;
}

/** The first few issues, joined with '; ' (duplicates, which unions can produce, once). */
export function formatIssues(prefix: string, issues: readonly z.core.$ZodIssue[]): string {
  const seen = new Set<string>();
  for (const issue of issues) {
    seen.add(formatIssue(prefix, issue));
    if (seen.size >= MAX_REASONS) break;
  }
  return [...seen].join('; ');
}
