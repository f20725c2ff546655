// A real browser for the integration suites: Debian's chromium driven by playwright-core, with a
// fresh profile each time so no cache, storage or extension from another run colours a result.
import { existsSync } from 'node:fs';
import { chmod, mkdtemp, rm, writeFile } from 'node:fs/promises';
import { createServer, type Server } from 'node:http';
import type { AddressInfo } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { chromium, type BrowserContext } from 'playwright-core';
import { serveBoard } from '@keelson/board';
import type { SseHub } from '@keelson/http';

export const CHROMIUM_PATH = process.env.KEELSON_CHROMIUM ?? '/usr/bin/chromium';

export const CHROMIUM_ARGS = [
  '--headless',
  '--no-sandbox',
  '--disable-gpu',
  '--disable-quic',
  '--no-first-run',
  '--disable-background-networking',
  '--disable-component-update',
  '--disable-sync',
];

/**
 * Whether the browser suites can run here. Without chromium they are skipped, loudly, on a
 * developer machine; in CI (CI set) a missing browser is a failure, never a silent skip.
 */
export function chromiumAvailability(): { available: boolean; reason: string } {
  if (existsSync(CHROMIUM_PATH)) return { available: true, reason: '' };
  const reason = `chromium not found at ${CHROMIUM_PATH} (apt-get install chromium, or set KEELSON_CHROMIUM)`;
  if (process.env.CI) throw new Error(`browser suite cannot run in CI: ${reason}`);
  process.stderr.write(`\n*** SKIPPING browser tests: ${reason} ***\n\n`);
  return { available: false, reason };
}

export interface BrowserSession {
  context: BrowserContext;
  close(): Promise<void>;
}

export async function openBrowser(
  opts: {
    colorScheme?: 'light' | 'dark';
    viewport?: { width: number; height: number };
    /**
     * CPU list (taskset -c syntax, e.g. "1") to run the whole browser on: a benchmark that wants
     * the page and its producer on separate cores. The browser is started under taskset, so every
     * process it forks (renderers, GPU, utility) inherits the affinity.
     */
    cpus?: string;
  } = {},
): Promise<BrowserSession> {
  const profile = await mkdtemp(join(tmpdir(), 'keelson-chromium-'));
  let executablePath = CHROMIUM_PATH;
  if (opts.cpus !== undefined) {
    if (!/^[\d,-]+$/.test(opts.cpus)) throw new Error(`cpus: '${opts.cpus}' is not a taskset CPU list`);
    executablePath = join(profile, 'chromium-pinned.sh');
    await writeFile(executablePath, `#!/bin/sh\nexec taskset -c ${opts.cpus} ${CHROMIUM_PATH} "$@"\n`);
    await chmod(executablePath, 0o755);
  }
  // launchPersistentContext is playwright's way to give chromium its own --user-data-dir.
  const context = await chromium.launchPersistentContext(profile, {
    executablePath,
    args: CHROMIUM_ARGS,
    headless: true,
    viewport: opts.viewport ?? { width: 1600, height: 1000 },
    colorScheme: opts.colorScheme ?? 'light',
    deviceScaleFactor: 1,
  });
  return {
    context,
    async close() {
      await context.close().catch(() => undefined);
      await rm(profile, { recursive: true, force: true });
    },
  };
}

export interface BoardServer {
  url: string;
  server: Server;
  close(): Promise<void>;
}

/** The page and its event stream on 127.0.0.1, on a free port. */
export async function startBoardServer(hub: SseHub): Promise<BoardServer> {
  const server = createServer((req, res) => {
    const path = new URL(req.url ?? '/', 'http://x').pathname;
    if (path === '/events') return hub.handle(req, res);
    if (serveBoard(req, res)) return;
    res.writeHead(404, { 'content-type': 'text/plain' });
    res.end('not found\n');
  });
  await new Promise<void>((resolve) => server.listen(0, '127.0.0.1', resolve));
  const { port } = server.address() as AddressInfo;
  return {
    url: `http://127.0.0.1:${port}`,
    server,
    close: () =>
      new Promise<void>((resolve) => {
        server.closeAllConnections();
        server.close(() => resolve());
      }),
  };
}
