// The cross-partition stage, as pure state: the latest partial of every source partition per node,
// their sum as the node's exposure, and the node's limits checked with the engine's LimitMonitor.
// A source partition that moves between engine instances is neither lost nor counted twice, because
// a partial is keyed by (node, source partition): the new owner's partial replaces the old one.
import { LimitMonitor, exposureFromPartials, restoreLimitLevels } from '@keelson/engine';
import type { NodePartial } from '@keelson/engine';
import { decodeInput, parseTs } from '@keelson/shared-types';
import type { AlertMsg, ExposureMsg, LimitMsg } from '@keelson/shared-types';

/** The record on the `partials` topic; key `${nodeKey}|${partition}`. */
export interface PartialWire {
  type: 'partial';
  /** nodeKey|sourcePartition, the compaction key. */
  key: string;
  sourcePartition: number;
  partial: NodePartial;
}

export function partialKey(nodeKey: string, sourcePartition: number): string {
  return `${nodeKey}|${sourcePartition}`;
}

/** Parses a partials record; a reason instead when it is not one (a wiring defect, never input). */
export function decodePartial(raw: string): { ok: true; wire: PartialWire } | { ok: false; reason: string } {
  let obj: unknown;
  try {
    obj = JSON.parse(raw);
  } catch {
    return { ok: false, reason: 'partial: not JSON' };
  }
  const w = obj as Partial<PartialWire> | null;
  if (!w || w.type !== 'partial') return { ok: false, reason: 'partial.type must be "partial"' };
  if (typeof w.key !== 'string') return { ok: false, reason: 'partial.key must be a string' };
  if (!Number.isInteger(w.sourcePartition))
    return { ok: false, reason: 'partial.sourcePartition must be an integer' };
  const p = w.partial;
  if (
    !p ||
    typeof p.nodeKey !== 'string' ||
    typeof p.currency !== 'string' ||
    typeof p.asOf !== 'string' ||
    !p.sums
  ) {
    return { ok: false, reason: 'partial.partial must hold nodeKey, currency, asOf and sums' };
  }
  return { ok: true, wire: w as PartialWire };
}

export interface AggregatorOutput {
  exposures: ExposureMsg[];
  alerts: AlertMsg[];
}

export class PartialsAggregator {
  /** nodeKey -> source partition -> latest partial */
  private readonly nodes = new Map<string, Map<number, NodePartial>>();
  private readonly limits = new LimitMonitor();
  private readonly changed = new Set<string>();
  private alerts: AlertMsg[] = [];

  /** Takes the latest partial of one (node, source partition); the node is then due for output. */
  applyPartial(wire: PartialWire): void {
    const key = wire.partial.nodeKey;
    let parts = this.nodes.get(key);
    if (!parts) {
      parts = new Map();
      this.nodes.set(key, parts);
    }
    parts.set(wire.sourcePartition, wire.partial);
    this.changed.add(key);
  }

  /** A limit or limit-remove message (raw, as on the limits topic); the reason when it is not valid. */
  applyLimit(raw: string): string | undefined {
    const d = decodeInput(raw);
    if (!d.ok) return d.reason;
    const msg = d.msg;
    if (msg.type === 'limit') {
      this.setLimit(msg);
      return undefined;
    }
    if (msg.type === 'limit-remove') {
      this.alerts.push(...this.limits.remove(msg.limitId, parseTs(msg.ts)).alerts);
      return undefined;
    }
    return `limits topic holds a ${msg.type} message`;
  }

  private setLimit(limit: LimitMsg): void {
    const { scopeKey } = this.limits.set(limit);
    // "its level is kept and rechecked at once"
    const e = this.exposureOf(scopeKey);
    if (e) {
      const a = this.limits.checkLimit(limit.limitId, e, parseTs(limit.ts));
      if (a) this.alerts.push(a);
    }
  }

  private exposureOf(nodeKey: string): ExposureMsg | undefined {
    const parts = this.nodes.get(nodeKey);
    if (!parts || parts.size === 0) return undefined;
    return exposureFromPartials([...parts.values()]);
  }

  /** Every node due since the last drain, summed, with the alerts of their limits. */
  drain(): AggregatorOutput {
    const exposures: ExposureMsg[] = [];
    const alerts = this.alerts;
    this.alerts = [];
    for (const key of [...this.changed].sort()) {
      const e = this.exposureOf(key);
      if (!e) continue;
      exposures.push(e);
      alerts.push(...this.limits.check(key, e, parseTs(e.asOf)));
      // A node whose every partition reports it empty was published with zeros once: drop it.
      if (e.positions === 0 && !this.limits.watches(key)) this.nodes.delete(key);
    }
    this.changed.clear();
    return { exposures, alerts };
  }

  /** Continues each limit from its latest published alert (after a rebuild); the limitIds restored. */
  restoreLevels(latest: Iterable<AlertMsg>): string[] {
    return restoreLimitLevels(this.limits, latest);
  }

  /** Marks every node due (after a rebuild: republish the whole picture, recheck every limit). */
  touchAll(): void {
    for (const k of this.nodes.keys()) this.changed.add(k);
  }

  snapshot(): ExposureMsg[] {
    const out: ExposureMsg[] = [];
    for (const k of [...this.nodes.keys()].sort()) {
      const e = this.exposureOf(k);
      if (e && (e.positions > 0 || this.limits.watches(k))) out.push(e);
    }
    return out;
  }

  openAlerts(): AlertMsg[] {
    return this.limits.openAlerts();
  }

  utilizations(): { limitId: string; utilization: number }[] {
    return this.limits.utilizations();
  }

  /** Source partitions that reported for a node (tests and diagnostics). */
  partitionsOf(nodeKey: string): number[] {
    return [...(this.nodes.get(nodeKey)?.keys() ?? [])].sort((a, b) => a - b);
  }
}
