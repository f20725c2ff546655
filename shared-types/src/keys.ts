/** Topic names, bus keys and node keys: the conventions every package must agree on. */
import type { InputMsg } from './inputs.ts';

/** Logical topic names; the transport adds its prefix (default 'keelson.'). */
export const TOPICS = {
  refdata: 'refdata',
  spots: 'spots',
  vols: 'vols',
  curves: 'curves',
  trades: 'trades',
  limits: 'limits',
  exposures: 'exposures',
  alerts: 'alerts',
  rejected: 'rejected',
  partials: 'partials',
} as const;
export type TopicName = (typeof TOPICS)[keyof typeof TOPICS];

/** The input topics, in the order a rebuilding consumer should read them (static data first). */
export const INPUT_TOPICS: readonly TopicName[] = [
  TOPICS.refdata,
  TOPICS.curves,
  TOPICS.vols,
  TOPICS.spots,
  TOPICS.limits,
  TOPICS.trades,
];

export const DEFAULT_TOPIC_PREFIX = 'keelson.';

export function inputTopic(msg: InputMsg): TopicName {
  switch (msg.type) {
    case 'underlying':
      return TOPICS.refdata;
    case 'spot':
      return TOPICS.spots;
    case 'vol-surface':
      return TOPICS.vols;
    case 'curve':
      return TOPICS.curves;
    case 'trade':
      return TOPICS.trades;
    case 'limit':
    case 'limit-remove':
      return TOPICS.limits;
  }
}

/** The bus key: underlying for market data and trades, currency for curves, limitId for limits. */
export function inputKey(msg: InputMsg): string {
  switch (msg.type) {
    case 'underlying':
    case 'spot':
    case 'vol-surface':
    case 'trade':
      return msg.underlying;
    case 'curve':
      return msg.currency;
    case 'limit':
    case 'limit-remove':
      return msg.limitId;
  }
}

export interface NodeLike {
  desk?: string | undefined;
  book?: string | undefined;
  underlying?: string | undefined;
  tenor?: string | undefined;
}

/** `desk=X/book=Y/underlying=Z/tenor=T` in that order, absent or empty parts left out; 'firm' when none. */
export function nodeKey(node: NodeLike): string {
  let key = '';
  if (node.desk) key = `desk=${node.desk}`;
  if (node.book) key += `${key ? '/' : ''}book=${node.book}`;
  if (node.underlying) key += `${key ? '/' : ''}underlying=${node.underlying}`;
  if (node.tenor) key += `${key ? '/' : ''}tenor=${node.tenor}`;
  return key || 'firm';
}

const NODE_DIMS = ['desk', 'book', 'underlying', 'tenor'] as const;

/** The inverse of nodeKey, for consumers that receive only the key. Throws on a malformed key. */
export function parseNodeKey(key: string): {
  desk?: string;
  book?: string;
  underlying?: string;
  tenor?: string;
} {
  const out: { desk?: string; book?: string; underlying?: string; tenor?: string } = {};
  if (key === 'firm') return out;
  let lastDim = -1;
  for (const part of key.split('/')) {
    const eq = part.indexOf('=');
    const dim = part.slice(0, eq);
    const value = part.slice(eq + 1);
    const idx = (NODE_DIMS as readonly string[]).indexOf(dim);
    if (eq <= 0 || value === '' || idx <= lastDim) {
      throw new RangeError(`malformed node key ${JSON.stringify(key)}`);
    }
    lastDim = idx;
    out[dim as (typeof NODE_DIMS)[number]] = value;
  }
  return out;
}
