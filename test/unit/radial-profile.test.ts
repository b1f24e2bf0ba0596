import { describe, expect, it } from 'vitest';
import { radialProfile, strongestRing } from '../../src-shared/compute/radial-profile';

/** A pattern with a Gaussian ring of known radius over a falling halo (analytic construction). */
function ringPattern(n: number, cx: number, cy: number, ringR: number, halo = 50): Float64Array {
  const p = new Float64Array(n * n);
  for (let y = 0; y < n; y++) for (let x = 0; x < n; x++) {
    const d = Math.hypot(x - cx, y - cy);
    p[y * n + x] = halo * Math.exp(-d / 20) + 30 * Math.exp(-((d - ringR) ** 2) / (2 * 1.5 ** 2)) + (d < 8 ? 1000 : 0);
  }
  return p;
}

describe('radial profile', () => {
  it('averages a radially symmetric pattern to its radial function', () => {
    // analytic: f(d) = d² sampled at pixel centres; ring k's mean lies within the ring's range of d²
    const n = 41, c = 20;
    const p = new Float64Array(n * n);
    for (let y = 0; y < n; y++) for (let x = 0; x < n; x++) p[y * n + x] = (x - c) ** 2 + (y - c) ** 2;
    const { mean } = radialProfile(p, n, n, c, c);
    expect(mean[0]).toBe(0);
    for (let k = 1; k < 20; k++) {
      expect(mean[k]).toBeGreaterThan((k - 0.5) ** 2);
      expect(mean[k]).toBeLessThanOrEqual((k + 0.5) ** 2);
    }
  });

  it('finds a ring of known radius beyond the central disk, to a fraction of a pixel', () => {
    // analytic: the ring was drawn at radius 27.3 about a sub-pixel centre
    const p = ringPattern(96, 47.6, 48.2, 27.3);
    const r = strongestRing(p, 96, 96, 47.6, 48.2, 10);
    expect(Math.abs(r.radius - 27.3)).toBeLessThan(0.3);
  });

  it('says so when there is no ring', () => {
    const n = 64, p = new Float64Array(n * n);
    for (let y = 0; y < n; y++) for (let x = 0; x < n; x++) p[y * n + x] = 100 * Math.exp(-Math.hypot(x - 32, y - 32) / 10);
    expect(() => strongestRing(p, n, n, 32, 32, 5)).toThrow(/no ring/);
  });
});
