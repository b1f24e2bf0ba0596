// Served mode: the built renderer and the contract over a WebSocket, on 127.0.0.1 only, behind a
// random token that is part of every path (http://127.0.0.1:PORT/TOKEN/). A request or a
// connection without the token is refused, so another user of the machine (or a web page in the
// user's own browser, which cannot learn the token) cannot reach the engine; a user may still
// reach it from elsewhere through an SSH tunnel to the port.
import crypto from 'node:crypto';
import fs from 'node:fs';
import http from 'node:http';
import path from 'node:path';
import { WebSocketServer, type WebSocket } from 'ws';
import { serveService, type Port } from '../../src-shared/contract/channel';
import { decodeMessage, encodeMessage } from '../../src-shared/contract/wire';
import { SERVICE_METHODS, type ScanfoldService } from '../../src-shared/contract/service';

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
export function contentSecurityPolicy(port: number): string {
  return [
    "default-src 'none'", "script-src 'self' 'unsafe-eval'", "style-src 'self'", "img-src 'self' data: blob:",
    `connect-src ws://127.0.0.1:${port}`, "font-src 'self'", "base-uri 'none'", "form-action 'none'", "frame-ancestors 'none'",
  ].join('; ');
}

/** Requests a browser may make that would reach the engine's host in ways we do not serve. */
const REFUSED = 'refused: open the address (with its token) that `scanfold serve` printed\n';

export async function startServed(opts: ServedOptions): Promise<Served> {
  const token = opts.token ?? crypto.randomBytes(18).toString('base64url');
  const root = path.resolve(opts.rendererDir);
  if (!fs.existsSync(path.join(root, 'index.html'))) throw new Error(`served mode: ${root}/index.html is missing; run \`npm run build\` first`);
  // Over the network the engine is never shut down by a client; the command that serves it does that.
  const real = opts.service;
  const service = {
    ...Object.fromEntries(SERVICE_METHODS.map((m) => [m, (arg: never) => (real[m] as (a: never) => Promise<unknown>).call(real, arg)])),
    shutdown: () => Promise.reject(new Error('shutdown: not offered over the served connection')),
    onEvent: (l: Parameters<ScanfoldService['onEvent']>[0]) => real.onEvent(l),
  } as ScanfoldService;
  let port = 0;
  const server = http.createServer((req, res) => {
    const url = new URL(req.url ?? '/', 'http://127.0.0.1');
    const prefix = `/${token}/`;
    if (req.method !== 'GET' || !url.pathname.startsWith(prefix)) {
      res.writeHead(403, { 'content-type': 'text/plain; charset=utf-8' }).end(REFUSED);
      return;
    }
    const rel = decodeURIComponent(url.pathname.slice(prefix.length)) || 'index.html';
    const file = path.resolve(root, rel);
    if (!file.startsWith(root + path.sep) || !fs.existsSync(file) || !fs.statSync(file).isFile()) {
      res.writeHead(404, { 'content-type': 'text/plain; charset=utf-8' }).end('not found\n');
      return;
    }
    res.writeHead(200, {
      'content-type': TYPES[path.extname(file)] ?? 'application/octet-stream',
      'content-security-policy': contentSecurityPolicy(port),
      'x-content-type-options': 'nosniff',
      'cache-control': 'no-store',
      'referrer-policy': 'no-referrer',
    });
    fs.createReadStream(file).pipe(res);
  });
  const wss = new WebSocketServer({ noServer: true, maxPayload: 64 * 2 ** 20 });
  const stops = new Set<() => void>();
  server.on('upgrade', (req, socket, head) => {
    const url = new URL(req.url ?? '/', 'http://127.0.0.1');
    const origin = req.headers.origin;
    if (url.pathname !== `/${token}/contract` || (origin !== undefined && origin !== `http://127.0.0.1:${port}` && origin !== `http://localhost:${port}`)) {
      socket.end('HTTP/1.1 403 Forbidden\r\n\r\n');
      return;
    }
    wss.handleUpgrade(req, socket, head, (ws) => connect(ws));
  });
  const connect = (ws: WebSocket) => {
    const listeners = new Set<(m: unknown) => void>();
    const wsPort: Port = {
      send: (message) => { if (ws.readyState === ws.OPEN) ws.send(encodeMessage(message)); },
      onMessage: (l) => { listeners.add(l); return () => listeners.delete(l); },
    };
    ws.on('message', (data, isBinary) => {
      if (!isBinary) return;
      let m: unknown;
      try {
        m = decodeMessage(new Uint8Array(data as Buffer));
      } catch {
        ws.close(1003, 'undecodable message');
        return;
      }
      for (const l of listeners) l(m);
    });
    const stop = serveService(service, wsPort);
    stops.add(stop);
    ws.on('close', () => { stop(); stops.delete(stop); });
  };
  await new Promise<void>((resolve, reject) => {
    server.once('error', reject);
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
