// The desk view in a real browser: Debian's chromium reads the page and its event stream from a
// node:http server holding serveBoard and an SseHub. The reference outside the project is the
// browser itself (its EventSource implements the WHATWG HTML "server-sent events" section, its
// accessibility tree the WAI-ARIA treegrid pattern) and the contract's own schemas, which every
// message fed here must pass.
import { spawn, type ChildProcess } from 'node:child_process';
import { copyFile, mkdir } from 'node:fs/promises';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { Page } from 'playwright-core';
import {
  alertSchema,
  exposureSchema,
  staleFeedSchema,
  type AlertMsg,
  type ExposureMsg,
  type StaleFeedMsg,
} from '@keelson/shared-types';
import { SseHub, type LimitView } from '@keelson/http';
import { KafkaBus, ensureTopics, topicPlan, waitForTopics } from '@keelson/bus';
import { DemoBook } from '../services/board/demo/scenario.ts';
import {
  chromiumAvailability,
  openBrowser,
  startBoardServer,
  type BoardServer,
  type BrowserSession,
} from './support/browser.ts';
import { findBroker, uniquePrefix } from './support/kafka.ts';

const { available } = chromiumAvailability();
const ARTIFACTS = new URL('./artifacts/', import.meta.url);

/** Reads a figure as the page prints it (1.23M, 45.6k, −812, 0.0123) back into a number. */
function readFigure(text: string): number {
  const m = /^(\u2212|-)?([\d.]+)([kMB]?)$/.exec(text.trim());
  if (!m) throw new Error(`not a figure: '${text}'`);
  const scale = { '': 1, k: 1e3, M: 1e6, B: 1e9 }[m[3] as '' | 'k' | 'M' | 'B'];
  return (m[1] ? -1 : 1) * Number(m[2]) * scale;
}

const valid = {
  exposure: (e: ExposureMsg): ExposureMsg => exposureSchema.parse(e) as ExposureMsg,
  alert: (a: AlertMsg): AlertMsg => alertSchema.parse(a) as AlertMsg,
  stale: (s: StaleFeedMsg): StaleFeedMsg => staleFeedSchema.parse(s) as StaleFeedMsg,
};

describe.skipIf(!available)('desk view in chromium', () => {
  let browser: BrowserSession;
  let server: BoardServer;
  let hub: SseHub;
  let page: Page;
  const book = new DemoBook({ seed: 11 });
  const problems: string[] = [];
  const pelican = 'desk=ORCA/book=ORCA-1/underlying=PELICAN';
  let vegaLimit: LimitView;

  const orcaVega = (): number => book.exposures().find((e) => e.nodeKey === 'desk=ORCA')!.vega;
  const publishAll = (): void => {
    for (const e of book.exposures()) hub.publishExposure(valid.exposure(e));
  };
  const cell = (key: string, col: string) => page.locator(`.grid-body .row[data-key="${key}"] .c-${col}`);

  beforeAll(async () => {
    hub = new SseHub({ flushIntervalMs: 50 });
    const max = Math.ceil(Math.abs(orcaVega()) / 0.6 / 1000) * 1000;
    vegaLimit = {
      limitId: 'L-ORCA-VEGA',
      nodeKey: 'desk=ORCA',
      metric: 'vega',
      max,
      min: -max,
      warnAt: 0.8,
      hysteresis: 0.05,
      value: orcaVega(),
      utilization: Math.abs(orcaVega()) / max,
      level: 'ok',
    };
    // A few more limits at different distances from their bounds, and an episode that has already
    // come and gone, so the panels show what a session looks like.
    const node = (key: string): ExposureMsg => book.exposures().find((e) => e.nodeKey === key)!;
    const around = (limitId: string, key: string, metric: 'vega' | 'pv' | 'delta', u: number): LimitView => {
      const value = node(key)[metric] as number;
      const bound = Math.abs(value) / u;
      return {
        limitId,
        nodeKey: key,
        metric,
        max: bound,
        min: -bound,
        warnAt: 0.8,
        hysteresis: 0.05,
        value,
        utilization: u,
        level: u >= 1 ? 'breach' : u >= 0.8 ? 'warning' : 'ok',
      };
    };
    const others = [
      around('L-HERON-VEGA', 'desk=HERON', 'vega', 0.86),
      around('L-KESTREL-1-PV', 'desk=KESTREL/book=KESTREL-1', 'pv', 0.55),
      around('L-PELICAN-DELTA', 'underlying=PELICAN', 'delta', 0.31),
    ];
    // The bound on the side the value stands (contract: max for value >= 0, min below 0).
    const sideBound = (v: LimitView): number => (v.value < 0 ? v.min! : v.max!);
    const pelicanBound = sideBound(others[2]!);
    const heronWarn = valid.alert({
      type: 'alert',
      alertId: 'L-HERON-VEGA#1',
      limitId: 'L-HERON-VEGA',
      nodeKey: 'desk=HERON',
      metric: 'vega',
      value: others[0]!.value,
      bound: sideBound(others[0]!),
      utilization: 0.86,
      severity: 'warning',
      previous: 'ok',
      state: 'raised',
      ts: '2026-03-02T14:29:40.250Z',
    });
    const pelicanEpisode = [
      valid.alert({
        type: 'alert',
        alertId: 'L-PELICAN-DELTA#1',
        limitId: 'L-PELICAN-DELTA',
        nodeKey: 'underlying=PELICAN',
        metric: 'delta',
        value: 0.82 * pelicanBound,
        bound: pelicanBound,
        utilization: 0.82,
        severity: 'warning',
        previous: 'ok',
        state: 'raised',
        ts: '2026-03-02T14:21:05.500Z',
      }),
      valid.alert({
        type: 'alert',
        alertId: 'L-PELICAN-DELTA#1',
        limitId: 'L-PELICAN-DELTA',
        nodeKey: 'underlying=PELICAN',
        metric: 'delta',
        value: 0.7 * pelicanBound,
        bound: pelicanBound,
        utilization: 0.7,
        severity: 'ok',
        previous: 'warning',
        state: 'cleared',
        ts: '2026-03-02T14:24:47.000Z',
      }),
    ];
    hub.setSnapshot(() => ({
      exposures: book.exposures().map(valid.exposure),
      alerts: [...pelicanEpisode, heronWarn],
      limits: [vegaLimit, ...others],
    }));
    server = await startBoardServer(hub);
    browser = await openBrowser();
    page = await browser.context.newPage();
    page.on('pageerror', (err) => problems.push(`page error: ${err.message}`));
    page.on('console', (msg) => {
      if (msg.type() === 'error') problems.push(`console: ${msg.text()}`);
    });
    await page.goto(server.url);
    await page.waitForSelector('body[data-ready="true"]');
  });

  afterAll(async () => {
    hub?.close();
    await browser?.close();
    await server?.close();
  });

  it('loads the page, connects and shows the tree with the snapshot values', async () => {
    await expect.poll(() => page.locator('#conn').getAttribute('data-state')).toBe('live');
    const firm = book.exposures().find((e) => e.nodeKey === 'firm')!;
    const shown = readFigure((await cell('firm', 'pv').textContent()) ?? '');
    // Three significant figures at most: the printed value is within half a unit of its last digit.
    expect(Math.abs(shown - firm.pv) / Math.abs(firm.pv)).toBeLessThan(0.005);
    // Delta is defined only where a node fixes one underlying: a dash on the firm, a figure on a leaf.
    expect(await cell('firm', 'delta').textContent()).toBe('\u2013');
    expect(readFigure((await cell(pelican, 'delta').textContent()) ?? '')).not.toBeNaN();
    expect(await page.locator('[role="treegrid"]').getAttribute('aria-rowcount')).not.toBeNull();
    expect(await page.locator(`.row[data-key="desk=ORCA"]`).getAttribute('aria-level')).toBe('2');
    expect(await page.locator(`.row[data-key="desk=ORCA"]`).getAttribute('aria-expanded')).toBe('true');
  });

  it('shows a tick: the value changes on screen and is marked up or down', async () => {
    const before = await cell(pelican, 'pv').textContent();
    let leaf: ExposureMsg | undefined;
    // A tick can leave a rounded figure unchanged; tick until the printed one moves.
    for (let i = 0; i < 20; i++) {
      book.tick(1000);
      publishAll();
      leaf = book.exposures().find((e) => e.nodeKey === pelican)!;
      await page.waitForTimeout(120);
      if ((await cell(pelican, 'pv').textContent()) !== before) break;
    }
    const after = (await cell(pelican, 'pv').textContent()) ?? '';
    expect(after).not.toBe(before);
    expect(Math.abs(readFigure(after) - leaf!.pv)).toBeLessThanOrEqual(Math.abs(leaf!.pv) * 0.005 + 0.01);
    const flash = await page
      .locator(
        `.grid-body .row[data-key="${pelican}"] .cell.up, .grid-body .row[data-key="${pelican}"] .cell.dn`,
      )
      .count();
    expect(flash).toBeGreaterThan(0);
  });

  it('reads the stream again after a reconnect, under the new connection’s key numbering', async () => {
    // The hub numbers node keys per connection (sse.ts, the nodes event). Dropping the connection
    // makes the browser reconnect after the stream's retry delay, and the new numbering starts at 0
    // with whichever node is published first: here a leaf that had another id before.
    const firstKey = book.exposures()[0]!.nodeKey;
    expect(firstKey).not.toBe(pelican);
    server.server.closeAllConnections();
    await expect.poll(() => hub.stats().clients, { timeout: 10_000 }).toBe(0);
    await expect.poll(() => hub.stats().clients, { timeout: 10_000 }).toBe(1);
    await expect.poll(() => page.locator('#conn').getAttribute('data-state')).toBe('live');
    const firstShown = await cell(firstKey, 'pv').textContent();
    let leaf: ExposureMsg | undefined;
    for (let i = 0; i < 20; i++) {
      book.tick(1000);
      leaf = valid.exposure(book.exposures().find((e) => e.nodeKey === pelican)!);
      hub.publishExposure(leaf); // id 0 on this connection
      await page.waitForTimeout(120);
      const text = (await cell(pelican, 'pv').textContent()) ?? '';
      if (Math.abs(readFigure(text) - leaf.pv) <= Math.abs(leaf.pv) * 0.005) break;
    }
    expect(
      Math.abs(readFigure((await cell(pelican, 'pv').textContent()) ?? '') - leaf!.pv),
    ).toBeLessThanOrEqual(Math.abs(leaf!.pv) * 0.005);
    // The node that was id 0 before still shows its own figure, not the leaf's.
    expect(await cell(firstKey, 'pv').textContent()).toBe(firstShown);
    publishAll();
  });

  it('reads the stream on the main thread where the browser has no workers', async () => {
    const bare = await browser.context.newPage();
    const errors: string[] = [];
    bare.on('pageerror', (err) => errors.push(err.message));
    bare.on('console', (msg) => {
      if (msg.type() === 'error') errors.push(msg.text());
    });
    // The page falls back to its own EventSource and the same reader (wire.js) when Worker is absent.
    await bare.addInitScript(() => {
      delete (window as unknown as { Worker?: unknown }).Worker;
    });
    await bare.goto(server.url);
    await bare.waitForSelector('body[data-ready="true"]');
    const bareCell = (key: string, col: string) =>
      bare.locator(`.grid-body .row[data-key="${key}"] .c-${col}`);
    let leaf: ExposureMsg | undefined;
    for (let i = 0; i < 20; i++) {
      book.tick(1000);
      publishAll();
      leaf = book.exposures().find((e) => e.nodeKey === pelican)!;
      await bare.waitForTimeout(120);
      const text = (await bareCell(pelican, 'pv').textContent()) ?? '';
      if (Math.abs(readFigure(text) - leaf.pv) <= Math.abs(leaf.pv) * 0.005) break;
    }
    const shown = readFigure((await bareCell(pelican, 'pv').textContent()) ?? '');
    expect(Math.abs(shown - leaf!.pv)).toBeLessThanOrEqual(Math.abs(leaf!.pv) * 0.005);
    // It did read on the main thread: no worker time was ever reported, parse time was.
    const counters = await bare.evaluate(() => {
      const c = (window as unknown as { keelsonBoard: { counters: { workerMs?: number; parseMs: number } } })
        .keelsonBoard.counters;
      return { workerMs: c.workerMs ?? null, parseMs: c.parseMs };
    });
    expect(counters.workerMs).toBeNull();
    expect(counters.parseMs).toBeGreaterThan(0);
    expect(errors).toEqual([]);
    await bare.close();
  });

  it('puts a limit breach in the alert panel, on the limit bar and in the assertive live region', async () => {
    book.bumpVega('ORCA', Math.sign(orcaVega()) * vegaLimit.max! * 0.5);
    publishAll();
    const value = orcaVega();
    const u = Math.abs(value) / vegaLimit.max!;
    expect(u).toBeGreaterThan(1);
    const breach = valid.alert({
      type: 'alert',
      alertId: 'L-ORCA-VEGA#1',
      limitId: 'L-ORCA-VEGA',
      nodeKey: 'desk=ORCA',
      metric: 'vega',
      value,
      bound: value >= 0 ? vegaLimit.max! : vegaLimit.min!,
      utilization: u,
      severity: 'breach',
      previous: 'ok',
      state: 'raised',
      ts: book.asOf(),
    });
    hub.publishAlert(breach);
    hub.publishLimit({ ...vegaLimit, value, utilization: u, level: 'breach' });
    const item = page.locator('.signals .sig.sev-breach').first();
    await item.waitFor();
    expect(await item.locator('.sig-limit').textContent()).toBe('L-ORCA-VEGA');
    expect(await item.locator('.sig-state').textContent()).toBe('raised');
    await expect
      .poll(() => page.locator('.limit[data-limit="L-ORCA-VEGA"]').getAttribute('data-level'))
      .toBe('breach');
    expect(await page.locator('.limit[data-limit="L-ORCA-VEGA"] .lvl').textContent()).toContain('breach');
    expect(await page.locator('#announce').textContent()).toContain('L-ORCA-VEGA');
    await expect.poll(() => page.locator('#breach-count').textContent()).toBe('1');
    // Highest first: the breached limit heads the list, above the one in warning.
    const order = await page
      .locator('.limit:not([hidden])')
      .evaluateAll((els) => els.map((e) => (e as HTMLElement).dataset.limit));
    expect(order.slice(0, 2)).toEqual(['L-ORCA-VEGA', 'L-HERON-VEGA']);
  });

  it('marks a stale feed in the alert panel, the header and the rows that hold it', async () => {
    book.setStale('PELICAN', true);
    publishAll();
    hub.publishAlert(
      valid.stale({
        type: 'stale-feed',
        underlying: 'PELICAN',
        state: 'raised',
        lastTick: '2026-03-02T14:30:00.000Z',
        ts: book.asOf(),
      }),
    );
    await page.locator('.sig-feed[data-underlying="PELICAN"]').waitFor();
    expect(await page.locator('.sig-feed[data-underlying="PELICAN"] .sig-state').textContent()).toBe(
      'feed quiet',
    );
    await expect.poll(() => page.locator('#quiet-count').textContent()).toBe('1');
    await expect.poll(() => cell(pelican, 'status').textContent()).toContain('stale');
  });

  it('moves through the tree from the keyboard and folds with Enter', async () => {
    await page.focus('[role="treegrid"]');
    await page.keyboard.press('Home');
    await page.keyboard.press('ArrowDown');
    // Desks sort by name under the firm: HERON first. The active row is drawn on the next frame.
    const activeKey = async (): Promise<string | null> => {
      const id = await page.locator('[role="treegrid"]').getAttribute('aria-activedescendant');
      return id ? page.locator(`#${id}`).getAttribute('data-key') : null;
    };
    await expect.poll(activeKey).toBe('desk=HERON');
    await page.keyboard.press('Enter');
    await expect
      .poll(() => page.locator('.row[data-key="desk=HERON"]').getAttribute('aria-expanded'))
      .toBe('false');
    expect(
      await page.locator('.grid-body .row[data-key="desk=HERON/book=HERON-1"]:not([hidden])').count(),
    ).toBe(0);
    await page.keyboard.press('ArrowRight');
    await expect
      .poll(() => page.locator('.row[data-key="desk=HERON"]').getAttribute('aria-expanded'))
      .toBe('true');
    await page.keyboard.press('Home');
    await expect.poll(activeKey).toBe('firm');
  });

  it('switches theme on the toggle, remembers it, and filters the log to breaches', async () => {
    const theme = () => page.evaluate(() => document.documentElement.dataset.theme ?? 'auto');
    expect(await theme()).toBe('auto');
    await page.click('#theme-toggle');
    expect(await theme()).toBe('light');
    await page.click('#theme-toggle');
    expect(await theme()).toBe('dark');
    expect(await page.evaluate(() => localStorage.getItem('keelson.board.theme'))).toBe('dark');
    await page.click('#theme-toggle');
    expect(await theme()).toBe('auto');
    await page.check('#only-breach');
    expect(await page.locator('.signals .sig:visible').count()).toBe(1);
    expect(await page.locator('.signals .sig:visible .sig-limit').textContent()).toBe('L-ORCA-VEGA');
    await page.uncheck('#only-breach');
  });

  it('charts the chosen node over the session and saves a screenshot', async () => {
    for (let i = 0; i < 40; i++) {
      book.tick(1000);
      publishAll();
      await page.waitForTimeout(30);
    }
    await expect.poll(() => page.locator('#chart-readout').textContent()).toContain('of firm');
    await page.waitForTimeout(400);
    await mkdir(ARTIFACTS, { recursive: true });
    const shot = new URL('board.png', ARTIFACTS);
    await page.screenshot({ path: shot.pathname });
    await page.emulateMedia({ colorScheme: 'dark' });
    await page.waitForTimeout(400);
    await page.screenshot({ path: new URL('board-dark.png', ARTIFACTS).pathname });
    await page.emulateMedia({ colorScheme: 'light' });
    // The README's copy is refreshed on request only, so an ordinary run never dirties the tree.
    if (process.env.KEELSON_UPDATE_SCREENSHOT === '1') {
      await copyFile(shot, new URL('../services/board/screenshot.png', import.meta.url));
    }
    expect(problems).toEqual([]);
  });
});

// The same page mounted by the real process: the embedded runtime (simulator, in-process bus, engine
// runner, HTTP server) serves it at / and its event stream at /events.
describe.skipIf(!available)('desk view on the real embedded engine', () => {
  let browser: BrowserSession;
  let runtime: { url: string; stop(): Promise<void>; engine: { snapshot(): ExposureMsg[] } };
  let page: Page;
  const problems: string[] = [];

  beforeAll(async () => {
    const { startEmbedded, createLogger } = await import('@keelson/runtime');
    const logger = await createLogger({ level: 'error', pretty: false });
    // Small book, quick clock: a few seconds of wall time are minutes of market.
    runtime = await startEmbedded({ port: 0, seed: 3, speed: 20, underlyings: 40, trades: 1500, logger });
    browser = await openBrowser();
    page = await browser.context.newPage();
    page.on('pageerror', (err) => problems.push(`page error: ${err.message}`));
    page.on('console', (msg) => {
      if (msg.type() === 'error') problems.push(`console: ${msg.text()}`);
    });
  }, 120_000);

  afterAll(async () => {
    await browser?.close();
    await runtime?.stop();
  });

  it('shows the engine’s firm and desk nodes and their values moving', async () => {
    await page.goto(runtime.url);
    await page.waitForSelector('body[data-ready="true"]');
    await expect.poll(() => page.locator('#conn').getAttribute('data-state')).toBe('live');
    await expect
      .poll(() => page.locator('.grid-body .row[data-key="firm"] .c-pv').textContent(), { timeout: 20_000 })
      .toMatch(/\d/);
    const desks = runtime.engine.snapshot().filter((e) => /^desk=[^/]+$/.test(e.nodeKey));
    expect(desks.length).toBeGreaterThan(0);
    for (const d of desks)
      expect(await page.locator(`.grid-body .row[data-key="${d.nodeKey}"]`).count()).toBe(1);
    // The engine's firm P&L as the page prints it matches the engine's own snapshot to display precision.
    const first = (await page.locator('.grid-body .row[data-key="firm"] .c-pv').textContent()) ?? '';
    await expect
      .poll(() => page.locator('.grid-body .row[data-key="firm"] .c-pv').textContent(), { timeout: 20_000 })
      .not.toBe(first);
    await page.waitForTimeout(300);
    const firm = runtime.engine.snapshot().find((e) => e.nodeKey === 'firm')!;
    const shown = readFigure(
      (await page.locator('.grid-body .row[data-key="firm"] .c-pv').textContent()) ?? '',
    );
    // The engine moves on between the two reads; the board lags it by at most a flush and a frame.
    expect(Math.abs(shown - firm.pv)).toBeLessThan(Math.abs(firm.pv) * 0.05 + 1);
    await mkdir(ARTIFACTS, { recursive: true });
    await page.screenshot({ path: new URL('board-embedded.png', ARTIFACTS).pathname });
    expect(problems).toEqual([]);
  });
});

// The board service on Kafka: `keelson board` as its own process reads the topics the engine
// writes (records published here as the engine would), and the page it serves shows them, with the
// limit's bounds from the limits topic rather than guessed from alerts.
const broker = available ? await findBroker() : undefined;
describe.skipIf(!available || !broker)('desk view from keelson board on Kafka', () => {
  let browser: BrowserSession;
  let child: ChildProcess;
  let url = '';
  let bus: KafkaBus;
  const prefix = uniquePrefix('board');
  const book = new DemoBook({ seed: 23 });
  let stderr = '';

  beforeAll(async () => {
    bus = new KafkaBus({ brokers: broker!.brokers, topicPrefix: prefix, clientId: 'board-test' });
    const admin = bus.admin();
    await admin.connect();
    const plan = topicPlan({ partitions: 2 });
    await ensureTopics(admin, prefix, plan);
    await waitForTopics(
      admin,
      plan.map((s) => prefix + s.name),
    );
    await admin.disconnect();
    child = spawn(
      process.execPath,
      [
        'services/cli/bin/keelson.js',
        'board',
        '--brokers',
        broker!.brokers.join(','),
        '--topic-prefix',
        prefix,
        '--port',
        '0',
        '--log-level',
        'warn',
      ],
      {
        cwd: new URL('..', import.meta.url).pathname,
        stdio: ['ignore', 'pipe', 'pipe'],
      },
    );
    child.stderr!.on('data', (d: Buffer) => (stderr += d.toString()));
    url = await new Promise<string>((resolve, reject) => {
      let out = '';
      child.stdout!.on('data', (d: Buffer) => {
        out += d.toString();
        const m = /(http:\/\/127\.0\.0\.1:\d+)\//.exec(out);
        if (m) resolve(m[1]!);
      });
      child.once('exit', (code) => reject(new Error(`keelson board exited ${code}: ${stderr}`)));
    });
    browser = await openBrowser();
  }, 180_000);

  afterAll(async () => {
    await browser?.close();
    if (child && child.exitCode === null) {
      const exited = new Promise((r) => child.once('exit', r));
      child.kill('SIGINT');
      await exited;
    }
    await bus?.close();
  });

  it('serves the nodes, the limit with its bounds and the breach read from the topics', async () => {
    const orca = book.exposures().find((e) => e.nodeKey === 'desk=ORCA')!;
    const max = Math.ceil(Math.abs(orca.vega) / 1.2);
    // Shaped as the contract's limit message; the bound is set so the node stands at 120%.
    const limit = {
      type: 'limit',
      limitId: 'L-ORCA-VEGA',
      scope: { desk: 'ORCA' },
      metric: 'vega',
      max,
      min: -max,
      warnAt: 0.75,
      hysteresis: 0.05,
      ts: book.asOf(),
    };
    await bus.publish('limits', [{ key: limit.limitId, value: JSON.stringify(limit) }]);
    await bus.publish(
      'exposures',
      book.exposures().map((e) => ({ key: e.nodeKey, value: JSON.stringify(valid.exposure(e)) })),
    );
    const u = Math.abs(orca.vega) / max;
    const breach = valid.alert({
      type: 'alert',
      alertId: 'L-ORCA-VEGA#1',
      limitId: 'L-ORCA-VEGA',
      nodeKey: 'desk=ORCA',
      metric: 'vega',
      value: orca.vega,
      bound: orca.vega >= 0 ? max : -max,
      utilization: u,
      severity: 'breach',
      previous: 'ok',
      state: 'raised',
      ts: book.asOf(),
    });
    await bus.publish('alerts', [
      { key: breach.limitId, value: JSON.stringify(breach) },
      { key: 'garbage', value: '{not json' },
    ]);

    await expect.poll(async () => (await fetch(`${url}/readyz`)).status, { timeout: 30_000 }).toBe(200);
    await expect
      .poll(async () => ((await (await fetch(`${url}/exposures`)).json()) as ExposureMsg[]).length, {
        timeout: 30_000,
      })
      .toBe(book.exposures().length);

    const page = await browser.context.newPage();
    await page.goto(`${url}/`);
    await page.waitForSelector('body[data-ready="true"]');
    await expect.poll(() => page.locator('.grid-body .row[data-key="desk=ORCA"]').count()).toBe(1);
    const bar = page.locator('.limit[data-limit="L-ORCA-VEGA"]');
    await expect.poll(() => bar.getAttribute('data-level')).toBe('breach');
    const foot = (await bar.locator('.limit-foot').textContent()) ?? '';
    // warnAt 0.75 comes from the limits topic: an alert alone would leave the default 80% "(assumed)".
    expect(foot).toContain('warns at 75.0%');
    expect(foot).not.toContain('assumed');
    expect(foot).toContain(`${(u * 100).toFixed(1)}%`);
    await expect
      .poll(() => page.locator('.signals .sig.sev-breach .sig-limit').textContent())
      .toBe('L-ORCA-VEGA');
    // The unreadable record was counted, not shown.
    const metrics = await (await fetch(`${url}/metrics`)).text();
    expect(metrics).toMatch(/keelson_board_records_total\{topic="alerts",outcome="invalid"\} 1/);
    expect(metrics).toMatch(/keelson_board_sse_clients 1/);
    await page.close();
  });
});
