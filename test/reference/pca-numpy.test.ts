// PCA by randomized SVD (Halko, Martinsson & Tropp 2011) against NumPy's exact SVD of the same
// mean-centred matrices (make_pca_fixtures.py), run in memory by blocks as the engine streams them.
import fs from 'node:fs';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { inMemoryPass, randomizedPca } from '../../src-shared/compute/pca';
import { makeFixtures, readNpyF64 } from '../helpers/fixtures';

let fx: string;
beforeAll(() => { fx = makeFixtures('make_pca_fixtures.py'); });
afterAll(() => fs.rmSync(fx, { recursive: true, force: true }));
const load = (f: string) => readNpyF64(path.join(fx, f));

/**
 * Largest principal angle (degrees) between the row spaces of two k × d matrices with orthonormal
 * rows: arcsin of the spectral norm of B − (B·Aᵀ)·A, the part of B outside A's span (power iteration).
 */
function largestPrincipalAngle(a: Float64Array, b: Float64Array, k: number, d: number): number {
  const e = Float64Array.from(b);
  for (let i = 0; i < k; i++) for (let c = 0; c < k; c++) {
    let dot = 0; for (let x = 0; x < d; x++) dot += b[i * d + x] * a[c * d + x];
    for (let x = 0; x < d; x++) e[i * d + x] -= dot * a[c * d + x];
  }
  const g = new Float64Array(k * k); // E·Eᵀ
  for (let i = 0; i < k; i++) for (let j = 0; j < k; j++) { let s = 0; for (let x = 0; x < d; x++) s += e[i * d + x] * e[j * d + x]; g[i * k + j] = s; }
  let v = new Float64Array(k).fill(1), lambda = 0;
  for (let it = 0; it < 500; it++) {
    const w = new Float64Array(k);
    for (let i = 0; i < k; i++) for (let j = 0; j < k; j++) w[i] += g[i * k + j] * v[j];
    const norm = Math.hypot(...w);
    if (norm === 0) return 0;
    lambda = norm;
    v = w.map((x) => x / norm);
  }
  return (Math.asin(Math.min(1, Math.sqrt(lambda))) * 180) / Math.PI;
}

describe('randomized PCA against NumPy', () => {
  it('a decaying spectrum: the top 10 singular values within 1 % of NumPy\'s exact SVD; explained variance from the exact total', async () => {
    const a = load('decay.npy');
    const [n, d] = a.shape;
    const exact = load('decay.s.npy').data;
    const total = load('decay.total.npy').data[0];
    for (const q of [0, 1, 2]) {
      const r = await randomizedPca(inMemoryPass(a.data, n, d), n, d, { components: 10, oversample: 10, powerIterations: q, seed: 7 });
      const worst = Math.max(...Array.from(r.singularValues, (s, i) => Math.abs(s / exact[i] - 1)));
      console.log(`decaying spectrum, q = ${q} (${r.passes} passes): worst relative error of the top 10 singular values ${(100 * worst).toFixed(3)} %`);
      if (q >= 1) {
        // reference: numpy.linalg.svd of the centred matrix
        expect(worst).toBeLessThan(0.01);
        expect(r.totalVariance / total - 1).toBeLessThan(1e-9);
        expect(Math.abs(r.explainedVarianceRatio[0] - (exact[0] * exact[0]) / total)).toBeLessThan(0.01 * r.explainedVarianceRatio[0]);
      }
      expect(r.passes).toBe(q + 1);
    }
  });

  it('five planted components: principal angles below 1°, and the same seed gives identical output', async () => {
    const a = load('planted.npy');
    const [n, d] = a.shape;
    const basis = load('planted.basis.npy').data;
    const r = await randomizedPca(inMemoryPass(a.data, n, d), n, d, { components: 5, oversample: 10, powerIterations: 1, seed: 3 });
    // reference: the basis the fixture planted (orthonormal rows from NumPy's QR)
    const angle = largestPrincipalAngle(r.components, basis, 5, d);
    console.log(`planted components: largest principal angle ${angle.toFixed(4)}°`);
    expect(angle).toBeLessThan(1);
    // reference: NumPy's right singular vectors, up to sign (ours: largest entry positive)
    const vt = load('planted.vt.npy').data;
    for (let c = 0; c < 5; c++) {
      let dot = 0; for (let j = 0; j < d; j++) dot += r.components[c * d + j] * vt[c * d + j];
      expect(Math.abs(dot)).toBeGreaterThan(0.9999);
      let big = 0; for (let j = 0; j < d; j++) if (Math.abs(r.components[c * d + j]) > Math.abs(big)) big = r.components[c * d + j];
      expect(big).toBeGreaterThan(0);
    }
    const again = await randomizedPca(inMemoryPass(a.data, n, d), n, d, { components: 5, oversample: 10, powerIterations: 1, seed: 3 });
    expect(Array.from(again.singularValues)).toEqual(Array.from(r.singularValues));
    expect(Array.from(again.components)).toEqual(Array.from(r.components));
  });

  it('one pass (Tropp et al. 2017): planted components within 1 %, a decaying spectrum reported against the exact SVD', async () => {
    const pl = load('planted.npy');
    const [n, d] = pl.shape;
    const exactP = load('planted.s.npy').data;
    const one = await randomizedPca(inMemoryPass(pl.data, n, d), n, d, { components: 5, oversample: 10, powerIterations: 0, seed: 3, onePass: true });
    expect(one.passes).toBe(1);
    // reference: numpy.linalg.svd of the centred matrix (five planted directions over weak noise)
    for (let i = 0; i < 5; i++) expect(Math.abs(one.singularValues[i] / exactP[i] - 1)).toBeLessThan(0.01);
    const angle = largestPrincipalAngle(one.components, load('planted.basis.npy').data, 5, d);
    expect(angle).toBeLessThan(1);
    const dc = load('decay.npy');
    const exact = load('decay.s.npy').data;
    const r = await randomizedPca(inMemoryPass(dc.data, dc.shape[0], dc.shape[1]), dc.shape[0], dc.shape[1], { components: 10, oversample: 10, powerIterations: 0, seed: 7, onePass: true });
    const errs = Array.from(r.singularValues, (x, i) => Math.abs(x / exact[i] - 1));
    console.log(`one pass: planted components' largest principal angle ${angle.toFixed(3)}°; decaying spectrum, top 10 singular values within ${(100 * Math.max(...errs)).toFixed(2)} % (first ${(100 * errs[0]).toFixed(3)} %)`);
    expect(errs[0]).toBeLessThan(0.01);
  });

  it('uncentred, the first component is the average pattern (common practice)', async () => {
    const a = load('decay.npy');
    const [n, d] = a.shape;
    const r = await randomizedPca(inMemoryPass(a.data, n, d), n, d, { components: 3, oversample: 10, powerIterations: 2, seed: 2, centre: false });
    let dot = 0, norm = 0;
    for (let j = 0; j < d; j++) { dot += r.components[j] * r.mean[j]; norm += r.mean[j] ** 2; }
    // reference: the fixture's mean (5 + a NumPy normal vector per column) dominates its variation
    expect(Math.abs(dot) / Math.sqrt(norm)).toBeGreaterThan(0.999);
  });

  it('a periodic artefact (each pixel oscillating along the scan with its own phase) lands in a pair of equal components (common practice)', async () => {
    // analytic: x_ij = b_j + a·cos(ω·i + φ_j) = b_j + a·cos(ωi)·cos φ_j − a·sin(ωi)·sin φ_j, with the phases
    // spread evenly: two directions of equal variance, whose loadings are the cosine and sine of ω·i.
    const n = 600, d = 40, omega = (2 * Math.PI) / 37;
    const a = new Float64Array(n * d);
    for (let i = 0; i < n; i++) for (let j = 0; j < d; j++) a[i * d + j] = 100 + j + 5 * Math.cos(omega * i + (2 * Math.PI * j) / d);
    const r = await randomizedPca(inMemoryPass(a, n, d), n, d, { components: 4, oversample: 6, powerIterations: 2, seed: 5 });
    expect(Math.abs(r.singularValues[1] / r.singularValues[0] - 1)).toBeLessThan(0.01);
    expect(r.k).toBe(2);
    expect(r.explainedVarianceRatio[0] + r.explainedVarianceRatio[1]).toBeCloseTo(1, 9);
  });

  it('more sketch columns than the data has directions: the dependent ones drop out, no NaN', async () => {
    // analytic: rank-2 data (two patterns mixed) in 50 features, asked for 5 components
    const n = 200, d = 50;
    const a = new Float64Array(n * d);
    for (let i = 0; i < n; i++) for (let j = 0; j < d; j++) a[i * d + j] = Math.sin(i) * (j % 7) + Math.cos(3 * i) * (j % 3);
    const r = await randomizedPca(inMemoryPass(a, n, d), n, d, { components: 5, oversample: 5, powerIterations: 1, seed: 1 });
    expect(r.k).toBeLessThanOrEqual(3);
    for (const v of r.components) expect(Number.isFinite(v)).toBe(true);
    expect(r.explainedVarianceRatio[0] + (r.explainedVarianceRatio[1] ?? 0)).toBeCloseTo(1, 9);
  });
});
