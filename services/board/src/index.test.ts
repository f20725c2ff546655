import { createServer, type Server } from 'node:http';
import type { AddressInfo } from 'node:net';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { boardFileFor, serveBoard } from './index.ts';

let server: Server;
let base: string;
beforeAll(async () => {
  server = createServer((req, res) => {
    if (!serveBoard(req, res)) {
      res.writeHead(418);
      res.end('not the board');
    }
  });
  await new Promise<void>((r) => server.listen(0, '127.0.0.1', r));
  base = `http://127.0.0.1:${(server.address() as AddressInfo).port}`;
});
afterAll(() => new Promise((r) => server.close(r)));

describe('serveBoard', () => {
  it('serves the page at / and its assets under /board/ with their media types (RFC 9239 for JavaScript)', async () => {
    const page = await fetch(`${base}/`);
    expect(page.status).toBe(200);
    expect(page.headers.get('content-type')).toBe('text/html; charset=utf-8');
    expect(page.headers.get('content-security-policy')).toContain("default-src 'self'");
    expect(await page.text()).toContain('<title>Keelson');
    const js = await fetch(`${base}/board/js/main.js`);
    expect(js.headers.get('content-type')).toBe('text/javascript; charset=utf-8');
    const css = await fetch(`${base}/board/board.css`, { method: 'HEAD' });
    expect(css.status).toBe(200);
    expect(Number(css.headers.get('content-length'))).toBeGreaterThan(0);
  });

  it('leaves other paths to the caller and refuses what is under its prefix but not a file', async () => {
    expect((await fetch(`${base}/metrics`)).status).toBe(418);
    expect((await fetch(`${base}/board/nothing.js`)).status).toBe(404);
    expect((await fetch(`${base}/board/index.html`, { method: 'POST' })).status).toBe(405);
  });

  it('never maps a path outside its directory', () => {
    expect(boardFileFor('/board/../src/index.ts')).toBeUndefined();
    expect(boardFileFor('/board/%2e%2e/%2e%2e/package.json')).toBeUndefined();
    expect(boardFileFor('/board/.hidden.js')).toBeUndefined();
    expect(boardFileFor('/board/js/../js/main.js')).toBe('js/main.js');
    expect(boardFileFor('/board/%E0%A4%A')).toBeUndefined();
  });
});
