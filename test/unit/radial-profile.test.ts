import { describe, expect, it } from 'vitest';
import { braggRingCandidates, diskContrast, radialProfile, strongestRing } from '../../src-shared/compute/radial-profile';

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

/** A bright-field disk and `spots` Bragg disks of the same radius on a ring, over a broad halo (σ 6 px) peaking inside their ring (analytic construction). */
function spotPattern(n: number, cx: number, cy: number, diskR: number, ringR: number, spots: number, haloR: number): Float64Array {
  const p = new Float64Array(n * n);
  for (let y = 0; y < n; y++) for (let x = 0; x < n; x++) {
    const d = Math.hypot(x - cx, y - cy);
    p[y * n + x] = 40 * Math.exp(-((d - haloR) ** 2) / (2 * 6 ** 2)) + (d <= diskR ? 2000 : 0);
    for (let k = 0; k < spots; k++) {
      const a = (2 * Math.PI * (k + 0.3)) / spots;
      if (Math.hypot(x - cx - ringR * Math.cos(a), y - cy - ringR * Math.sin(a)) <= diskR) p[y * n + x] += 60;
    }
  }
  return p;
}

describe('rings of Bragg disks', () => {
  it('large disks on a large detector: found on a binned copy in well under a second, the radius from the full pattern', () => {
    // analytic: a bright-field disk and 8 disks of radius 24 with centres 160.0 px from a sub-pixel
    // centre of a 512 × 512 detector, over a smoothly falling background
    const n = 512, cx = 255.3, cy = 256.6, r = 24;
    const p = new Float64Array(n * n);
    for (let y = 0; y < n; y++) for (let x = 0; x < n; x++) {
      const d = Math.hypot(x - cx, y - cy);
      p[y * n + x] = (d <= r ? 2000 : 0) + 5 * Math.exp(-d / 80);
      for (let k = 0; k < 8; k++) {
        const a = (2 * Math.PI * (k + 0.3)) / 8;
        if (Math.hypot(x - cx - 160 * Math.cos(a), y - cy - 160 * Math.sin(a)) <= r) p[y * n + x] += 60;
      }
    }
    const t = performance.now();
    const rings = braggRingCandidates(p, n, n, cx, cy, r);
    const ms = performance.now() - t;
    console.log(`512 × 512 detector, disks of radius 24: ring found at ${rings[0]?.radius.toFixed(2)} px (drawn at 160) in ${ms.toFixed(0)} ms`);
    expect(rings).toHaveLength(1);
    expect(Math.abs(rings[0].radius - 160)).toBeLessThan(0.1);
    expect(ms).toBeLessThan(3000);
  });

  it('disk contrast is zero on a flat pattern and peaks at a disk of the probe\'s size (analytic)', () => {
    const n = 40;
    const flat = new Float64Array(n * n).fill(7);
    for (const v of diskContrast(flat, n, n, 4)) expect(v).toBeCloseTo(0, 12);
    const one = new Float64Array(n * n);
    for (let y = 0; y < n; y++) for (let x = 0; x < n; x++) if (Math.hypot(x - 20, y - 17) <= 4) one[y * n + x] = 10;
    const c = diskContrast(one, n, n, 4);
    // the template centred on the disk sees all of it inside and none of it around: contrast = 10
    expect(c[17 * n + 20]).toBeCloseTo(10, 12);
    expect(Math.max(...c)).toBe(c[17 * n + 20]);
  });

  it('finds the ring of the spots, not the brighter halo inside it, to a fraction of a pixel', () => {
    // analytic: 12 disks of radius 4.2 drawn with centres 19.2 px from a sub-pixel centre, a halo peaking at 16.3 px
    const p = spotPattern(96, 47.3, 47.8, 4.2, 19.2, 12, 16.3);
    const rings = braggRingCandidates(p, 96, 96, 47.3, 47.8, 4.2);
    expect(rings.length).toBeGreaterThan(0);
    expect(Math.abs(rings[0].radius - 19.2)).toBeLessThan(0.2);
    expect(rings.some((r) => Math.abs(r.radius - 16.3) < 1.5)).toBe(false);
  });
});
