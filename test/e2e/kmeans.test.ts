// scanfold kmeans on the demo scenario: the clusters recover the generator's grain map (vacuum,
// amorphous support, three grains), scored by scikit-learn's adjusted Rand index; each cluster's
// mean pattern equals NumPy's mean over the positions labelled so.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { afterAll, beforeAll, expect, it } from 'vitest';
import { PYTHON } from '../helpers/fixtures';

const root = path.resolve(__dirname, '../..');
let dir: string;
beforeAll(() => { dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-kmeans-')); });
afterAll(() => fs.rmSync(dir, { recursive: true, force: true }));
const scanfold = (...args: string[]) => spawnSync(process.execPath, [path.join(root, 'bin/scanfold.mjs'), ...args], { encoding: 'utf8', env: { ...process.env, SCANFOLD_CACHE_DIR: 'off' } });

it('kmeans --clusters 5 --scaling sqrt on the demo recovers the grain map (ARI ≥ 0.90) and writes each cluster\'s mean pattern', () => {
  const demo = path.join(dir, 'demo.h5');
  expect(scanfold('sample', '--size', 'demo', '--out', demo, '--quiet').status).toBe(0);
  const out = path.join(dir, 'km.h5');
  const r = scanfold('kmeans', demo, '--dataset', '/scan/frames', '--clusters', '5', '--scaling', 'sqrt', '--out', out);
  expect(r.status, r.stderr).toBe(0);
  expect(r.stderr).toMatch(/wrote .*5 clusters of/);
  const p = spawnSync(PYTHON, ['-c', `import h5py, json, sys, numpy as np
from sklearn.metrics import adjusted_rand_score
f = h5py.File(sys.argv[1]); d = h5py.File(sys.argv[2])
labels = f['labels'][()]; truth = d['truth/grain_map'][()]
frames = d['scan/frames'][()]
worst = 0.0
for c in range(5):
    m = frames[labels == c].astype(np.float64).mean(axis=0)
    worst = max(worst, float(np.abs(m - f['cluster_patterns'][c]).max() / np.abs(m).max()))
print(json.dumps({'ari': adjusted_rand_score(truth.ravel(), labels.ravel()), 'dtype': str(labels.dtype), 'sizes': f['sizes'][()].tolist(),
  'worst': worst, 'inertia': float(f.attrs['inertia']), 'passes': float(f.attrs['passes_over_data'])}))`, out, demo], { encoding: 'utf8', maxBuffer: 1 << 26 });
  expect(p.status, p.stderr).toBe(0);
  const got = JSON.parse(p.stdout);
  console.log(`demo, kmeans 5 clusters on sqrt-scaled patterns: adjusted Rand index ${got.ari.toFixed(4)} against the grain map; sizes ${got.sizes.join(', ')}`);
  // reference: the generator's /truth/grain_map, scored by sklearn.metrics.adjusted_rand_score
  expect(got.ari).toBeGreaterThan(0.9);
  expect(got.dtype).toBe('int32');
  // reference: NumPy's mean over the positions of each label
  expect(got.worst).toBeLessThan(1e-12);
  expect(got.passes).toBe(3);
});

it('kmeans --algorithm mini-batch gives the demo\'s grain map as well (ARI ≥ 0.90) and says which it ran', () => {
  const demo = path.join(dir, 'demo.h5');
  const out = path.join(dir, 'kmb.h5');
  const r = scanfold('kmeans', demo, '--dataset', '/scan/frames', '--clusters', '5', '--scaling', 'sqrt', '--algorithm', 'mini-batch', '--out', out, '--quiet');
  expect(r.status, r.stderr).toBe(0);
  const p = spawnSync(PYTHON, ['-c', `import h5py, json, sys
from sklearn.metrics import adjusted_rand_score
f = h5py.File(sys.argv[1]); d = h5py.File(sys.argv[2])
print(json.dumps({'ari': adjusted_rand_score(d['truth/grain_map'][()].ravel(), f['labels'][()].ravel()), 'algorithm': f.attrs['algorithm']}))`, out, demo], { encoding: 'utf8' });
  expect(p.status, p.stderr).toBe(0);
  const got = JSON.parse(p.stdout);
  // reference: the generator's grain map, scored by sklearn.metrics.adjusted_rand_score
  expect(got.ari).toBeGreaterThan(0.9);
  expect(got.algorithm).toBe('mini-batch');
});

it('fit --reference-clusters takes every cluster of a kmeans output as a reference: NumPy\'s mean of its binned patterns', () => {
  const demo = path.join(dir, 'demo.h5');
  const km = path.join(dir, 'km.h5');
  const out = path.join(dir, 'fit.h5');
  const r = scanfold('fit', demo, '--dataset', '/scan/frames', '--reference-clusters', km, '--bin', '2', '--nonnegative', '--out', out, '--quiet');
  expect(r.status, r.stderr).toBe(0);
  const p = spawnSync(PYTHON, ['-c', `import h5py, json, sys, numpy as np
f = h5py.File(sys.argv[1]); labels = h5py.File(sys.argv[2])['labels'][()]
a = h5py.File(sys.argv[3])['scan/frames'][()].astype(np.float64)
sy, sx, ky, kx = a.shape
b = a.reshape(sy, sx, ky // 2, 2, kx // 2, 2).sum(axis=(3, 5))
refs = f['references'][()]
worst = 0.0
for c in range(refs.shape[0]):
    want = b[labels == c].mean(axis=0)
    ok = np.isfinite(refs[c])
    worst = max(worst, float(np.abs(refs[c][ok] - want[ok]).max() / np.abs(want).max()))
own = [float(f['coefficients'][c][labels == c].mean()) for c in range(refs.shape[0])]
print(json.dumps({'n': int(refs.shape[0]), 'worst': worst, 'own': own}))`, out, km, demo], { encoding: 'utf8', maxBuffer: 1 << 26 });
  expect(p.status, p.stderr).toBe(0);
  const got = JSON.parse(p.stdout);
  expect(got.n).toBe(5);
  // reference: NumPy's 2 × 2-binned mean pattern over each cluster's positions
  expect(got.worst).toBeLessThan(1e-12);
  // each cluster's positions are mostly their own reference
  for (const w of got.own) expect(w).toBeGreaterThan(0.7);
});

it('kmeans and fit say when the detector was cut to whole bins, as pca does', () => {
  // A 10×10 detector binned by 4 keeps 8×8 pixels: 100 − 64 = 36 edge pixels left out.
  const npy = path.join(dir, 'odd.npy');
  const made = spawnSync(PYTHON, ['-c', `import numpy as np, sys
rng = np.random.default_rng(3)
np.save(sys.argv[1], rng.poisson(5.0, (6, 6, 10, 10)).astype(np.uint16))`, npy], { encoding: 'utf8' });
  expect(made.status, made.stderr).toBe(0);
  const note = /the detector cut to 8×8 px, whole bins: 36 edge pixels left out/;
  for (const args of [
    ['pca', npy, '--components', '2', '--bin', '4', '--bad-pixels', 'none', '--out', path.join(dir, 'odd-pca.h5')],
    ['kmeans', npy, '--clusters', '2', '--features', 'patterns', '--bin', '4', '--bad-pixels', 'none', '--out', path.join(dir, 'odd-km.h5')],
    ['fit', npy, '--reference-region', '0,0,2,2', '--bin', '4', '--bad-pixels', 'none', '--out', path.join(dir, 'odd-fit.h5')],
  ]) {
    const r = scanfold(...args);
    expect(r.status, r.stderr).toBe(0);
    expect(r.stderr, args[0]).toMatch(note);
  }
  // With the crop given, nothing is said: the user chose it.
  const r = scanfold('kmeans', npy, '--clusters', '2', '--features', 'patterns', '--bin', '4', '--crop', '0,0,7,7', '--bad-pixels', 'none', '--out', path.join(dir, 'odd-km2.h5'));
  expect(r.status, r.stderr).toBe(0);
  expect(r.stderr).not.toMatch(/cut to/);
});
