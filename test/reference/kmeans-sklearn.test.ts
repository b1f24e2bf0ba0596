// k-means against scikit-learn's KMeans on the same features (make_kmeans_fixtures.py), and
// Gaussian blobs of known membership (an analytic case: the clusters are the blobs).
import fs from 'node:fs';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { kmeans, kmeansMiniBatch, lloyd } from '../../src-shared/compute/kmeans';
import { makeFixtures, readNpyF64 } from '../helpers/fixtures';

let fx: string;
beforeAll(() => { fx = makeFixtures('make_kmeans_fixtures.py'); });
afterAll(() => fs.rmSync(fx, { recursive: true, force: true }));

/** Adjusted Rand index (Hubert & Arabie 1985), from the contingency table. */
export function adjustedRand(a: ArrayLike<number>, b: ArrayLike<number>): number {
  const n = a.length;
  const table = new Map<string, number>(), ra = new Map<number, number>(), rb = new Map<number, number>();
  for (let i = 0; i < n; i++) {
    const k = `${a[i]},${b[i]}`;
    table.set(k, (table.get(k) ?? 0) + 1);
    ra.set(a[i], (ra.get(a[i]) ?? 0) + 1);
    rb.set(b[i], (rb.get(b[i]) ?? 0) + 1);
  }
  const c2 = (x: number) => (x * (x - 1)) / 2;
  let sumT = 0, sumA = 0, sumB = 0;
  for (const v of table.values()) sumT += c2(v);
  for (const v of ra.values()) sumA += c2(v);
  for (const v of rb.values()) sumB += c2(v);
  const expected = (sumA * sumB) / c2(n);
  return (sumT - expected) / ((sumA + sumB) / 2 - expected);
}

describe('k-means', () => {
  it('Gaussian blobs of known membership: adjusted Rand index 1', () => {
    const p = readNpyF64(path.join(fx, 'blobs.npy'));
    const truth = readNpyF64(path.join(fx, 'blobs.labels.npy')).data;
    const r = kmeans(p.data, p.shape[0], p.shape[1], 3, { restarts: 5, seed: 1, maxIterations: 300, tol: 1e-4 });
    // reference: the blob each point was drawn from
    expect(adjustedRand(r.labels, truth)).toBe(1);
    expect(Array.from(r.sizes).sort()).toEqual([300, 300, 300]);
  });

  it('an overlapping mixture: inertia within 1 % of scikit-learn\'s, from its own start and with restarts', () => {
    const p = readNpyF64(path.join(fx, 'mix.npy'));
    const [n, f] = p.shape;
    const sk = JSON.parse(fs.readFileSync(path.join(fx, 'mix.json'), 'utf8'));
    // reference: KMeans(init=the same six points, n_init=1, algorithm='lloyd').inertia_
    const fromInit = lloyd(p.data, n, f, 6, Float64Array.from(readNpyF64(path.join(fx, 'mix.init.npy')).data), 300, 0);
    expect(fromInit.inertia).toBeLessThanOrEqual(1.01 * sk.inertia_from_init);
    // reference: KMeans(n_clusters=6, n_init=10).inertia_
    const r = kmeans(p.data, n, f, 6, { restarts: 10, seed: 0, maxIterations: 300, tol: 1e-4 });
    console.log(`mixture: inertia ${r.inertia.toFixed(2)} (10 restarts) against scikit-learn's ${sk.inertia_best_of_10.toFixed(2)}; from its start ${fromInit.inertia.toFixed(2)} against ${sk.inertia_from_init.toFixed(2)}`);
    expect(r.inertia).toBeLessThanOrEqual(1.01 * sk.inertia_best_of_10);
    const again = kmeans(p.data, n, f, 6, { restarts: 10, seed: 0, maxIterations: 300, tol: 1e-4 });
    expect(Array.from(again.labels)).toEqual(Array.from(r.labels));
  });

  it('mini-batch k-means (Sculley 2010): blobs exact, the mixture within 2 % of scikit-learn\'s full k-means inertia', () => {
    const p = readNpyF64(path.join(fx, 'blobs.npy'));
    const truth = readNpyF64(path.join(fx, 'blobs.labels.npy')).data;
    const b = kmeansMiniBatch(p.data, p.shape[0], p.shape[1], 3, { batch: 100, iterations: 50, seed: 3 });
    // reference: the blob each point was drawn from
    expect(adjustedRand(b.labels, truth)).toBe(1);
    const m = readNpyF64(path.join(fx, 'mix.npy'));
    const sk = JSON.parse(fs.readFileSync(path.join(fx, 'mix.json'), 'utf8'));
    const r = kmeansMiniBatch(m.data, m.shape[0], m.shape[1], 6, { batch: 256, iterations: 100, seed: 0 });
    console.log(`mixture, mini-batch: inertia ${r.inertia.toFixed(2)} against scikit-learn's full k-means ${sk.inertia_best_of_10.toFixed(2)}`);
    // reference: KMeans(n_clusters=6, n_init=10).inertia_ (mini-batch trades a little inertia for speed)
    expect(r.inertia).toBeLessThanOrEqual(1.02 * sk.inertia_best_of_10);
  });

  it('refuses what cannot be done', () => {
    const pts = new Float64Array([0, 0, 1, 1, 0, 0]);
    expect(() => kmeans(pts, 3, 2, 4, { restarts: 1, seed: 0, maxIterations: 10, tol: 1e-4 })).toThrow(/4 clusters asked for, but there are only 3 points/);
    expect(() => kmeans(pts, 3, 2, 3, { restarts: 1, seed: 0, maxIterations: 10, tol: 1e-4 })).toThrow(/only 2 distinct value/);
    expect(() => kmeans(new Float64Array([NaN, 1]), 2, 1, 1, { restarts: 1, seed: 0, maxIterations: 10, tol: 1e-4 })).toThrow(/NaN/);
  });
});
