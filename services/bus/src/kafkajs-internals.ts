// Where the replacements of kafkajs's internals (kafkajs-fast-paths.ts) find kafkajs's own modules.
import { createRequire } from 'node:module';

export const kafkajsRequire = createRequire(import.meta.url);

/** The kafkajs release whose internal layout the replacements know. */
const KNOWN_KAFKAJS = '2.2.4';

/** kafkajs's package directory, with a trailing slash. */
export function kafkajsRoot(): string {
  return kafkajsRequire.resolve('kafkajs/package.json').replace(/package\.json$/, '');
}

/** True when the installed kafkajs is the release the replacements were written against. */
export function isKnownKafkajs(): boolean {
  return (kafkajsRequire(kafkajsRoot() + 'package.json') as { version: string }).version === KNOWN_KAFKAJS;
}

/**
 * Puts `make(original)` in kafkajs's module cache in place of its module at `path` (relative to
 * kafkajs's root), so that every kafkajs module loaded afterwards gets ours. False, with kafkajs's
 * own left in place, when kafkajs is another release or when one of `capturedBy` (the modules that
 * take the original when they load) is loaded already. A `capturedBy` entry this release lacks is
 * skipped.
 */
export function replaceKafkajsModule<T>(
  path: string,
  capturedBy: readonly string[],
  make: (original: T) => T,
): boolean {
  if (!isKnownKafkajs()) return false;
  const root = kafkajsRoot();
  for (const c of capturedBy) {
    let resolved: string;
    try {
      resolved = kafkajsRequire.resolve(root + c);
    } catch {
      continue;
    }
    if (kafkajsRequire.cache[resolved]) return false;
  }
  const resolved = kafkajsRequire.resolve(root + path);
  const original = kafkajsRequire(resolved) as T;
  const cached = kafkajsRequire.cache[resolved];
  if (!cached) return false;
  cached.exports = make(original);
  return true;
}
