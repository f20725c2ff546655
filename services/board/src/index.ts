// The desk's live view is a set of static files: the browser does the rendering and reads
// /events (server-sent events) from whichever process mounts this. Nothing here knows the engine.
import { readFile } from 'node:fs/promises';
import type { IncomingMessage, ServerResponse } from 'node:http';
import { extname, join, normalize, sep } from 'node:path';
import { fileURLToPath } from 'node:url';

/** Absolute path of the page's files. */
export const boardStaticDir: string = fileURLToPath(new URL('../static/', import.meta.url));

/** URL prefix of the page's assets; the page itself is also served at `/`. */
export const BOARD_PREFIX = '/board/';

const TYPES: Record<string, string> = {
  '.html': 'text/html; charset=utf-8',
  '.js': 'text/javascript; charset=utf-8',
  '.css': 'text/css; charset=utf-8',
  '.svg': 'image/svg+xml',
  '.png': 'image/png',
  '.ico': 'image/x-icon',
  '.json': 'application/json; charset=utf-8',
};

// The page loads only its own scripts and styles and talks only to its own origin.
const SECURITY_HEADERS = {
  'content-security-policy':
    "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' data:; connect-src 'self'; object-src 'none'; base-uri 'none'; frame-ancestors 'none'",
  'x-content-type-options': 'nosniff',
  'referrer-policy': 'no-referrer',
} as const;

/** Maps a request path to a file under the static directory, or undefined when it is not ours. */
export function boardFileFor(pathname: string): string | undefined {
  if (pathname === '/' || pathname === '/index.html' || pathname === '/board' || pathname === BOARD_PREFIX) {
    return 'index.html';
  }
  if (!pathname.startsWith(BOARD_PREFIX)) return undefined;
  let rel: string;
  try {
    rel = decodeURIComponent(pathname.slice(BOARD_PREFIX.length));
  } catch {
    return undefined;
  }
  const clean = normalize(rel);
  // No way out of the static directory: no parent steps, no absolute paths, no hidden files.
  if (clean.startsWith('..') || clean.includes(`${sep}..`) || clean.startsWith(sep) || clean.includes('\0'))
    return undefined;
  if (clean.split(sep).some((part) => part.startsWith('.'))) return undefined;
  if (!(extname(clean) in TYPES)) return undefined;
  return clean;
}

/**
 * Serves the page and its assets. Returns false, having written nothing, when the path is not the
 * board's, so a server can try its other routes; true when this call answers (or will answer) it.
 */
export function serveBoard(req: IncomingMessage, res: ServerResponse): boolean {
  const pathname = new URL(req.url ?? '/', 'http://board.invalid').pathname;
  const file = boardFileFor(pathname);
  if (file === undefined) {
    // A path under the prefix that maps to nothing is still ours to refuse.
    if (!pathname.startsWith(BOARD_PREFIX)) return false;
    res.writeHead(404, { 'content-type': 'text/plain; charset=utf-8' });
    res.end(`not found: ${pathname}\n`);
    return true;
  }
  if (req.method !== 'GET' && req.method !== 'HEAD') {
    res.writeHead(405, { allow: 'GET, HEAD', 'content-type': 'text/plain; charset=utf-8' });
    res.end(`method not allowed: ${pathname} accepts GET and HEAD\n`);
    return true;
  }
  readFile(join(boardStaticDir, file)).then(
    (body) => {
      res.writeHead(200, {
        'content-type': TYPES[extname(file)] ?? 'application/octet-stream',
        'content-length': body.length,
        // Small files, always revalidated: a new deploy shows up on the next reload.
        'cache-control': 'no-cache',
        ...SECURITY_HEADERS,
      });
      res.end(req.method === 'HEAD' ? undefined : body);
    },
    () => {
      res.writeHead(404, { 'content-type': 'text/plain; charset=utf-8' });
      res.end(`not found: ${pathname}\n`);
    },
  );
  return true;
}
