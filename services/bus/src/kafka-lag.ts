// Consumer lag as a metric, refreshed on a timer: one series per (topic, partition) this process
// owns, dropped when the partition is revoked so a rebalance leaves no frozen series behind.
import type { KafkaBus } from './kafka.ts';

export interface LagSink {
  consumerLag(topic: string, partition: number, lag: number): void;
  forgetConsumerLag(topic: string, partition: number): void;
}

export interface LagReporter {
  /** Largest lag of the latest refresh; undefined before the first one succeeded. */
  maxLag(): number | undefined;
  /** Measures now (also what the timer calls); resolves when the sink has the values. */
  refresh(): Promise<void>;
  stop(): void;
}

/**
 * Every `intervalMs`, the lag of every owned partition goes to the sink. Where two groups of this
 * process read the same partition (an engine's table reader and its keyed consumer both read
 * spots), the larger lag is reported: the metric has no group label, and the slower reader is the
 * one holding results back.
 */
export function startLagReporter(
  bus: Pick<KafkaBus, 'consumerLag'>,
  sink: LagSink,
  intervalMs: number,
  onError: (err: unknown) => void = () => undefined,
  /** After every refresh, with the largest lag (undefined when it failed before any success). */
  onRefresh: (maxLag: number | undefined) => void = () => undefined,
): LagReporter {
  let shown = new Set<string>();
  let max: number | undefined;
  let running: Promise<void> | undefined;
  const refresh = (): Promise<void> => {
    running ??= (async () => {
      try {
        const worst = new Map<string, { topic: string; partition: number; lag: number }>();
        for (const r of await bus.consumerLag()) {
          const k = `${r.topic}\u0000${r.partition}`;
          const had = worst.get(k);
          if (!had || r.lag > had.lag) worst.set(k, r);
        }
        let m = 0;
        for (const r of worst.values()) {
          sink.consumerLag(r.topic, r.partition, r.lag);
          m = Math.max(m, r.lag);
        }
        for (const k of shown) {
          if (worst.has(k)) continue;
          const [topic, partition] = k.split('\u0000') as [string, string];
          sink.forgetConsumerLag(topic, Number(partition));
        }
        shown = new Set(worst.keys());
        max = m;
      } catch (e) {
        onError(e);
      } finally {
        running = undefined;
      }
      onRefresh(max);
    })();
    return running;
  };
  const timer = setInterval(() => void refresh(), intervalMs);
  timer.unref();
  return { maxLag: () => max, refresh, stop: () => clearInterval(timer) };
}
