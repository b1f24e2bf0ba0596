// PCA as the user waits for it: `scanfold pca --components 20 --bin 2` on the 2 GiB sample, a
// fresh process with no first-pass cache, beside the h5py + scikit-learn script a user would
// write (also a fresh process); the top singular values of both; peak memory of both; a run at a
// budget a quarter of the binned matrix; and the products of a pass against NumPy/OpenBLAS.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { projectRoot } from '../src-main/engine/paths';
import { loadWasmModule } from '../src-main/workers/wasm-loader';
import { gaussianMatrix } from '../src-shared/compute/randomized-svd';
import { createWasmSketchKernel } from '../src-shared/compute/sketch-wasm';

const PY = '/usr/bin/python3';

/** Wall seconds and peak RSS of a child process (GNU time). */
function measured(cmd: string, args: string[], env: NodeJS.ProcessEnv): { seconds: number; peakMiB: number; stdout: string } {
  const t0 = performance.now();
  const p = spawnSync('/usr/bin/time', ['-f', 'peak-rss-kib %M', cmd, ...args], { encoding: 'utf8', env, maxBuffer: 1 << 26 });
  const seconds = (performance.now() - t0) / 1000;
  if (p.status !== 0) throw new Error(`${cmd} ${args.join(' ')} failed: ${p.stderr}`);
  const kib = Number(/peak-rss-kib (\d+)/.exec(p.stderr)?.[1] ?? NaN);
  return { seconds, peakMiB: kib / 1024, stdout: p.stdout };
}

export function runPcaBenchmark(opts: { h5: string; shape: number[]; workers: number }): void {
  const [sy, sx, ky, kx] = opts.shape;
  const cli = path.join(projectRoot(), 'bin/scanfold.mjs');
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-bench-pca-'));
  const env = { ...process.env, SCANFOLD_CACHE_DIR: 'off' };
  const npEnv = { ...process.env };
  delete npEnv.OPENBLAS_CORETYPE; delete npEnv.OPENBLAS_L2_SIZE;
  try {
    const args = (out: string, ...more: string[]) => ['pca', opts.h5, '--dataset', '/scan/frames', '--components', '20', '--bin', '2', '--bad-pixels', 'none',
      '--workers', String(opts.workers), '--quiet', '--out', path.join(dir, out), ...more];
    const ours = measured(process.execPath, [cli, ...args('a.h5')], env);
    const oursS = JSON.parse(spawnSync(PY, ['-c', 'import h5py,sys,json; print(json.dumps(h5py.File(sys.argv[1])["singular_values"][()].tolist()))', path.join(dir, 'a.h5')], { encoding: 'utf8' }).stdout) as number[];
    // The binned matrix as scikit-learn holds it (float32): a quarter of it as our budget.
    const binnedBytes = sy * sx * (ky / 2) * (kx / 2) * 4;
    const small = Math.floor(binnedBytes / 4 / 2 ** 20);
    const low = measured(process.execPath, [cli, ...args('b.h5', '--budget', `${small}MiB`)], env);
    console.log(`\nPCA, 20 components, bin 2 (${sy * sx} patterns × ${(ky / 2) * (kx / 2)} features), whole commands, fresh processes (${opts.workers} workers, page-cached, one run):`);
    console.log('what | seconds | peak RSS MiB');
    console.log(`scanfold pca (3 passes) | ${ours.seconds.toFixed(2)} | ${ours.peakMiB.toFixed(0)}`);
    console.log(`scanfold pca --budget ${small}MiB (a quarter of the binned matrix) | ${low.seconds.toFixed(2)} | ${low.peakMiB.toFixed(0)}`);
    if (fs.existsSync(PY)) {
      const sk = measured(PY, [path.join(projectRoot(), 'bench/sklearn_pca.py'), opts.h5, '/scan/frames', '20'], npEnv);
      const skS = (JSON.parse(sk.stdout.trim().split('\n').at(-1)!) as { singular_values: number[] }).singular_values;
      console.log(`h5py + scikit-learn PCA(20, randomized) | ${sk.seconds.toFixed(2)} | ${sk.peakMiB.toFixed(0)}`);
      const worst = Math.max(...skS.slice(0, 10).map((s, i) => Math.abs(oursS[i] / s - 1)));
      console.log(`ratio ${(sk.seconds / ours.seconds).toFixed(2)}× faster; top-10 singular values within ${(100 * worst).toFixed(4)} % of scikit-learn's`);
    }
    // k-means on the first 10 components, 6 clusters, against PCA(10) + KMeans(6) in scikit-learn.
    const km = measured(process.execPath, [cli, 'kmeans', opts.h5, '--dataset', '/scan/frames', '--clusters', '6', '--bin', '2', '--bad-pixels', 'none',
      '--workers', String(opts.workers), '--quiet', '--out', path.join(dir, 'k.h5')], env);
    const kmInertia = Number(spawnSync(PY, ['-c', 'import h5py,sys; print(h5py.File(sys.argv[1]).attrs["inertia"])', path.join(dir, 'k.h5')], { encoding: 'utf8' }).stdout);
    console.log(`\nk-means, 6 clusters on 10 components, bin 2: scanfold kmeans (PCA 2 passes + cluster patterns 1 pass) | ${km.seconds.toFixed(2)} s | peak RSS ${km.peakMiB.toFixed(0)} MiB | inertia ${kmInertia.toPrecision(6)}`);
    if (fs.existsSync(PY)) {
      const skk = measured(PY, [path.join(projectRoot(), 'bench/sklearn_kmeans.py'), opts.h5, '/scan/frames', '6'], npEnv);
      const sk = JSON.parse(skk.stdout.trim().split('\n').at(-1)!) as { inertia: number };
      console.log(`h5py + scikit-learn PCA(10) + KMeans(6) | ${skk.seconds.toFixed(2)} s | peak RSS ${skk.peakMiB.toFixed(0)} MiB | inertia ${sk.inertia.toPrecision(6)}; ratio ${(skk.seconds / km.seconds).toFixed(2)}× faster (ours also writes every cluster's full-resolution mean pattern)`);
    }
    // The products of one pass, per thread: Y = C·Z and W = Cᵀ·Y for a block of 1024 × 4096 against 4096 × 32.
    const n = 1024, d = 4096, l = 32;
    const k = createWasmSketchKernel(loadWasmModule('sketch'));
    const a = gaussianMatrix(n, d, 1), z = gaussianMatrix(d, l, 2);
    let best = Infinity;
    for (let rep = 0; rep < 3; rep++) { k.rows(n, d, l).set(a); const t = performance.now(); k.run(n, d, z, l, null); best = Math.min(best, performance.now() - t); }
    const ourGflops = (4 * n * d * l) / (best / 1000) / 1e9;
    const np = (threads: number) => Number(spawnSync(PY, ['-c', `import numpy as np, time
a = np.random.rand(${n}, ${d}); z = np.random.rand(${d}, ${l}); best = 1e9
for i in range(3):
    t = time.time(); y = a @ z; w = a.T @ y; best = min(best, time.time() - t)
print(4 * ${n} * ${d} * ${l} / best / 1e9)`], { encoding: 'utf8', env: { ...npEnv, OPENBLAS_NUM_THREADS: String(threads) } }).stdout);
    const np1 = np(1), np2 = np(2);
    console.log(`products of a pass (1024×4096 · 4096×32 and back, float64): WebAssembly ${ourGflops.toFixed(1)} GFLOP/s per thread (×${opts.workers} workers ≈ ${(ourGflops * opts.workers).toFixed(1)}); NumPy/OpenBLAS ${np1.toFixed(1)} (1 thread), ${np2.toFixed(1)} (2 threads): ${((ourGflops * opts.workers) / np2).toFixed(2)}×`);
  } finally {
    fs.rmSync(dir, { recursive: true, force: true });
  }
}
