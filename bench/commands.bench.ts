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
  // This machine's speed wanders by tens of per cent from minute to minute: each round runs
  // every command and its NumPy script back to back, the ratio is taken within the round, and
  // the table gives the medians (and the range of the ratios) over the rounds.
  const ROUNDS = 3;
  type Row = { what: string; ours: number[]; numpy: (number | null)[] };
  const rows = new Map<string, Row>();
  const add = (what: string, ours: number, numpy: number | null) => {
    const r = rows.get(what) ?? { what, ours: [], numpy: [] };
    r.ours.push(ours); r.numpy.push(numpy); rows.set(what, r);
  };
  const hasPy = fs.existsSync(PY);
  try {
    for (let round = 0; round < ROUNDS; round++) {
      const npAnnulus = hasPy ? wall(PY, npArgs('one_detector'), npEnv) : null;
      fs.rmSync(cache, { recursive: true, force: true });
      add('image, one annulus (no bad-pixel pass)', wall(process.execPath, [cli, 'image', ...source, ...annulus, '--out', path.join(out, 'a.h5')], env), npAnnulus);
      fs.rmSync(cache, { recursive: true, force: true });
      add('image, one annulus, bad pixels found (cold cache)', wall(process.execPath, [cli, 'image', ...source, annulus[0], annulus[1], '--out', path.join(out, 'b.h5')], env), null);
      add('image, one annulus, bad pixels from the cache', wall(process.execPath, [cli, 'image', ...source, annulus[0], annulus[1], '--out', path.join(out, 'c.h5')], env), null);
      const npCom = hasPy ? wall(PY, npArgs('com'), npEnv) : null;
      add('com, defaults, from the cache (sums kept by the first pass)', wall(process.execPath, [cli, 'com', ...source, '--out', path.join(out, 'd.h5')], env), npCom);
      fs.rmSync(cache, { recursive: true, force: true });
      add('com, defaults, cold cache (one read: first pass with COM sums)', wall(process.execPath, [cli, 'com', ...source, '--out', path.join(out, 'd2.h5')], env), npCom);
      add('com, plain Σ I·x / Σ I (--bad-pixels none --descan none --rotation 0 --flip no)',
        wall(process.execPath, [cli, 'com', ...source, '--bad-pixels', 'none', '--descan', 'none', '--rotation', '0', '--flip', 'no', '--out', path.join(out, 'd3.h5')], env), npCom);
      fs.rmSync(cache, { recursive: true, force: true });
      add('summary (first pass, cold cache)', wall(process.execPath, [cli, 'summary', ...source, '--out', path.join(out, 'e.h5')], env), null);
    }
    const median = (v: number[]) => [...v].sort((a, b) => a - b)[v.length >> 1];
    console.log(`\nwhole commands, each a fresh process (${opts.workers} workers, page-cached; medians of ${ROUNDS} rounds, ratios taken within each round):`);
    console.log('command | seconds | NumPy script (fresh process) | ratio, median (range)');
    for (const { what, ours, numpy } of rows.values()) {
      if (numpy[0] === null) { console.log(`${what} | ${median(ours).toFixed(2)} | — | —`); continue; }
      const ratios = ours.map((s, i) => (numpy[i] as number) / s);
      console.log(`${what} | ${median(ours).toFixed(2)} | ${median(numpy as number[]).toFixed(2)} | ${median(ratios).toFixed(2)}× (${Math.min(...ratios).toFixed(2)}–${Math.max(...ratios).toFixed(2)})`);
    }
    console.log('(the NumPy COM script computes Σ I, Σ I·x, Σ I·y only; scanfold com also descans, estimates the rotation, derives and integrates the field)');
  } finally {
    fs.rmSync(out, { recursive: true, force: true });
  }
}
