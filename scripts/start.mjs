// `npm start`: the desktop app when the Electron runtime is installed; otherwise one line saying
// so, and the same UI in served mode on the demo data (made first if missing), in a browser.
import { spawn, spawnSync } from 'node:child_process';
import fs from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { electronBinary } from './electron-runtime.mjs';

const root = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '..');
const args = process.argv.slice(2);
const binary = electronBinary(root);
if (binary) {
  const child = spawn(binary, [path.join(root, 'dist/electron-main.mjs'), ...args], { stdio: 'inherit' });
  child.on('exit', (code) => process.exit(code ?? 0));
} else {
  process.stderr.write('The Electron runtime is not installed (its binary comes from outside the package registry); starting the same UI in served mode on the demo data instead.\n');
  const cli = path.join(root, 'bin/scanfold.mjs');
  const demo = path.join(root, 'demo-data/demo.h5');
  if (!fs.existsSync(demo)) {
    const made = spawnSync(process.execPath, [cli, 'demo', '--dir', path.dirname(demo)], { stdio: ['ignore', 'ignore', 'inherit'] });
    if (made.status !== 0) process.exit(made.status ?? 1);
  }
  const file = args.find((a) => !a.startsWith('-'));
  const serveArgs = file ? [file, ...args.filter((a) => a !== file)] : [demo, '--dataset', '/scan/frames', ...args];
  const child = spawn(process.execPath, [cli, 'serve', ...serveArgs], { stdio: 'inherit' });
  for (const sig of ['SIGINT', 'SIGTERM']) process.on(sig, () => child.kill(sig));
  child.on('exit', (code) => process.exit(code ?? 0));
}
