// Frame times of the desk view under load: 5 000 nodes, every one changing ten times a second,
// fed through the real SseHub into the page in chromium. Records every animation-frame interval
// and every long task (PerformanceObserver 'longtask': main-thread work over 50 ms) in the page,
// first idle (the same page, no feed) and then loaded, and prints both side by side.
//
//   npx tsx services/board/bench/frames.ts [--seconds 10] [--nodes-per-book 46]
import { SseHub } from '@keelson/http';
import { DemoBook } from '../demo/scenario.ts';
import { chromiumAvailability, openBrowser, startBoardServer } from '../../../tests/support/browser.ts';

interface FrameStats {
  frames: number;
  p50: number;
  p95: number;
  p99: number;
  max: number;
  longTasks: number;
  longTaskMs: number;
  applied: number;
  /** Main-thread ms per second of run: JSON parsing, applying to the model, drawing frames. */
  parse: number;
  apply: number;
  render: number;
  /** Chromium's own main-thread accounting (CDP Performance.getMetrics), ms per second of run. */
  chromium: Record<string, number>;
}
const CDP_METRICS = ['TaskDuration', 'ScriptDuration', 'RecalcStyleDuration', 'LayoutDuration'];
type Counters = { nodesMsgs: number; parseMs: number; applyMs: number; renderMs: number };

function arg(name: string, fallback: number): number {
  const i = process.argv.indexOf(`--${name}`);
  const v = i >= 0 ? Number(process.argv[i + 1]) : fallback;
  if (!Number.isFinite(v) || v <= 0) throw new Error(`--${name} must be a positive number`);
  return v;
}

// Installed before the page's own scripts so that nothing it does escapes the measurement.
const PROBE = `
  window.__frames = [];
  window.__long = [];
  window.__recording = false;
  new PerformanceObserver((list) => {
    if (window.__recording) for (const e of list.getEntries()) window.__long.push(e.duration);
  }).observe({ type: 'longtask', buffered: false });
  let last = 0;
  const loop = (t) => {
    if (window.__recording && last) window.__frames.push(t - last);
    last = t;
    requestAnimationFrame(loop);
  };
  requestAnimationFrame(loop);
`;

function quantile(sorted: number[], q: number): number {
  if (sorted.length === 0) return NaN;
  return sorted[Math.min(sorted.length - 1, Math.floor(q * sorted.length))]!;
}

export async function runFrameBench(
  opts: { seconds?: number; underlyingsPerBook?: number } = {},
): Promise<{ nodes: number; idle: FrameStats; loaded: FrameStats }> {
  const seconds = opts.seconds ?? 10;
  const names = Array.from({ length: 300 }, (_, i) => `U${String(i + 1).padStart(3, '0')}`);
  const book = new DemoBook({
    seed: 5,
    desks: Array.from({ length: 10 }, (_, i) => `DESK${String(i + 1).padStart(2, '0')}`),
    booksPerDesk: 10,
    underlyingsPerBook: opts.underlyingsPerBook ?? 46,
    underlyings: names,
  });
  const hub = new SseHub({ flushIntervalMs: 100 });
  hub.setSnapshot(() => ({ exposures: book.exposures(), alerts: [] }));
  const server = await startBoardServer(hub);
  const browser = await openBrowser({ viewport: { width: 1600, height: 1000 } });
  try {
    const page = await browser.context.newPage();
    await page.addInitScript(PROBE);
    await page.goto(server.url);
    await page.waitForSelector('body[data-ready="true"]');
    const nodes = book.exposures().length;
    // Everything open: the grid's row list is the whole tree, and the user scrolls through it.
    await page.evaluate(() => {
      const w = window as unknown as { keelsonBoard: { tree: { expandTo(d: number): void } } };
      w.keelsonBoard.tree.expandTo(9);
      const body = document.querySelector('.grid-body')!;
      setInterval(() => {
        body.scrollTop = (body.scrollTop + 7 * 28) % Math.max(1, body.scrollHeight - body.clientHeight);
      }, 200);
    });

    const cdp = await browser.context.newCDPSession(page);
    await cdp.send('Performance.enable');
    const cdpMetrics = async (): Promise<Record<string, number>> => {
      const { metrics } = (await cdp.send('Performance.getMetrics')) as {
        metrics: { name: string; value: number }[];
      };
      return Object.fromEntries(
        metrics.filter((m) => CDP_METRICS.includes(m.name)).map((m) => [m.name, m.value]),
      );
    };
    const record = async (feed: boolean): Promise<FrameStats> => {
      const cdpBefore = await cdpMetrics();
      const snap = (): Promise<Counters> =>
        page.evaluate(() => {
          const c = (window as unknown as { keelsonBoard: { counters: Counters } }).keelsonBoard.counters;
          return { nodesMsgs: c.nodesMsgs, parseMs: c.parseMs, applyMs: c.applyMs, renderMs: c.renderMs };
        });
      const before = await snap();
      await page.evaluate(() => {
        const w = window as unknown as { __frames: number[]; __long: number[]; __recording: boolean };
        w.__frames = [];
        w.__long = [];
        w.__recording = true;
      });
      let timer: NodeJS.Timeout | undefined;
      if (feed) {
        timer = setInterval(() => {
          book.tick(100);
          for (const e of book.exposures()) hub.publishExposure(e);
        }, 100);
      }
      await new Promise((r) => setTimeout(r, seconds * 1000));
      if (timer) clearInterval(timer);
      const { frames, long } = await page.evaluate(() => {
        const w = window as unknown as { __frames: number[]; __long: number[]; __recording: boolean };
        w.__recording = false;
        return { frames: w.__frames, long: w.__long };
      });
      const after = await snap();
      const cdpAfter = await cdpMetrics();
      const chromiumMs = Object.fromEntries(
        CDP_METRICS.map((k) => [k, (((cdpAfter[k] ?? 0) - (cdpBefore[k] ?? 0)) * 1000) / seconds]),
      );
      const sorted = [...frames].sort((a, b) => a - b);
      return {
        frames: frames.length,
        p50: quantile(sorted, 0.5),
        p95: quantile(sorted, 0.95),
        p99: quantile(sorted, 0.99),
        max: sorted[sorted.length - 1] ?? NaN,
        longTasks: long.length,
        longTaskMs: long.reduce((a, b) => a + b, 0),
        applied: (after.nodesMsgs - before.nodesMsgs) / seconds,
        parse: (after.parseMs - before.parseMs) / seconds,
        apply: (after.applyMs - before.applyMs) / seconds,
        render: (after.renderMs - before.renderMs) / seconds,
        chromium: chromiumMs,
      };
    };

    const idle = await record(false);
    const loaded = await record(true);
    return { nodes, idle, loaded };
  } finally {
    hub.close();
    await browser.close();
    await server.close();
  }
}

if (import.meta.url === `file://${process.argv[1]}` || process.argv[1]?.endsWith('frames.ts')) {
  if (!chromiumAvailability().available) process.exit(0);
  const seconds = arg('seconds', 10);
  const r = await runFrameBench({ seconds, underlyingsPerBook: arg('nodes-per-book', 46) });
  const f = (v: number): string => v.toFixed(1).padStart(8);
  const row = (name: string, s: FrameStats): string =>
    `${name.padEnd(8)}${String(s.frames).padStart(8)}${f(s.p50)}${f(s.p95)}${f(s.p99)}${f(s.max)}${String(s.longTasks).padStart(7)}${f(s.longTaskMs)}${String(Math.round(s.applied)).padStart(10)}${f(s.parse)}${f(s.apply)}${f(s.render)}`;
  process.stdout.write(
    `desk view frame times, ${r.nodes} nodes, all changing at 10 Hz, ${seconds} s each, chromium headless\n`,
  );
  process.stdout.write(
    `${''.padEnd(8)}  frames  p50 ms  p95 ms  p99 ms  max ms  long  long ms  nodes/s  parse/s  apply/s render/s (ms)\n`,
  );
  process.stdout.write(`${row('idle', r.idle)}\n${row('loaded', r.loaded)}\n`);
  const cdpRow = (name: string, s: FrameStats): string =>
    `${name.padEnd(8)}${CDP_METRICS.map((k) => `${k.replace('Duration', '')} ${Math.round(s.chromium[k] ?? 0)}`).join('  ')}`;
  process.stdout.write(
    `main thread, chromium's accounting (ms per s):\n${cdpRow('idle', r.idle)}\n${cdpRow('loaded', r.loaded)}\n`,
  );
  process.stdout.write(
    `p95 loaded / idle: ${(r.loaded.p95 / r.idle.p95).toFixed(2)}x; p95 loaded / 60 Hz budget (16.7 ms): ${(r.loaded.p95 / (1000 / 60)).toFixed(2)}x\n`,
  );
}
