// The reference fit through the engine service against NumPy's lstsq and SciPy's nnls on the
// same features (NumPy bins the fixture of make_pca_fixtures.py itself), and its refusals.
import fs from 'node:fs';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { afterAll, beforeAll, expect, it } from 'vitest';
import { EngineService } from '../../src-main/engine/service';
import { isInputError } from '../../src-shared/model/errors';
import { makeFixtures, maxRelDiff, PYTHON, tightBudget } from '../helpers/fixtures';

let fx: string;
let service: EngineService;
beforeAll(() => {
  fx = makeFixtures('make_pca_fixtures.py');
  service = new EngineService({ workers: 2, budgetBytes: tightBudget(2, true), cacheDir: null });
});
afterAll(async () => {
  await service?.shutdown();
  if (fx) fs.rmSync(fx, { recursive: true, force: true });
});

// Regions of the 14 × 12 scan (x column, y row, inclusive).
const regions = [{ x0: 0, y0: 0, x1: 2, y1: 13 }, { x0: 5, y0: 2, x1: 7, y1: 4 }, { x0: 9, y0: 9, x1: 11, y1: 13 }];

function numpyFit(nonnegative: boolean): { coef: number[][]; residual: number[] } {
  const p = spawnSync(PYTHON, ['-c', `import numpy as np, json, sys
from scipy.optimize import nnls
a = np.load(sys.argv[1]).astype(np.float64)
sy, sx, ky, kx = a.shape
f = a.reshape(sy, sx, ky // 2, 2, kx // 2, 2).sum(axis=(3, 5)).reshape(sy * sx, -1)
regions = json.loads(sys.argv[2])
refs = []
for r in regions:
    m = np.zeros((sy, sx), bool); m[r['y0']:r['y1'] + 1, r['x0']:r['x1'] + 1] = True
    refs.append(f[m.ravel()].mean(axis=0))
R = np.array(refs)
if sys.argv[3] == 'nn':
    coef = np.array([nnls(R.T, row)[0] for row in f])
else:
    coef = np.linalg.lstsq(R.T, f.T, rcond=None)[0].T
res = np.linalg.norm(f - coef @ R, axis=1) / np.linalg.norm(f, axis=1)
print(json.dumps({'coef': coef.T.tolist(), 'residual': res.tolist()}))`, path.join(fx, 'mix.npy'), JSON.stringify(regions), nonnegative ? 'nn' : 'ls'], { encoding: 'utf8', maxBuffer: 1 << 26 });
  if (p.status !== 0) throw new Error(p.stderr);
  return JSON.parse(p.stdout);
}

it('least squares: every weight and residual equals NumPy\'s lstsq on the same features', async () => {
  const d = await service.open({ path: path.join(fx, 'mix.npy') });
  const r = await service.fit({ dataset: d.id, references: regions.map((g) => ({ kind: 'rectangle' as const, ...g })), bin: 2, badPixels: 'none' });
  const want = numpyFit(false);
  const n = 14 * 12;
  // reference: numpy.linalg.lstsq(Rᵀ, f) per pattern, the references being NumPy's region means
  for (let c = 0; c < 3; c++) expect(maxRelDiff(r.coefficients.subarray(c * n, (c + 1) * n), want.coef[c])).toBeLessThan(1e-9);
  expect(maxRelDiff(r.residual, want.residual)).toBeLessThan(1e-7);
  expect(r.counts).toEqual([42, 9, 15]);
  await service.close(d.id);
});

it('non-negative: every weight equals SciPy\'s nnls', async () => {
  const d = await service.open({ path: path.join(fx, 'mix.npy') });
  const r = await service.fit({ dataset: d.id, references: regions.map((g) => ({ kind: 'rectangle' as const, ...g })), bin: 2, badPixels: 'none', nonnegative: true });
  const want = numpyFit(true);
  const n = 14 * 12;
  // reference: scipy.optimize.nnls(Rᵀ, f) per pattern (Lawson & Hanson, as ours)
  for (let c = 0; c < 3; c++) {
    const got = r.coefficients.subarray(c * n, (c + 1) * n);
    for (let i = 0; i < n; i++) expect(Math.abs(got[i] - want.coef[c][i])).toBeLessThan(1e-8);
  }
  for (const v of r.coefficients) expect(v).toBeGreaterThanOrEqual(0);
  expect(maxRelDiff(r.residual, want.residual)).toBeLessThan(1e-7);
  await service.close(d.id);
});

it('linearly dependent references and empty regions are refused with a clear message', async () => {
  const d = await service.open({ path: path.join(fx, 'mix.npy') });
  const refuse = async (p: Promise<unknown>, re: RegExp) => {
    try { await p; } catch (e) { expect(isInputError(e), String(e)).toBe(true); expect((e as Error).message).toMatch(re); return; }
    throw new Error('expected a refusal');
  };
  const same = { kind: 'rectangle' as const, x0: 0, y0: 0, x1: 2, y1: 13 };
  await refuse(service.fit({ dataset: d.id, references: [same, same], bin: 2, badPixels: 'none' }), /references are linearly dependent/);
  await refuse(service.fit({ dataset: d.id, references: [{ kind: 'rectangle', x0: 50, y0: 50, x1: 60, y1: 60 }], bin: 2, badPixels: 'none' }), /region|outside|no probe position/);
  await service.close(d.id);
});
