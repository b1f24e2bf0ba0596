// Answers before the data is read again: PCA and k-means of the preview cube, labelled as
// previews, against the exact jobs on the demo scenario (ground truth: its grain map).
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { afterAll, beforeAll, expect, it } from 'vitest';
import { EngineService } from '../../src-main/engine/service';

const root = path.resolve(__dirname, '../..');
let dir: string, demo: string;
beforeAll(() => {
  dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-preview-stats-'));
  demo = path.join(dir, 'demo.h5');
  const p = spawnSync(process.execPath, [path.join(root, 'bin/scanfold.mjs'), 'sample', '--size', 'demo', '--out', demo, '--quiet'], { encoding: 'utf8' });
  if (p.status !== 0) throw new Error(p.stderr);
});
afterAll(() => fs.rmSync(dir, { recursive: true, force: true }));

/** Adjusted Rand index (Hubert & Arabie 1985). */
function adjustedRand(a: ArrayLike<number>, b: ArrayLike<number>): number {
  const n = a.length, t = new Map<string, number>(), ra = new Map<number, number>(), rb = new Map<number, number>();
  for (let i = 0; i < n; i++) { t.set(`${a[i]},${b[i]}`, (t.get(`${a[i]},${b[i]}`) ?? 0) + 1); ra.set(a[i], (ra.get(a[i]) ?? 0) + 1); rb.set(b[i], (rb.get(b[i]) ?? 0) + 1); }
  const c2 = (x: number) => (x * (x - 1)) / 2;
  let st = 0, sa = 0, sb = 0;
  for (const v of t.values()) st += c2(v);
  for (const v of ra.values()) sa += c2(v);
  for (const v of rb.values()) sb += c2(v);
  const e = (sa * sb) / c2(n);
  return (st - e) / ((sa + sb) / 2 - e);
}

function grainMap(step: number): number[] {
  const p = spawnSync('/usr/bin/python3', ['-c', `import h5py, json, sys
g = h5py.File(sys.argv[1])['truth/grain_map'][()]
print(json.dumps(g[::${step}, ::${step}].ravel().tolist()))`, demo], { encoding: 'utf8' });
  return JSON.parse(p.stdout);
}

it('a preview PCA of an unbinned cube equals the exact PCA; a binned one is labelled and close', async () => {
  const full = new EngineService({ workers: 2, cacheDir: null, previewBudgetBytes: 256 * 2 ** 20 });
  try {
    const d = await full.open({ path: demo, datasetPath: '/scan/frames' });
    const t0 = performance.now();
    const pv = await full.pca({ dataset: d.id, components: 5, bin: 2, preview: true });
    const previewMs = performance.now() - t0;
    const exact = await full.pca({ dataset: d.id, components: 5, bin: 2 });
    expect(pv.preview).toEqual({ qY: 64, qX: 64, scanBin: 1, detBin: 1 });
    expect(pv.method.passes).toBe(0);
    // reference: the exact job on the same data (the cube at binning 1 holds the same sums)
    for (let i = 0; i < 5; i++) expect(Math.abs(pv.singularValues[i] / exact.singularValues[i] - 1)).toBeLessThan(1e-6);
    console.log(`demo: preview PCA ${previewMs.toFixed(0)} ms (first pass included) beside the exact job's ${(exact.seconds * 1000).toFixed(0)} ms`);
    await full.close(d.id);
  } finally {
    await full.shutdown();
  }
  const small = new EngineService({ workers: 2, cacheDir: null, previewBudgetBytes: 4 * 2 ** 20 });
  try {
    const d = await small.open({ path: demo, datasetPath: '/scan/frames' });
    const pv = await small.pca({ dataset: d.id, components: 5, preview: true });
    const exact = await small.pca({ dataset: d.id, components: 5 });
    expect(pv.preview!.scanBin).toBeGreaterThan(1);
    expect(pv.loadings.length).toBe(5 * pv.preview!.qY * pv.preview!.qX);
    // The leading component's share of the variance survives binning (within a few percent).
    expect(Math.abs(pv.explainedVarianceRatio[0] - exact.explainedVarianceRatio[0])).toBeLessThan(0.05);
    const km = await small.kmeans({ dataset: d.id, clusters: 5, scaling: 'sqrt', preview: true });
    expect(km.preview!.scanBin).toBe(pv.preview!.scanBin);
    // reference: the generator's grain map at the preview's scan binning (every scanBin-th position)
    const ari = adjustedRand(km.labels, grainMap(km.preview!.scanBin));
    console.log(`demo, preview k-means (scan bin ${km.preview!.scanBin}): adjusted Rand index ${ari.toFixed(3)} against the grain map`);
    expect(ari).toBeGreaterThan(0.8);
    await small.close(d.id);
  } finally {
    await small.shutdown();
  }
}, 60000);
