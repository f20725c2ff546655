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
