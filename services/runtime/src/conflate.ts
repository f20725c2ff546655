// Spot conflation within one bus batch. Under load a batch holds many ticks of the same
// underlying; revaluing its positions for each would spend the whole budget on prices that are
// superseded a few microseconds later. Only the newest spot of a run is applied, where a run is a
// sequence of spots of one underlying not separated by any other input that concerns it: a trade,
// surface or reference update on that underlying sees exactly the spot it would have seen
// unconflated. Inputs that are not tied to one underlying (curves, limits) end every run, because
// their effect (revaluation, limit checks) depends on all spots. Every record is decoded and
// validated here, once (the engine is handed the result): skipped spots are never invalid ones,
// and an invalid record, which changes nothing, is applied in place so that the engine rejects it
// to the dead letter topic.
//
// The plan is columns over the batch's records (chunks concatenated), not an object per record:
// at tens of thousands of ticks a second the garbage collector was a quarter of the engine's time.
import { decodeInput, scanSpot, scannedSpot } from '@keelson/shared-types';
import type { DecodeResult, SpotScan } from '@keelson/shared-types';
import type { BusRecord } from '@keelson/bus';

export class BatchPlan {
  /** The records, as handed in (in order: chunk by chunk). */
  readonly chunks: readonly (readonly BusRecord[])[];
  readonly size: number;
  /** 0: a valid spot superseded later in its run; counted as an input but not applied. */
  readonly apply: Uint8Array;
  /** Valid spots: their underlying (undefined for anything else). */
  readonly spotOf: (string | undefined)[];
  /** Valid spots: their own timestamp, epoch ms (NaN for anything else). */
  readonly tsMs: Float64Array;
  conflated = 0;
  /** Records read by the general decoder; spots read by scanSpot are decoded on demand. */
  private readonly general: (DecodeResult | undefined)[];
  private readonly price: Float64Array;
  private readonly tsFrom: Int32Array;

  constructor(chunks: readonly (readonly BusRecord[])[]) {
    this.chunks = chunks;
    let n = 0;
    for (const c of chunks) n += c.length;
    this.size = n;
    this.apply = new Uint8Array(n).fill(1);
    this.spotOf = new Array<string | undefined>(n);
    this.tsMs = new Float64Array(n).fill(Number.NaN);
    this.general = new Array<DecodeResult | undefined>(n);
    this.price = new Float64Array(n);
    this.tsFrom = new Int32Array(n);
  }

  /** decodeInput of record i (whose raw text is `raw`). */
  decoded(i: number, raw: string): DecodeResult {
    const g = this.general[i];
    if (g !== undefined) return g;
    const scan = {
      underlying: this.spotOf[i]!,
      price: this.price[i]!,
      tsMs: this.tsMs[i]!,
      tsFrom: this.tsFrom[i]!,
    };
    return { ok: true, msg: scannedSpot(raw, scan) };
  }

  /** Whether record i decoded to a valid message. */
  valid(i: number): boolean {
    return this.general[i]?.ok ?? true;
  }

  /** Reads record i. */
  read(i: number, raw: string, scan: SpotScan): void {
    if (scanSpot(raw, scan)) {
      this.spotOf[i] = scan.underlying;
      this.tsMs[i] = scan.tsMs;
      this.price[i] = scan.price;
      this.tsFrom[i] = scan.tsFrom;
      return;
    }
    const d = decodeInput(raw);
    this.general[i] = d;
    if (d.ok && d.msg.type === 'spot') {
      this.spotOf[i] = d.msg.underlying;
      this.tsMs[i] = Date.parse(d.msg.ts);
    }
  }

  /** The underlying a valid non-spot input concerns: a string, or null when it concerns all. */
  concerns(i: number): string | null {
    const g = this.general[i];
    const u = g?.ok ? (g.msg as { underlying?: unknown }).underlying : undefined;
    return typeof u === 'string' ? u : null;
  }
}

export function planBatch(chunks: readonly (readonly BusRecord[])[]): BatchPlan {
  const plan = new BatchPlan(chunks);
  const scan: SpotScan = { underlying: '', price: 0, tsMs: 0, tsFrom: 0 };
  let i = 0;
  for (const c of chunks) for (let k = 0; k < c.length; k++) plan.read(i++, (c[k] as BusRecord).value, scan);
  // Walk backwards: the first spot met for an underlying is the last of its run, the one applied.
  // `runEnd` holds that spot's ts while the run continues towards the start of the batch.
  const runEnd = new Map<string, number>();
  const { spotOf, tsMs, apply } = plan;
  let conflated = 0;
  for (let j = plan.size - 1; j >= 0; j--) {
    const u = spotOf[j];
    if (u !== undefined) {
      const endTs = runEnd.get(u);
      if (endTs === undefined) {
        runEnd.set(u, tsMs[j] as number);
      } else if ((tsMs[j] as number) <= endTs) {
        // A spot newer than the run's last one is kept, so an event clock still sees the largest ts.
        apply[j] = 0;
        conflated++;
      }
      continue;
    }
    if (!plan.valid(j)) continue; // rejected: changes nothing
    const concerns = plan.concerns(j);
    if (concerns !== null) runEnd.delete(concerns);
    else runEnd.clear();
  }
  plan.conflated = conflated;
  return plan;
}
