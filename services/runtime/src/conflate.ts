// Spot conflation within one bus batch. Under load a batch holds many ticks of the same
// underlying; revaluing its positions for each would spend the whole budget on prices that are
// superseded a few microseconds later. Only the newest spot of a run is applied, where a run is a
// sequence of spots of one underlying not separated by any other input that concerns it: a trade,
// surface or reference update on that underlying sees exactly the spot it would have seen
// unconflated. Inputs that are not tied to one underlying (curves, limits, anything whose
// underlying cannot be read) end every run, because their effect (revaluation, limit checks)
// depends on all spots. Skipped spots are never invalid ones: an invalid spot must reach the dead
// letter topic, so it is applied in place and the engine rejects it.
import { validateInput } from '@keelson/shared-types';
import type { BusRecord } from '@keelson/bus';

export interface PlannedRecord {
  record: BusRecord;
  /** false: a valid spot superseded later in its run; counted as an input but not applied. */
  apply: boolean;
  /** Set for records that look like spots: their underlying and own timestamp (epoch ms). */
  spot?: { underlying: string; tsMs: number };
}

export interface BatchPlan {
  records: PlannedRecord[];
  conflated: number;
}

interface Peek {
  type: unknown;
  underlying: unknown;
  ts: unknown;
}

function peek(value: string): Peek | null {
  try {
    const obj: unknown = JSON.parse(value);
    if (typeof obj !== 'object' || obj === null || Array.isArray(obj)) return null;
    return obj as Peek;
  } catch {
    return null;
  }
}

export function planBatch(batch: readonly BusRecord[]): BatchPlan {
  const records: PlannedRecord[] = new Array(batch.length);
  const parsed: (Peek | null)[] = new Array(batch.length);
  for (let i = 0; i < batch.length; i++) {
    const record = batch[i]!;
    const obj = peek(record.value);
    parsed[i] = obj;
    records[i] = { record, apply: true };
    if (obj && obj.type === 'spot' && typeof obj.underlying === 'string' && typeof obj.ts === 'string') {
      const tsMs = Date.parse(obj.ts);
      if (Number.isFinite(tsMs)) records[i]!.spot = { underlying: obj.underlying, tsMs };
    }
  }
  // Walk backwards: the first spot met for an underlying is the last of its run, the one applied.
  // `runEnd` holds that spot's ts while the run continues towards the start of the batch.
  const runEnd = new Map<string, number>();
  let conflated = 0;
  for (let i = batch.length - 1; i >= 0; i--) {
    const r = records[i]!;
    const obj = parsed[i];
    if (r.spot) {
      const endTs = runEnd.get(r.spot.underlying);
      if (endTs === undefined) {
        runEnd.set(r.spot.underlying, r.spot.tsMs);
      } else if (r.spot.tsMs <= endTs && validateInput(obj).ok) {
        // A spot newer than the run's last one is kept, so an event clock still sees the largest ts.
        r.apply = false;
        conflated++;
      }
      continue;
    }
    if (!obj) continue; // undecodable: will be rejected, changes nothing
    if (typeof obj.underlying === 'string') runEnd.delete(obj.underlying);
    else runEnd.clear();
  }
  return { records, conflated };
}
