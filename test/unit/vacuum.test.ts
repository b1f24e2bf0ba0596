// Vacuum found from the scattered fraction per position: planted scans with a known vacuum strip.
import { describe, expect, it } from 'vitest';
import { findVacuum } from '../../src-shared/compute/vacuum';

/** Poisson counts by inversion (small means) or a rounded normal (large), seeded. */
function rng(seed: number) {
  let s = seed >>> 0;
  const u = () => { s = (s * 1664525 + 1013904223) >>> 0; return (s + 0.5) / 2 ** 32; };
  const normal = () => Math.sqrt(-2 * Math.log(u())) * Math.cos(2 * Math.PI * u());
  const poisson = (m: number) => {
    if (m > 50) return Math.max(0, Math.round(m + Math.sqrt(m) * normal()));
    let k = 0, p = Math.exp(-m), c = p;
    const x = u();
    while (x > c) { k++; p *= m / k; c += p; }
    return k;
  };
  return { u, poisson };
}

/** A scanY × scanX scan: vacuum in the first `vacuumCols` columns, matter scattering `fraction` of the beam elsewhere. */
function planted(scanY: number, scanX: number, vacuumCols: number, fraction: (y: number, x: number) => number, beam = 30000, seed = 1) {
  const r = rng(seed);
  const scattered = new Float64Array(scanY * scanX), total = new Float64Array(scanY * scanX);
  for (let y = 0; y < scanY; y++) {
    for (let x = 0; x < scanX; x++) {
      const f = x < vacuumCols ? 0 : fraction(y, x);
      const out = r.poisson(beam * f), inside = r.poisson(beam * (1 - f));
      scattered[y * scanX + x] = out;
      total[y * scanX + x] = out + inside;
    }
  }
  return { scattered, total };
}

describe('vacuum finding (planted strips)', () => {
  it('finds exactly a vacuum strip beside a thin specimen (2 % scattered)', () => {
    // analytic case: vacuum scatters nothing; the specimen 2 % ± 0.5 %, Poisson counts on a 30 000-count beam
    const { scattered, total } = planted(40, 50, 6, (y, x) => 0.02 + 0.005 * Math.sin(x / 5 + y / 7));
    const v = findVacuum(scattered, total);
    expect(v.positions).toBe(40 * 6);
    for (let y = 0; y < 40; y++) for (let x = 0; x < 50; x++) expect(v.mask![y * 50 + x]).toBe(x < 6 ? 1 : 0);
    expect(v.gapSigmas).toBeGreaterThan(5);
  });

  it('with a flat detector background, vacuum is still the lowest, separated group', () => {
    const r = rng(3);
    const { scattered, total } = planted(32, 32, 4, () => 0.03, 20000, 7);
    // 50 background counts per position on top of the scattered ones, everywhere
    for (let i = 0; i < total.length; i++) { const b = r.poisson(50); scattered[i] += b; total[i] += b; }
    const v = findVacuum(scattered, total);
    expect(v.positions).toBe(32 * 4);
  });

  it('reports none when the specimen covers the whole scan', () => {
    const { scattered, total } = planted(40, 50, 0, (y, x) => 0.01 + 0.04 * (x / 50) + 0.01 * Math.sin(y / 3));
    const v = findVacuum(scattered, total);
    expect(v.mask).toBeNull();
    expect(v.gapSigmas).toBeLessThan(5);
  });

  it('reports none for a vacuum patch too small to trust (under 1 % of positions)', () => {
    const { scattered, total } = planted(60, 60, 0, () => 0.02);
    for (let i = 0; i < 5; i++) { scattered[i] = 0; }
    expect(findVacuum(scattered, total).mask).toBeNull();
  });
});

describe('vacuum finding, speed', () => {
  it('a 512 × 512 scan takes well under a second (it runs on every first pass)', () => {
    const { scattered, total } = planted(512, 512, 40, (y, x) => 0.02 + 0.01 * Math.sin(x / 9 + y / 13));
    const t0 = performance.now();
    const v = findVacuum(scattered, total);
    const ms = performance.now() - t0;
    expect(v.positions).toBe(512 * 40);
    expect(ms).toBeLessThan(1000);
  });
});

describe('median absolute deviation of sorted values', () => {
  it('equals the textbook definition (sort the deviations, take the median) for every length', async () => {
    const { sortedMad } = await import('../../src-shared/compute/vacuum');
    const r = rng(11);
    for (let k = 1; k <= 40; k++) {
      const v = Float64Array.from({ length: k }, () => Math.round(r.u() * 20) / 4).sort();
      const med = k % 2 ? v[k >> 1] : (v[(k >> 1) - 1] + v[k >> 1]) / 2;
      const dev = Array.from(v, (x) => Math.abs(x - med)).sort((a, b) => a - b);
      const want = k % 2 ? dev[k >> 1] : (dev[(k >> 1) - 1] + dev[k >> 1]) / 2;
      expect(sortedMad(v, k), `k=${k}`).toBeCloseTo(want, 12);
    }
  });
});
