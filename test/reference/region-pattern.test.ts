// Virtual diffraction: the mean and max pattern over a real-space region, against NumPy on a
// file h5py wrote (test/fixtures/make_analysis_fixtures.py).
import fs from 'node:fs';
import path from 'node:path';
import { afterAll, beforeAll, expect, it } from 'vitest';
import { Engine } from '../../src-main/engine/engine';
import { compileRegion } from '../../src-shared/compute/region-masks';
import { readNpy2D } from '../../src-main/io/npy-array';
import { makeFixtures, maxRelDiff, readNpyF64, tightBudget } from '../helpers/fixtures';

let fx: string;
let engine: Engine;
beforeAll(() => { fx = makeFixtures('make_analysis_fixtures.py'); engine = new Engine({ workers: 2, budgetBytes: tightBudget(2, true) }); });
afterAll(async () => { await engine.close(); fs.rmSync(fx, { recursive: true, force: true }); });

for (const name of ['rect', 'mask'] as const) {
  it(`mean and max pattern over a ${name} region equal NumPy's`, async () => {
    const spec = { path: path.join(fx, 'a.h5'), datasetPath: '/frames' };
    const m = readNpy2D(path.join(fx, 'region-mask.npy'), 'region');
    const region = name === 'rect'
      ? compileRegion({ kind: 'rectangle', x0: 1, y0: 2, x1: 4.5, y1: 5 }, 6, 7)
      : compileRegion({ kind: 'mask', width: m.width, height: m.height, values: m.values }, 6, 7);
    const r = await engine.regionPattern(spec, region).result;
    // reference: NumPy a[mask].mean(axis=0) and .max(axis=0), float64
    expect(maxRelDiff(r.mean, readNpyF64(path.join(fx, `region_${name}_mean.npy`)).data)).toBeLessThan(1e-9);
    expect(Array.from(r.max)).toEqual(Array.from(readNpyF64(path.join(fx, `region_${name}_max.npy`)).data));
    expect(r.count).toBe(region.reduce((s, v) => s + v, 0));
  });
}

it('over float data with NaN and Inf, each pixel\'s mean is over the positions where it is finite', async () => {
  // b.h5 is 4×5 positions of 9×11 float32 pixels, NaN at (1, 2, 3, 4) and +Inf at (3, 4, 0, 0):
  // rows 1–3, columns 2–4 hold both.
  const region = compileRegion({ kind: 'rectangle', x0: 2, y0: 1, x1: 4, y1: 3 }, 4, 5);
  const r = await engine.regionPattern({ path: path.join(fx, 'b.h5'), datasetPath: '/frames' }, region).result;
  // reference: NumPy np.nanmean and np.nanmax over the region, ±Inf taken as NaN (make_analysis_fixtures.py)
  expect(maxRelDiff(r.mean, readNpyF64(path.join(fx, 'region_nan_mean.npy')).data)).toBeLessThan(1e-9);
  expect(Array.from(r.max)).toEqual(Array.from(readNpyF64(path.join(fx, 'region_nan_max.npy')).data));
  expect(r.count).toBe(9);
  expect(r.nonFinite).toBe(2);
});

it('over float data with NaN and Inf, each cluster\'s mean pattern is over its positions where each pixel is finite', async () => {
  const labels = Int32Array.from({ length: 20 }, (_, i) => i % 3);
  const r = await engine.clusterPatterns({ path: path.join(fx, 'b.h5'), datasetPath: '/frames' }, labels, 3).result;
  // reference: NumPy np.nanmean of each cluster's patterns, ±Inf taken as NaN (make_analysis_fixtures.py)
  expect(maxRelDiff(r.means, readNpyF64(path.join(fx, 'cluster_nan_means.npy')).data)).toBeLessThan(1e-9);
  expect(Array.from(r.counts)).toEqual([7, 7, 6]);
  expect(r.nonFinite).toBe(2);
});

it('a region of the wrong size is refused with a message', async () => {
  await expect(engine.regionPattern({ path: path.join(fx, 'a.h5'), datasetPath: '/frames' }, new Uint8Array(5)).result).rejects.toThrow(/6×7/);
});
