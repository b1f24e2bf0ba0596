// The first streaming pass, end to end through readers, worker pool and kernels, against
// NumPy's results on files written by NumPy and h5py (test/fixtures/make_engine_fixtures.py).
import path from 'node:path';
import fs from 'node:fs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { Engine } from '../../src-main/engine/engine';
import type { SourceSpec } from '../../src-shared/model/dataset';
import { makeFixtures, maxRelDiff, readNpyF64, tightBudget } from '../helpers/fixtures';

let dir: string;
let meta: Record<string, { nonfinite: number }>;

beforeAll(() => {
  dir = makeFixtures('make_engine_fixtures.py');
  meta = JSON.parse(fs.readFileSync(path.join(dir, 'meta.json'), 'utf8'));
});
afterAll(() => { if (dir) fs.rmSync(dir, { recursive: true, force: true }); });

const cases: { name: string; label: string; spec: () => SourceSpec; previewBudget?: number }[] = [
  { name: 'a', label: 'a.npy (uint16)', spec: () => ({ path: path.join(dir, 'a.npy') }), previewBudget: 20000 },
  { name: 'a', label: 'a.h5 (gzip+shuffle chunked)', spec: () => ({ path: path.join(dir, 'a.h5'), datasetPath: '/entry/frames' }), previewBudget: 20000 },
  { name: 'b', label: 'b.h5 (3-D float32)', spec: () => ({ path: path.join(dir, 'b.h5'), datasetPath: '/frames', scanShape: [6, 7] }) },
  {
    name: 'c', label: 'c.raw (big-endian float64, NaN/Inf)', spec: () => ({
      path: path.join(dir, 'c.raw'),
      raw: { shape: { scanY: 5, scanX: 4, detY: 6, detX: 8 }, dtype: 'float64', byteOrder: 'big', offset: 128 },
    }),
  },
  { name: 'e', label: 'e.npy (float32, a pixel never finite, NaN/Inf)', spec: () => ({ path: path.join(dir, 'e.npy') }) },
];

for (const kernel of ['wasm', 'reference'] as const) {
  describe(`first pass (${kernel} kernels) vs NumPy`, () => {
    for (const c of cases) {
      it(c.label, async () => {
        // A small budget forces several tiles per worker, so merging across tiles is exercised.
        const engine = new Engine({ workers: 2, kernel, previewBudgetBytes: c.previewBudget, budgetBytes: tightBudget(2, c.spec().path.endsWith('.h5')) });
        try {
          const r = await engine.firstPass(c.spec()).result;
          expect(r.plan.tiles.length).toBeGreaterThan(1);
          // reference: NumPy, each pixel's sum over its finite values / their count (0 where none), float64
          expect(maxRelDiff(r.meanPattern, readNpyF64(path.join(dir, `${c.name}.mean.npy`)).data)).toBeLessThan(1e-9);
          // reference: NumPy a.max(axis=(0,1)) — exact
          expect(Array.from(r.maxPattern)).toEqual(Array.from(readNpyF64(path.join(dir, `${c.name}.max.npy`)).data));
          // reference: NumPy a.sum(axis=(2,3)) per pattern
          expect(maxRelDiff(r.totalIntensity, readNpyF64(path.join(dir, `${c.name}.total.npy`)).data)).toBeLessThan(1e-9);
          // reference: NumPy count of ~np.isfinite(a)
          expect(r.nonFinite).toBe(meta[c.name].nonfinite);
          // reference: NumPy reshape-sum binning (make_engine_fixtures.first_pass_refs); float32 storage
          const pv = readNpyF64(path.join(dir, `${c.name}.preview.npy`));
          expect([r.preview.qY, r.preview.qX, r.preview.pY, r.preview.pX]).toEqual(pv.shape);
          expect(maxRelDiff(r.preview.data, pv.data)).toBeLessThan(1e-6);
        } finally {
          await engine.close();
        }
      });
    }
  });
}

it('preview binning follows the preview budget (2×2 detector, 2×2 scan for 20000 bytes)', async () => {
  const engine = new Engine({ workers: 1, previewBudgetBytes: 20000 });
  try {
    const r = await engine.firstPass({ path: path.join(dir, 'a.npy') }).result;
    expect([r.preview.detBin, r.preview.scanBin]).toEqual([2, 2]);
    expect(r.preview.data.byteLength).toBeLessThanOrEqual(20000);
  } finally {
    await engine.close();
  }
});
