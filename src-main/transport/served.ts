// Served mode: the built renderer and the contract over a WebSocket, on 127.0.0.1 only, behind a
// random token that is part of every path (http://127.0.0.1:PORT/TOKEN/). A request or a
// connection without the token is refused, so another user of the machine (or a web page in the
// user's own browser, which cannot learn the token) cannot reach the engine; a user may still
// reach it from elsewhere through an SSH tunnel to the port. Requests must name a loopback host
// (no DNS rebinding) and a socket's Origin must be the page's own. Nothing a client sends can
// stop the server: bad requests get an answer, bad sockets are dropped.
import crypto from 'node:crypto';
import fs from 'node:fs';
import http from 'node:http';
import path from 'node:path';
import { WebSocketServer, type WebSocket } from 'ws';
import { interceptService, serveService, type Port } from '../../src-shared/contract/channel';
import { decodeMessage, encodeMessage } from '../../src-shared/contract/wire';
import type { ScanfoldService } from '../../src-shared/contract/service';
import { InputError } from '../../src-shared/model/errors';

export interface ServedOptions {
  service: ScanfoldService;
  /** Folder of the built renderer (index.html and its assets). */
  rendererDir: string;
  /** 0 (default): any free port. */
  port?: number;
  /** For tests; a fresh random token otherwise. */
  token?: string;
}

export interface Served {
  /** The address to open, token included. */
  url: string;
  port: number;
  token: string;
  close(): Promise<void>;
}

const TYPES: Record<string, string> = {
  '.html': 'text/html; charset=utf-8', '.js': 'text/javascript; charset=utf-8', '.mjs': 'text/javascript; charset=utf-8',
  '.css': 'text/css; charset=utf-8', '.png': 'image/png', '.svg': 'image/svg+xml', '.json': 'application/json', '.map': 'application/json',
};

/**
 * The Content-Security-Policy of every page: our own scripts and styles, the contract's socket,
 * nothing remote. One relaxation: 'unsafe-eval', because regl compiles each draw command into a
 * generated function; only our own bundle runs on the page, so only our code can reach it.
 */
export function contentSecurityPolicy(): string {
  return [
    "default-src 'none'", "script-src 'self' 'unsafe-eval'", "style-src 'self'", "img-src 'self' data: blob:",
    // 'self' covers the page's own socket, whatever port a tunnel gives the page.
    "connect-src 'self'", "font-src 'self'", "base-uri 'none'", "form-action 'none'", "frame-ancestors 'none'",
  ].join('; ');
}

/**
 * One app page at a time: the engine holds one session (its kept results, its recovery file), so
 * two pages would mix their work (a dataset opened in one forgets the other's results). A second
 * page's requests wait this long for the first page to go (a reload closes the old page's socket
 * as the new one connects), then are refused, saying why; tools (no Origin) are not pages.
 */
export const PAGE_WAIT_MS = 3000;
const ANOTHER_PAGE = 'Scanfold is open in another tab or window, and one engine serves one app page at a time ' +
  '(two would mix their work); expected this page to be the only one: close the other, then reload this page';

/** Requests a browser may make that would reach the engine's host in ways we do not serve. */
const REFUSED = 'refused: open the address (with its token) that `scanfold serve` printed\n';

export async function startServed(opts: ServedOptions): Promise<Served> {
  const token = opts.token ?? crypto.randomBytes(18).toString('base64url');
  const root = path.resolve(opts.rendererDir);
  if (!fs.existsSync(path.join(root, 'index.html'))) throw new Error(`served mode: ${root}/index.html is missing; run \`npm run build\` first`);
  const real = opts.service;
  let port = 0;
  const server = http.createServer((req, res) => {
    const url = parseUrl(req.url);
    const prefix = `/${token}/`;
    if (req.method !== 'GET' || !url || !url.pathname.startsWith(prefix) || !loopbackHost(req.headers.host)) {
      res.writeHead(403, { 'content-type': 'text/plain; charset=utf-8' }).end(REFUSED);
      return;
    }
    let rel: string;
    try {
      rel = decodeURIComponent(url.pathname.slice(prefix.length)) || 'index.html';
    } catch {
      res.writeHead(400, { 'content-type': 'text/plain; charset=utf-8' }).end('bad path\n');
      return;
    }
    const file = path.resolve(root, rel);
    if (!file.startsWith(root + path.sep) || !fs.existsSync(file) || !fs.statSync(file).isFile()) {
      res.writeHead(404, { 'content-type': 'text/plain; charset=utf-8' }).end('not found\n');
      return;
    }
    res.writeHead(200, {
      'content-type': TYPES[path.extname(file)] ?? 'application/octet-stream',
      'content-security-policy': contentSecurityPolicy(),
      'x-content-type-options': 'nosniff',
      'cache-control': 'no-store',
      'referrer-policy': 'no-referrer',
    });
    const stream = fs.createReadStream(file);
    stream.on('error', () => res.destroy());
    stream.pipe(res);
  });
  const wss = new WebSocketServer({ noServer: true, maxPayload: 64 * 2 ** 20 });
  const stops = new Set<() => void>();
  server.on('upgrade', (req, socket, head) => {
    socket.on('error', () => socket.destroy());
    const url = parseUrl(req.url);
    const origin = req.headers.origin;
    const host = req.headers.host;
    // A browser's socket comes from the page it served (same host and port); tools send no Origin.
    if (!url || url.pathname !== `/${token}/contract` || !loopbackHost(host) || (origin !== undefined && origin !== `http://${host}`)) {
      socket.end('HTTP/1.1 403 Forbidden\r\n\r\n');
      return;
    }
    wss.handleUpgrade(req, socket, head, (ws) => connect(ws, origin !== undefined));
  });
  // The app page whose requests are served (see PAGE_WAIT_MS), and pages waiting for it to go.
  let activePage: WebSocket | null = null;
  const pageWaiters = new Set<() => void>();
  const claimPage = async (ws: WebSocket): Promise<void> => {
    const deadline = Date.now() + PAGE_WAIT_MS;
    while (activePage !== null && activePage !== ws) {
      const left = deadline - Date.now();
      if (left <= 0 || ws.readyState !== ws.OPEN) throw new InputError(ANOTHER_PAGE, 'bad-request');
      await new Promise<void>((resolve) => {
        const timer = setTimeout(done, left);
        function done() { clearTimeout(timer); pageWaiters.delete(done); resolve(); }
        pageWaiters.add(done);
      });
    }
    activePage = ws;
  };
  const connect = (ws: WebSocket, isPage: boolean) => {
    ws.on('error', () => ws.terminate());
    const listeners = new Set<(m: unknown) => void>();
    const wsPort: Port = {
      send: (message) => { if (ws.readyState === ws.OPEN) ws.send(encodeMessage(message)); },
      onMessage: (l) => { listeners.add(l); return () => listeners.delete(l); },
    };
    ws.on('message', (data, isBinary) => {
      if (!isBinary) {
        ws.close(1003, 'the contract travels in binary messages');
        return;
      }
      let m: unknown;
      try {
        m = decodeMessage(new Uint8Array(data as Buffer));
      } catch {
        ws.close(1003, 'undecodable message');
        return;
      }
      for (const l of listeners) l(m);
    });
    // The jobs this client started end with its connection (a closed tab leaves nothing running);
    // the engine is never shut down by a client (the command that serves it does that).
    const jobs = new Set<string>();
    const own = interceptService(real, async (method, arg, call) => {
      if (method === 'shutdown') throw new Error('shutdown: not offered over the served connection');
      if (isPage) await claimPage(ws);
      const jobId = arg && typeof arg === 'object' && typeof (arg as { jobId?: unknown }).jobId === 'string' ? (arg as { jobId: string }).jobId : null;
      if (!jobId) return call();
      jobs.add(jobId);
      return call().finally(() => jobs.delete(jobId));
    });
    // A page waiting for another to go hears none of that page's jobs.
    const heard = { ...own, onEvent: (l: Parameters<ScanfoldService['onEvent']>[0]) => own.onEvent((e) => { if (!isPage || activePage === null || activePage === ws) l(e); }) } as ScanfoldService;
    const stop = serveService(heard, wsPort);
    stops.add(stop);
    ws.on('close', () => {
      stop();
      stops.delete(stop);
      for (const id of jobs) real.cancel(id).catch(() => undefined);
      if (activePage === ws) {
        activePage = null;
        for (const wake of [...pageWaiters]) wake();
      }
    });
  };
  await new Promise<void>((resolve, reject) => {
    server.once('error', (e: NodeJS.ErrnoException) => reject(e.code === 'EADDRINUSE'
      ? new InputError(`port ${opts.port} is already in use on 127.0.0.1; expected a free port, or --port 0 for any free one`, 'bad-request')
      : e));
    server.listen(opts.port ?? 0, '127.0.0.1', () => resolve());
  });
  port = (server.address() as { port: number }).port;
  return {
    url: `http://127.0.0.1:${port}/${token}/`,
    port,
    token,
    async close() {
      for (const stop of stops) stop();
      for (const c of wss.clients) c.terminate();
      wss.close();
      await new Promise<void>((resolve) => server.close(() => resolve()));
    },
  };
}

function parseUrl(raw: string | undefined): URL | null {
  try {
    return new URL(raw ?? '/', 'http://127.0.0.1');
  } catch {
    return null;
  }
}

/** Whether a Host header names this machine's loopback (any port: a tunnel may forward another). */
function loopbackHost(host: string | undefined): boolean {
  if (!host) return false;
  const name = host.replace(/:\d+$/, '');
  return name === '127.0.0.1' || name === 'localhost' || name === '[::1]';
}
