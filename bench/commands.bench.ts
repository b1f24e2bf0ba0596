// What the user waits for: whole `scanfold` commands, each a fresh process, beside the NumPy
// script a user would write for the same job, also a fresh process (interpreter start-up,
// memory map, compute). Cold: no first-pass cache; warm: the cache from the command before.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { projectRoot } from '../src-main/engine/paths';

const PY = '/usr/bin/python3';

function wall(cmd: string, args: string[], env: NodeJS.ProcessEnv): number {
  const t0 = performance.now();
  const p = spawnSync(cmd, args, { encoding: 'utf8', env });
  if (p.status !== 0) throw new Error(`${cmd} ${args.join(' ')} failed: ${p.stderr}`);
  return (performance.now() - t0) / 1000;
}

export function runCommandsBenchmark(opts: { raw: string; shape: number[]; workers: number }): void {
  const [sy, sx, ky, kx] = opts.shape;
  const cli = path.join(projectRoot(), 'bin/scanfold.mjs');
  const out = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-bench-cmd-'));
  const cache = path.join(out, 'cache');
  const env = { ...process.env, SCANFOLD_CACHE_DIR: cache };
  const npEnv = { ...process.env };
  delete npEnv.OPENBLAS_CORETYPE; delete npEnv.OPENBLAS_L2_SIZE;
  const source = [opts.raw, '--raw-shape', opts.shape.join(','), '--dtype', 'uint16', '--workers', String(opts.workers), '--quiet'];
  // The annulus the NumPy script uses (numpy_detectors.py): 0.15 ky < r ≤ 0.45 ky about the centre.
  const annulus = ['--annulus', `${(kx - 1) / 2},${(ky - 1) / 2},${ky * 0.15},${ky * 0.45}`, '--bad-pixels', 'none'];
  const npArgs = (task: string) => [path.join(projectRoot(), 'bench/numpy_detectors.py'), opts.raw, String(sy), String(sx), String(ky), String(kx), task];
  try {
    const rows: [string, number, number | null][] = [];
    fs.rmSync(cache, { recursive: true, force: true });
    rows.push(['image, one annulus (no bad-pixel pass)', wall(process.execPath, [cli, 'image', ...source, ...annulus, '--out', path.join(out, 'a.h5')], env), fs.existsSync(PY) ? wall(PY, npArgs('one_detector'), npEnv) : null]);
    fs.rmSync(cache, { recursive: true, force: true });
    rows.push(['image, one annulus, bad pixels found (cold cache)', wall(process.execPath, [cli, 'image', ...source, annulus[0], annulus[1], '--out', path.join(out, 'b.h5')], env), null]);
    rows.push(['image, one annulus, bad pixels from the cache', wall(process.execPath, [cli, 'image', ...source, annulus[0], annulus[1], '--out', path.join(out, 'c.h5')], env), null]);
    const npCom = fs.existsSync(PY) ? wall(PY, npArgs('com'), npEnv) : null;
    rows.push(['com, defaults, from the cache (sums kept by the first pass)', wall(process.execPath, [cli, 'com', ...source, '--out', path.join(out, 'd.h5')], env), npCom]);
    fs.rmSync(cache, { recursive: true, force: true });
    rows.push(['com, defaults, cold cache (one read: first pass with COM sums)', wall(process.execPath, [cli, 'com', ...source, '--out', path.join(out, 'd2.h5')], env), npCom]);
    rows.push(['com, plain Σ I·x / Σ I (--bad-pixels none --descan none --rotation 0 --flip no)',
      wall(process.execPath, [cli, 'com', ...source, '--bad-pixels', 'none', '--descan', 'none', '--rotation', '0', '--flip', 'no', '--out', path.join(out, 'd3.h5')], env), npCom]);
    rows.push(['summary (first pass)', wall(process.execPath, [cli, 'summary', ...source, '--out', path.join(out, 'e.h5')], env), null]);
    console.log(`\nwhole commands, each a fresh process (${opts.workers} workers, page-cached, one run):`);
    console.log('command | seconds | NumPy script (fresh process) | ratio');
    for (const [what, s, np] of rows) console.log(`${what} | ${s.toFixed(2)} | ${np === null ? '—' : np.toFixed(2)} | ${np === null ? '—' : `${(np / s).toFixed(2)}×`}`);
    console.log('(the NumPy COM script computes Σ I, Σ I·x, Σ I·y only; scanfold com also descans, estimates the rotation, derives and integrates the field)');
  } finally {
    fs.rmSync(out, { recursive: true, force: true });
  }
}
