// Feeds a market source (the simulator) onto the bus in real time: every step asks for what
// happened since the previous step and publishes it, keyed per the contract. A step waits for its
// publish to be acknowledged, so a runner that falls behind slows the feed (back-pressure) rather
// than letting a queue grow; the next step then catches up on simulated time in one go.
import { inputKey, inputTopic, TOPICS } from '@keelson/shared-types';
import type { InputMsg } from '@keelson/shared-types';
import type { Bus, OutRecord } from '@keelson/bus';

export interface MarketSource {
  bootstrap(): InputMsg[];
  step(nowMs: number): { messages: InputMsg[]; malformed: string[] };
}

export interface FeederOptions {
  source: MarketSource;
  bus: Bus;
  clock: { now(): number };
  /** Wall milliseconds between steps; default 50. */
  stepMs?: number;
  onError?: (err: unknown) => void;
}

export interface FeederStats {
  steps: number;
  published: number;
  malformed: number;
}

const TYPE_TOPIC: Record<string, string> = {
  underlying: TOPICS.refdata,
  spot: TOPICS.spots,
  'vol-surface': TOPICS.vols,
  curve: TOPICS.curves,
  trade: TOPICS.trades,
  limit: TOPICS.limits,
  'limit-remove': TOPICS.limits,
};

/**
 * Where a malformed line goes: the topic its `type` names when that can be read (as an upstream
 * producer would have sent it), else the trades topic. Either way the engine dead-letters it.
 */
export function routeMalformed(raw: string): { topic: string; record: OutRecord } {
  let topic: string = TOPICS.trades;
  let key: string | null = null;
  try {
    const obj: unknown = JSON.parse(raw);
    if (obj && typeof obj === 'object') {
      const o = obj as { type?: unknown; underlying?: unknown };
      if (typeof o.type === 'string' && TYPE_TOPIC[o.type]) topic = TYPE_TOPIC[o.type]!;
      if (typeof o.underlying === 'string') key = o.underlying;
    }
  } catch {
    // not JSON at all: default topic, no key
  }
  return { topic, record: { key, value: raw } };
}

export class SimFeeder {
  private timer: NodeJS.Timeout | null = null;
  private running: Promise<void> | null = null;
  private stopped = false;
  private readonly counters: FeederStats = { steps: 0, published: 0, malformed: 0 };
  /** Market time the source has been stepped to (NaN before the first step). */
  lastStepMs = Number.NaN;

  constructor(private readonly opts: FeederOptions) {}

  stats(): FeederStats {
    return { ...this.counters };
  }

  /** Publishes the source's bootstrap in its own order; resolves when the bus has acknowledged it. */
  async publishBootstrap(): Promise<number> {
    const msgs = this.opts.source.bootstrap();
    await this.publishInOrder(msgs);
    return msgs.length;
  }

  start(): void {
    const loop = () => {
      if (this.stopped) return;
      this.running = this.step()
        .catch((err) => this.opts.onError?.(err))
        .finally(() => {
          this.running = null;
          if (!this.stopped) this.timer = setTimeout(loop, this.opts.stepMs ?? 50);
        });
    };
    this.timer = setTimeout(loop, this.opts.stepMs ?? 50);
  }

  async stop(): Promise<void> {
    this.stopped = true;
    if (this.timer) clearTimeout(this.timer);
    await this.running;
  }

  /** One step up to now; the loop's unit, public for catching up before the loop starts. */
  async step(): Promise<void> {
    const now = this.opts.clock.now();
    const { messages, malformed } = this.opts.source.step(now);
    this.lastStepMs = now;
    this.counters.steps++;
    await this.publishInOrder(messages);
    for (const raw of malformed) {
      const { topic, record } = routeMalformed(raw);
      await this.opts.bus.publish(topic, [record]);
      this.counters.malformed++;
    }
  }

  /** Consecutive messages of one topic go in one publish; order across topics is kept. */
  private async publishInOrder(msgs: InputMsg[]): Promise<void> {
    let i = 0;
    while (i < msgs.length) {
      const topic = inputTopic(msgs[i]!);
      const run: OutRecord[] = [];
      while (i < msgs.length && inputTopic(msgs[i]!) === topic) {
        const m = msgs[i++]!;
        run.push({ key: inputKey(m), value: JSON.stringify(m) });
      }
      await this.opts.bus.publish(topic, run);
      this.counters.published += run.length;
    }
  }
}
