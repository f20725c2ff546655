// Scale-out: each partition's engine publishes its raw node sums; a downstream stage adds the latest
// partial of every partition and finishes the node exactly as one engine would have.
import { METRICS, formatTs, parseTs } from '@keelson/shared-types';
import type { ExposureMsg, Metric, NodeDims, UnpricedReason } from '@keelson/shared-types';
import { REASON_COUNT } from './nodes.ts';
import type { Node } from './nodes.ts';

export interface NodePartial {
  nodeKey: string;
  node: NodeDims;
  currency: string;
  /** valuation time of the partition's last change to the node (ISO, contract form) */
  asOf: string;
  /** raw sums in reporting currency; delta and gamma summed even where they are not published */
  sums: Record<Metric, number>;
  positions: number;
  unpriced: Partial<Record<UnpricedReason, number>>;
  /** priced holdings on a stale feed in this partition */
  staleCount: number;
}

export function partialOf(n: Node, currency: string, reasons: readonly string[]): NodePartial {
  const empty = n.positions === 0;
  const sums = {} as Record<Metric, number>;
  METRICS.forEach((m, k) => {
    sums[m] = empty ? 0 : n.value(k);
  });
  const unpriced: Record<string, number> = {};
  for (let r = 0; r < REASON_COUNT; r++) {
    const c = n.unpriced[r] as number;
    if (c > 0) unpriced[reasons[r] as string] = c;
  }
  return {
    nodeKey: n.key,
    node: { ...n.dims },
    currency,
    asOf: formatTs(n.asOfMs),
    sums,
    positions: n.positions,
    unpriced,
    staleCount: n.staleCount,
  };
}

/**
 * One node's exposure from the latest partial of each partition (all for the same nodeKey and
 * currency). asOf is the latest of the partials'. Throws when handed partials of different nodes,
 * which would be a wiring defect upstream.
 */
export function exposureFromPartials(parts: readonly NodePartial[]): ExposureMsg {
  const first = parts[0];
  if (!first) throw new RangeError('exposureFromPartials: no partials');
  const sums = {} as Record<Metric, number>;
  for (const m of METRICS) sums[m] = 0;
  let positions = 0;
  let staleCount = 0;
  let asOfMs = Number.NEGATIVE_INFINITY;
  const unpriced: Record<string, number> = {};
  for (const p of parts) {
    if (p.nodeKey !== first.nodeKey || p.currency !== first.currency) {
      throw new RangeError(
        `exposureFromPartials: mixed nodes ${first.nodeKey} (${first.currency}) and ${p.nodeKey} (${p.currency})`,
      );
    }
    for (const m of METRICS) sums[m] += p.sums[m];
    positions += p.positions;
    staleCount += p.staleCount;
    asOfMs = Math.max(asOfMs, parseTs(p.asOf));
    for (const [r, c] of Object.entries(p.unpriced)) unpriced[r] = (unpriced[r] ?? 0) + (c ?? 0);
  }
  const hasU = first.node.underlying !== undefined;
  const z = positions === 0;
  const v = (m: Metric): number => (z ? 0 : sums[m]);
  return {
    type: 'exposure',
    nodeKey: first.nodeKey,
    node: { ...first.node },
    currency: first.currency,
    asOf: formatTs(asOfMs),
    pv: v('pv'),
    pnl: v('pnl'),
    delta: hasU ? v('delta') : null,
    cashDelta: v('cashDelta'),
    gamma: hasU ? v('gamma') : null,
    cashGamma: v('cashGamma'),
    vega: v('vega'),
    theta: v('theta'),
    rho: v('rho'),
    positions,
    unpriced: z ? {} : unpriced,
    stale: staleCount > 0,
  };
}
