// `scanfold serve` as a user starts it: it prints the address (token included), the page is
// served there and refused without the token, a port in use is a one-line error, Ctrl-C stops it.
import fs from 'node:fs';
import net from 'node:net';
import path from 'node:path';
import { spawn, spawnSync } from 'node:child_process';
import { afterAll, beforeAll, expect, it } from 'vitest';
import { makeDemoSample } from '../helpers/fixtures';

const root = path.resolve(__dirname, '../..');
const cli = path.join(root, 'bin/scanfold.mjs');
let dir: string;
let demo: string;
beforeAll(async () => {
  ({ dir, file: demo } = await makeDemoSample('scanfold-serve-'));
});
afterAll(() => fs.rmSync(dir, { recursive: true, force: true }));

it('serves the app at the printed address, refuses it without the token, and stops on SIGINT', async () => {
  const child = spawn(process.execPath, [cli, 'serve', demo, '--dataset', '/scan/frames', '--workers', '1'], { env: { ...process.env, SCANFOLD_CACHE_DIR: 'off' } });
  try {
    const url = await new Promise<string>((resolve, reject) => {
      let out = '';
      child.stdout.on('data', (d) => { out += d; const m = /http:\/\/127\.0\.0\.1:\d+\/\S+\//.exec(out); if (m) resolve(m[0]); });
      child.on('exit', (code) => reject(new Error(`serve exited ${code} before printing an address`)));
    });
    const page = await fetch(url);
    expect(page.status).toBe(200);
    expect(await page.text()).toContain('<div id="root">');
    expect(page.headers.get('content-security-policy')).toMatch(/default-src 'none'/);
    const port = Number(new URL(url).port);
    expect((await fetch(`http://127.0.0.1:${port}/`)).status).toBe(403);
    // A second server on the same port: one line, exit status 2.
    const again = spawnSync(process.execPath, [cli, 'serve', '--port', String(port)], { encoding: 'utf8' });
    expect(again.status).toBe(2);
    expect(again.stderr.trim()).toBe(`scanfold: port ${port} is already in use on 127.0.0.1; expected a free port, or --port 0 for any free one`);
    const exited = new Promise<number | null>((resolve) => child.on('exit', (code) => resolve(code)));
    child.kill('SIGINT');
    expect(await exited).toBe(130); // as for every command stopped by Ctrl-C (128 + SIGINT)
    // The port is free again.
    await new Promise<void>((resolve, reject) => { const s = net.createServer().listen(port, '127.0.0.1', () => s.close(() => resolve())); s.on('error', reject); });
  } finally {
    child.kill('SIGKILL');
  }
});
