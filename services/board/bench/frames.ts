// Frame times of the desk view under load: 5 000 nodes, every one changing ten times a second,
// fed through the real SseHub into the page in chromium. Records every animation-frame interval
// and every long task (PerformanceObserver 'longtask': main-thread work over 50 ms) in the page,
// idle (the same page, no feed), fed in the page itself (the page's own cost), and fed from this
// process through the hub (end to end), and prints them side by side.
//
// Through the hub it is measured twice. "sse" shares every core between chromium and this process
// (the producer: the demo book standing in for the engine, the hub, the HTTP server), as on a
// desktop that runs the engine too. "sse-pin" puts this process on one core and the whole browser
// on another (taskset), as when the engine runs elsewhere: the page's cost without the producer
// competing for its core. Pinning needs two CPUs and taskset; without them that row is left out.
//
//   npx tsx services/board/bench/frames.ts [--seconds 10] [--nodes-per-book 46]
import { execFileSync } from 'node:child_process';
import { cpus, loadavg } from 'node:os';
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
  /** CPU of this Node process (the demo book's ticks and the hub's JSON), ms per second of run. */
  producerCpu: number;
  /** The feed worker's parsing and packing, wall ms per second of run (its own thread). */
  worker: number;
}
// ThreadTime is the renderer main thread's CPU time: unlike wall-clock durations it hardly grows
// when other processes crowd the machine, so it is the figure to compare across runs.
const CDP_METRICS = ['ThreadTime', 'TaskDuration', 'ScriptDuration', 'RecalcStyleDuration', 'LayoutDuration'];
type Counters = { nodesMsgs: number; parseMs: number; applyMs: number; renderMs: number; workerMs?: number };

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

/** The producer: the demo book ticks and every node goes to the hub, as the engine hands them over. */
function startFeed(hub: SseHub, book: DemoBook): () => void {
  const timer = setInterval(() => {
    book.tick(100);
    for (const e of book.exposures()) hub.publishExposure(e);
  }, 100);
  return () => clearInterval(timer);
}

/** Where chromium's CPU goes, from a trace: per thread, and on the page's main thread per stage. */
export interface ThreadBreakdown {
  /** [process/thread, CPU ms per s] */
  threads: [string, number][];
  /** [trace event, CPU ms per s] on the renderer's main thread */
  main: [string, number][];
}
// Rendering stages and script entry points of the renderer's main thread (chromium trace event names).
const MAIN_STAGES = [
  'FunctionCall',
  'HandlePostMessage',
  'FireAnimationFrame',
  'UpdateLayoutTree',
  'Layout',
  'PrePaint',
  'Paint',
  'Layerize',
  'Commit',
  'MajorGC',
  'MinorGC',
];

interface TraceEvent {
  ph: string;
  name: string;
  pid: number;
  tid: number;
  dur?: number;
  tdur?: number;
  args?: { name?: string };
}

function breakdown(events: TraceEvent[], seconds: number): ThreadBreakdown {
  const threadName = new Map<string, string>();
  const processName = new Map<number, string>();
  for (const e of events) {
    if (e.ph !== 'M') continue;
    if (e.name === 'thread_name') threadName.set(`${e.pid}:${e.tid}`, e.args?.name ?? '');
    if (e.name === 'process_name') processName.set(e.pid, e.args?.name ?? '');
  }
  const threads = new Map<string, number>();
  const main = new Map<string, number>();
  for (const e of events) {
    if (e.ph !== 'X') continue;
    const thread = `${processName.get(e.pid) ?? e.pid}/${threadName.get(`${e.pid}:${e.tid}`) ?? e.tid}`;
    // Thread CPU time (tdur) of each task the scheduler ran; wall time would count preemption.
    const cpu = (e.tdur ?? e.dur ?? 0) / 1000 / seconds;
    if (e.name === 'ThreadControllerImpl::RunTask') threads.set(thread, (threads.get(thread) ?? 0) + cpu);
    if (thread.endsWith('/CrRendererMain') && MAIN_STAGES.includes(e.name))
      main.set(e.name, (main.get(e.name) ?? 0) + cpu);
  }
  const top = (m: Map<string, number>): [string, number][] =>
    [...m].filter(([, v]) => v >= 1).sort((a, b) => b[1] - a[1]);
  return { threads: top(threads).slice(0, 8), main: top(main) };
}

/** This process's CPU affinity (taskset -p), or undefined where it cannot be read or set. */
function affinity(): string | undefined {
  try {
    return /list: (\S+)/.exec(
      execFileSync('taskset', ['-c', '-p', String(process.pid)], { encoding: 'utf8' }),
    )?.[1];
  } catch {
    return undefined;
  }
}

function pinSelf(list: string): void {
  // -a: every thread of this process (libuv's pool, V8's helpers), not only the main one.
  execFileSync('taskset', ['-a', '-c', '-p', list, String(process.pid)], { stdio: 'ignore' });
}

export async function runFrameBench(
  opts: { seconds?: number; underlyingsPerBook?: number; traceSeconds?: number } = {},
): Promise<{
  nodes: number;
  idle: FrameStats;
  inPage: FrameStats;
  loaded: FrameStats;
  pinned: FrameStats | undefined;
  threads: ThreadBreakdown | undefined;
}> {
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
  const nodes = book.exposures().length;
  try {
    const shared = await openBoard(server.url);
    let idle: FrameStats;
    let inPage: FrameStats;
    let loaded: FrameStats;
    let threads: ThreadBreakdown | undefined;
    try {
      idle = await shared.record(false, hub, book, seconds);
      inPage = await shared.record('page', hub, book, seconds);
      loaded = await shared.record('sse', hub, book, seconds);
      if (opts.traceSeconds) threads = await shared.trace(hub, book, opts.traceSeconds);
    } finally {
      await shared.close();
    }
    let pinned: FrameStats | undefined;
    const before = affinity();
    if (before !== undefined && cpus().length >= 2) {
      pinSelf('0');
      try {
        const apart = await openBoard(server.url, '1');
        try {
          pinned = await apart.record('sse', hub, book, seconds);
        } finally {
          await apart.close();
        }
      } finally {
        pinSelf(before);
      }
    }
    return { nodes, idle, inPage, loaded, pinned, threads };
  } finally {
    hub.close();
    await server.close();
  }
}

/** The page open in a fresh browser (on `cpuList` when given), everything expanded and scrolling. */
async function openBoard(
  url: string,
  cpuList?: string,
): Promise<{
  record(feed: false | 'sse' | 'page', hub: SseHub, book: DemoBook, seconds: number): Promise<FrameStats>;
  trace(hub: SseHub, book: DemoBook, seconds: number): Promise<ThreadBreakdown>;
  close(): Promise<void>;
}> {
  const browser = await openBrowser({
    viewport: { width: 1600, height: 1000 },
    ...(cpuList === undefined ? {} : { cpus: cpuList }),
  });
  try {
    const page = await browser.context.newPage();
    await page.addInitScript(PROBE);
    await page.goto(url);
    await page.waitForSelector('body[data-ready="true"]');
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
    // In-page feed: the same 5 000 nodes moved in the page itself and handed to the page's own
    // handlers, so neither this process nor JSON parsing competes for the CPU: the page's own cost.
    await page.evaluate(() => {
      type Board = {
        tree: { byKey: Map<string, { kind: string; msg: Record<string, unknown> | null }> };
        ingest: { nodes(list: object[]): void };
      };
      const w = window as unknown as { keelsonBoard: Board; __pageFeed?: { start(): void; stop(): void } };
      const base = [...w.keelsonBoard.tree.byKey.values()].filter((e) => e.msg).map((e) => e.msg!);
      let timer: number | undefined;
      let t = Date.parse(String(base[0]!.asOf));
      w.__pageFeed = {
        start() {
          timer = window.setInterval(() => {
            t += 100;
            const asOf = new Date(t).toISOString();
            w.keelsonBoard.ingest.nodes(
              base.map((e) => {
                const k = 1 + (Math.random() - 0.5) * 0.004;
                return {
                  ...e,
                  asOf,
                  pv: (e.pv as number) * k,
                  pnl: (e.pnl as number) * k,
                  cashDelta: (e.cashDelta as number) * k,
                  vega: (e.vega as number) * k,
                  cashGamma: (e.cashGamma as number) * k,
                };
              }),
            );
          }, 100);
        },
        stop() {
          window.clearInterval(timer);
        },
      };
    });

    const record = async (
      feed: false | 'sse' | 'page',
      hub: SseHub,
      book: DemoBook,
      seconds: number,
    ): Promise<FrameStats> => {
      const cdpBefore = await cdpMetrics();
      const snap = (): Promise<Counters> =>
        page.evaluate(() => {
          const c = (window as unknown as { keelsonBoard: { counters: Counters } }).keelsonBoard.counters;
          return {
            nodesMsgs: c.nodesMsgs,
            parseMs: c.parseMs,
            applyMs: c.applyMs,
            renderMs: c.renderMs,
            workerMs: c.workerMs ?? 0,
          };
        });
      const before = await snap();
      const cpuBefore = process.cpuUsage();
      await page.evaluate(() => {
        const w = window as unknown as { __frames: number[]; __long: number[]; __recording: boolean };
        w.__frames = [];
        w.__long = [];
        w.__recording = true;
      });
      let stopFeed: (() => void) | undefined;
      if (feed === 'page')
        await page.evaluate(() =>
          (window as unknown as { __pageFeed: { start(): void } }).__pageFeed.start(),
        );
      if (feed === 'sse') stopFeed = startFeed(hub, book);
      await new Promise((r) => setTimeout(r, seconds * 1000));
      stopFeed?.();
      if (feed === 'page')
        await page.evaluate(() => (window as unknown as { __pageFeed: { stop(): void } }).__pageFeed.stop());
      const { frames, long } = await page.evaluate(() => {
        const w = window as unknown as { __frames: number[]; __long: number[]; __recording: boolean };
        w.__recording = false;
        return { frames: w.__frames, long: w.__long };
      });
      const cpuUsed = process.cpuUsage(cpuBefore);
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
        producerCpu: (cpuUsed.user + cpuUsed.system) / 1000 / seconds,
        worker: ((after.workerMs ?? 0) - (before.workerMs ?? 0)) / seconds,
      };
    };

    /** A separate traced run through the hub: tracing costs CPU itself, so no frame times from it. */
    const trace = async (hub: SseHub, book: DemoBook, seconds: number): Promise<ThreadBreakdown> => {
      const events: TraceEvent[] = [];
      cdp.on('Tracing.dataCollected', (d) => {
        events.push(...(d.value as unknown as TraceEvent[]));
      });
      const complete = new Promise((r) => cdp.once('Tracing.tracingComplete', r));
      const stopFeed = startFeed(hub, book);
      try {
        await new Promise((r) => setTimeout(r, 1000));
        await cdp.send('Tracing.start', {
          categories: 'devtools.timeline,disabled-by-default-devtools.timeline,toplevel,v8',
          transferMode: 'ReportEvents',
        });
        await new Promise((r) => setTimeout(r, seconds * 1000));
        await cdp.send('Tracing.end');
        await complete;
      } finally {
        stopFeed();
      }
      return breakdown(events, seconds);
    };

    return { record, trace, close: () => browser.close() };
  } catch (err) {
    await browser.close();
    throw err;
  }
}

/** Runs the benchmark and prints its table; what `npm run bench` calls through tests/bench. */
export async function printFrameBench(): Promise<void> {
  if (!chromiumAvailability().available) return;
  const seconds = arg('seconds', 10);
  // --trace S: after the measured runs, S more seconds through the hub (shared cores) under a
  // chromium trace, to show which thread and which rendering stage the CPU goes to.
  const traceSeconds = process.argv.includes('--trace') ? arg('trace', 5) : 0;
  const r = await runFrameBench({ seconds, underlyingsPerBook: arg('nodes-per-book', 46), traceSeconds });
  const f = (v: number): string => v.toFixed(1).padStart(8);
  const row = (name: string, s: FrameStats): string =>
    `${name.padEnd(8)}${String(s.frames).padStart(8)}${f(s.p50)}${f(s.p95)}${f(s.p99)}${f(s.max)}${String(s.longTasks).padStart(7)}${f(s.longTaskMs)}${String(Math.round(s.applied)).padStart(10)}${f(s.parse)}${f(s.apply)}${f(s.render)}`;
  process.stdout.write(
    `desk view frame times, ${r.nodes} nodes, all changing at 10 Hz, ${seconds} s each, chromium headless\n`,
  );
  process.stdout.write(
    `${''.padEnd(8)}  frames  p50 ms  p95 ms  p99 ms  max ms  long  long ms  nodes/s  parse/s  apply/s render/s (ms)\n`,
  );
  const pinRow = (name: string, fmt: (s: FrameStats) => string): string =>
    r.pinned ? `${fmt(r.pinned)}\n` : `${name.padEnd(8)}(not measured: needs 2 CPUs and taskset)\n`;
  process.stdout.write(
    `${row('idle', r.idle)}\n${row('in-page', r.inPage)}\n${row('sse', r.loaded)}\n` +
      pinRow('sse-pin', (s) => row('sse-pin', s)),
  );
  const cdpRow = (name: string, s: FrameStats): string =>
    `${name.padEnd(8)}${CDP_METRICS.map((k) => `${k.replace('Duration', '').replace('ThreadTime', 'CPU')} ${Math.round(s.chromium[k] ?? 0)}`).join('  ')}`;
  process.stdout.write(
    `main thread, chromium's accounting (ms per s):\n${cdpRow('idle', r.idle)}\n${cdpRow('in-page', r.inPage)}\n${cdpRow('sse', r.loaded)}\n` +
      pinRow('sse-pin', (s) => cdpRow('sse-pin', s)),
  );
  process.stdout.write(
    `beside it, same machine (ms per s): producer process CPU idle ${Math.round(r.idle.producerCpu)}, in-page ${Math.round(r.inPage.producerCpu)}, sse ${Math.round(r.loaded.producerCpu)}, sse-pin ${r.pinned ? Math.round(r.pinned.producerCpu) : '-'}; feed worker parse+pack sse ${Math.round(r.loaded.worker)}, sse-pin ${r.pinned ? Math.round(r.pinned.worker) : '-'}\n`,
  );
  const budget = 1000 / 60;
  process.stdout.write(
    `p95 / 60 Hz frame budget (16.7 ms): idle ${(r.idle.p95 / budget).toFixed(2)}x, in-page feed ${(r.inPage.p95 / budget).toFixed(2)}x, through the hub ${(r.loaded.p95 / budget).toFixed(2)}x shared, ${r.pinned ? `${(r.pinned.p95 / budget).toFixed(2)}x` : '-'} pinned apart\n` +
      `load average while measuring: ${loadavg()
        .map((l) => l.toFixed(2))
        .join(' ')} on ${cpus().length} CPUs\n`,
  );
  if (r.threads) {
    const list = (pairs: [string, number][]): string =>
      pairs.map(([k, v]) => `${k} ${Math.round(v)}`).join(', ');
    process.stdout.write(
      `chromium CPU through the hub, traced (ms per s): ${list(r.threads.threads)}\n` +
        `  page main thread by stage: ${list(r.threads.main)}\n`,
    );
  }
}

if (process.argv[1]?.endsWith('frames.ts')) await printFrameBench();
