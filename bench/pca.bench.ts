// PCA as the user waits for it: `scanfold pca --components 20 --bin 2` on the 2 GiB sample, a
// fresh process with no first-pass cache, beside the h5py + scikit-learn script a user would
// write (also a fresh process); the top singular values of both; peak memory of both; a run at a
// budget a quarter of the binned matrix; and the products of a pass against NumPy/OpenBLAS.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { Worker } from 'node:worker_threads';
import { projectRoot } from '../src-main/engine/paths';
import { enableRelaxedSimd } from '../src-main/workers/wasm-loader';

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

export async function runPcaBenchmark(opts: { h5: string; shape: number[]; workers: number }): Promise<void> {
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
  } finally {
    fs.rmSync(dir, { recursive: true, force: true });
  }
}

/**
 * The products of a pass, Y = C·Z and W = Cᵀ·Y, on a matrix of `workers` × 64 blocks of 256 rows
 * × 4096 features against a sketch of 32 columns: ours on that many workers at once (each block
 * in the kernel's memory, as the engine's groups of one scan row on the 2 GiB sample), NumPy/OpenBLAS on the whole matrix with as many threads.
 * Our products are float32 (sketch.ts), as are those of the user's script (it reads the data as
 * float32, and scikit-learn keeps that type), so float32 NumPy is the like-with-like figure; its
 * float64 is shown beside. Three rounds, alternated; the ratio is taken within each round.
 */
export async function productsBenchmark(workers: number): Promise<void> {
  const npEnv = { ...process.env };
  delete npEnv.OPENBLAS_CORETYPE; delete npEnv.OPENBLAS_L2_SIZE;
  const block = 256, d = 4096, l = 32, blocks = 64;
  const rows = workers * blocks * block;
  const flops = 4 * rows * d * l;
  enableRelaxedSimd(); // as the engine's pool does before its workers start (V8 flags are process-wide)
  const pool = await Promise.all(Array.from({ length: workers }, (_, i) => new Promise<Worker>((resolve, reject) => {
    const w = new Worker(path.join(projectRoot(), 'dist/bench/products-worker.mjs'), { workerData: { block, d, l, blocks, seed: 10 + i } });
    w.once('message', () => resolve(w));
    w.once('error', reject);
  })));
  const ours = async () => {
    const ms = await Promise.all(pool.map((w) => new Promise<number>((resolve) => { w.once('message', resolve); w.postMessage('go'); })));
    // Both workers at once: the sum of their rates.
    return ms.reduce((s, m) => s + flops / workers / (m / 1000) / 1e9, 0);
  };
  const numpy = (dtype: string) => Number(spawnSync(PY, ['-c', `import numpy as np, time
rng = np.random.default_rng(0)
a = rng.standard_normal((${rows}, ${d})).astype(np.${dtype}); z = rng.standard_normal((${d}, ${l})).astype(np.${dtype}); t = []
for i in range(3):
    t0 = time.time(); y = a @ z; w = a.T @ y; t.append(time.time() - t0)
print(${flops} / sorted(t)[1] / 1e9)`], { encoding: 'utf8', env: { ...npEnv, OPENBLAS_NUM_THREADS: String(workers) } }).stdout);
  const rounds: { ours: number; f32: number; f64: number }[] = [];
  try {
    await ours(); // warm-up: compile and first touch
    for (let r = 0; r < 3; r++) rounds.push({ ours: await ours(), f32: numpy('float32'), f64: numpy('float64') });
  } finally {
    for (const w of pool) await w.terminate();
  }
  const med = (xs: number[]) => [...xs].sort((x, y) => x - y)[1];
  const range = (xs: number[], digits = 1) => `${Math.min(...xs).toFixed(digits)}–${Math.max(...xs).toFixed(digits)}`;
  console.log(`\nproducts of a pass (${rows}×${d} · ${d}×${l} and back, ${workers} workers against ${workers} OpenBLAS threads, 3 alternated rounds), GFLOP/s:`);
  console.log(`WebAssembly (float32 products) ${range(rounds.map((x) => x.ours))}; NumPy/OpenBLAS float32 ${range(rounds.map((x) => x.f32))}, float64 ${range(rounds.map((x) => x.f64))}`);
  console.log(`ratio to float32 NumPy (like with like) ${range(rounds.map((x) => x.ours / x.f32), 2)}×, median ${med(rounds.map((x) => x.ours / x.f32)).toFixed(2)}×; ` +
    `to float64 NumPy ${range(rounds.map((x) => x.ours / x.f64), 2)}×, median ${med(rounds.map((x) => x.ours / x.f64)).toFixed(2)}×`);
}
