import { describe, expect, it } from 'vitest';
import { findBrightFieldDisk } from '../../src-shared/compute/bright-field-disk';
import { InputError } from '../../src-shared/model/errors';
import { mulberry32, poisson } from '../helpers/synthetic';

// Analytic synthetic disks: each pixel holds the exact fraction of its area inside the circle,
// computed by supersampling 64 × 64 points per pixel (error ≲ 1/4096 of a pixel's area on the
// edge), so the true centre and radius are known. Noise comes from a seeded PRNG.

/** Pixel (y, x) covers [x − ½, x + ½] × [y − ½, y + ½]; pixels wholly inside or outside skip the sampling. */
function diskCoverage(detY: number, detX: number, cx: number, cy: number, r: number, sub = 64): Float64Array {
  const out = new Float64Array(detY * detX);
  const rSq = r * r;
  for (let y = 0; y < detY; y++) {
    for (let x = 0; x < detX; x++) {
      const nearX = Math.max(0, Math.abs(x - cx) - 0.5), nearY = Math.max(0, Math.abs(y - cy) - 0.5);
      if (nearX * nearX + nearY * nearY >= rSq) continue;
      const farX = Math.abs(x - cx) + 0.5, farY = Math.abs(y - cy) + 0.5;
      if (farX * farX + farY * farY <= rSq) { out[y * detX + x] = 1; continue; }
      let inside = 0;
      for (let i = 0; i < sub; i++) {
        const py = y - 0.5 + (i + 0.5) / sub - cy;
        for (let j = 0; j < sub; j++) {
          const px = x - 0.5 + (j + 0.5) / sub - cx;
          if (px * px + py * py < rSq) inside++;
        }
      }
      out[y * detX + x] = inside / (sub * sub);
    }
  }
  return out;
}

interface DiskCase { detY: number; detX: number; cx: number; cy: number; r: number }

const PLATEAU = 50; // counts per pixel inside the disk

/**
 * Mean pattern: the disk at 50 counts/px, a weak diffuse background (1 + 4·exp(−d²/2(1.5r)²)
 * counts), four Bragg disks of the same radius at 10 counts/px, 2r + 8 px out, Poisson noise,
 * then hot pixels (1000 × the plateau) and dead pixels (0), some deliberately on the edge.
 */
function realisticPattern(c: DiskCase, seed: number): Float64Array {
  const rand = mulberry32(seed);
  const disk = diskCoverage(c.detY, c.detX, c.cx, c.cy, c.r);
  const bragg: Float64Array[] = [];
  for (let k = 0; k < 4; k++) {
    const angle = 0.4 + (k * Math.PI) / 2 + rand();
    const g = 2 * c.r + 8;
    bragg.push(diskCoverage(c.detY, c.detX, c.cx + g * Math.cos(angle), c.cy + g * Math.sin(angle), c.r, 8));
  }
  const img = new Float64Array(c.detY * c.detX);
  for (let y = 0; y < c.detY; y++) {
    for (let x = 0; x < c.detX; x++) {
      const i = y * c.detX + x;
      const dSq = (x - c.cx) ** 2 + (y - c.cy) ** 2;
      let rate = PLATEAU * disk[i] + 1 + 4 * Math.exp(-dSq / (2 * (1.5 * c.r) ** 2));
      for (const b of bragg) rate += 10 * b[i];
      img[i] = poisson(rand, rate);
    }
  }
  const at = (y: number, x: number) => Math.round(y) * c.detX + Math.round(x);
  for (let k = 0; k < 5; k++) img[Math.floor(rand() * img.length)] = 1000 * PLATEAU;
  img[at(c.cy, c.cx)] = 1000 * PLATEAU; // in the disk
  img[at(c.cy, c.cx + c.r)] = 1000 * PLATEAU; // on the edge
  img[at(c.cy - c.r, c.cx)] = 1000 * PLATEAU; // on the edge
  img[at(c.cy + 2, c.cx)] = 0; // dead, in the disk
  img[at(c.cy, c.cx - c.r + 0.5)] = 0; // dead, on the edge
  img[at(c.cy + c.r - 0.5, c.cx + 1)] = 0; // dead, on the edge
  return img;
}

/** ~20 cases: radii 5–40 px, sub-pixel centres, odd and unequal detector sizes. */
function caseGrid(): DiskCase[] {
  const rand = mulberry32(2024);
  const radii = [5, 5.5, 6.8, 7.3, 8.9, 10.2, 11.6, 13.1, 14.7, 16.4, 18.2, 20.5, 22.9, 25.3, 27.8, 30.4, 33.1, 35.9, 38.2, 40];
  return radii.map((r, k) => {
    // Room for the Bragg disks: 3r + 8 px from the centre, plus a margin.
    const half = Math.ceil(3 * r + 10);
    const detY = 2 * half + 1 + 2 * (k % 3); // odd
    const detX = 2 * half + 1 + 2 * ((k + 1) % 2) + 1; // even or odd, never equal to detY
    return { detY, detX, r, cx: detX / 2 + (rand() - 0.5) * 6, cy: detY / 2 + (rand() - 0.5) * 6 };
  });
}

function errors(found: { cx: number; cy: number; r: number }, c: DiskCase) {
  return { dx: found.cx - c.cx, dy: found.cy - c.cy, dr: found.r - c.r };
}

describe('findBrightFieldDisk', () => {
  it('is within 0.1 px in centre and radius on 20 noisy disks with hot and dead pixels, a halo and Bragg disks', () => {
    let worst = 0;
    caseGrid().forEach((c, k) => {
      const found = findBrightFieldDisk(realisticPattern(c, 100 + k), c.detY, c.detX);
      const e = errors(found, c);
      // reference: the analytic geometry the pattern was made from
      expect(Math.abs(e.dx), `case ${k} (r = ${c.r}) cx`).toBeLessThanOrEqual(0.1);
      expect(Math.abs(e.dy), `case ${k} (r = ${c.r}) cy`).toBeLessThanOrEqual(0.1);
      expect(Math.abs(e.dr), `case ${k} (r = ${c.r}) r`).toBeLessThanOrEqual(0.1);
      expect(found.edgeConsistency).toBeGreaterThan(0.9);
      expect(found.method).toBe('edge-fit');
      worst = Math.max(worst, Math.abs(e.dx), Math.abs(e.dy), Math.abs(e.dr));
    });
    // Shot noise at 50 counts/px puts the typical error near 0.02 px; 0.1 px leaves room for the tails.
    expect(worst).toBeGreaterThan(0); // the noise was really there
  });

  it('is within 0.005 px on noiseless disks (the supersampled coverage is the only error)', () => {
    caseGrid().filter((_, k) => k % 3 === 0).forEach((c) => {
      const pattern = diskCoverage(c.detY, c.detX, c.cx, c.cy, c.r).map((v) => 100 * v + 3);
      const e = errors(findBrightFieldDisk(pattern, c.detY, c.detX), c);
      // reference: the analytic geometry
      expect(Math.max(Math.abs(e.dx), Math.abs(e.dy), Math.abs(e.dr))).toBeLessThanOrEqual(0.005);
    });
  });

  it('ignores pixels in excludePixels, e.g. a two-column detector gap through the disk', () => {
    const c: DiskCase = { detY: 101, detX: 103, cx: 50.37, cy: 49.81, r: 21.3 };
    const rand = mulberry32(7);
    const pattern = diskCoverage(c.detY, c.detX, c.cx, c.cy, c.r).map((v) => poisson(rand, PLATEAU * v + 2));
    const gap = new Uint8Array(c.detY * c.detX);
    for (let y = 0; y < c.detY; y++) for (const x of [49, 50]) { pattern[y * c.detX + x] = 0; gap[y * c.detX + x] = 1; }
    const e = errors(findBrightFieldDisk(pattern, c.detY, c.detX, { excludePixels: gap }), c);
    // reference: the analytic geometry
    expect(Math.max(Math.abs(e.dx), Math.abs(e.dy), Math.abs(e.dr))).toBeLessThanOrEqual(0.1);
  });

  it('keeps the area estimate for a blurred edge, which blur does not bias', () => {
    // A Gaussian point-spread of σ = 1 px (separable, normalised, so the total is kept).
    const c: DiskCase = { detY: 97, detX: 99, cx: 49.3, cy: 47.8, r: 15 };
    const sharp = diskCoverage(c.detY, c.detX, c.cx, c.cy, c.r);
    const kernel = [-4, -3, -2, -1, 0, 1, 2, 3, 4].map((t) => Math.exp(-t * t / 2));
    const norm = kernel.reduce((a, b) => a + b, 0);
    const blurAlong = (src: Float64Array, dy: number, dx: number) => src.map((_, i) => {
      const y = Math.floor(i / c.detX), x = i % c.detX;
      let s = 0;
      kernel.forEach((w, j) => {
        const yy = Math.min(c.detY - 1, Math.max(0, y + (j - 4) * dy)), xx = Math.min(c.detX - 1, Math.max(0, x + (j - 4) * dx));
        s += w * src[yy * c.detX + xx];
      });
      return s / norm;
    });
    const blurred = blurAlong(blurAlong(sharp, 0, 1), 1, 0).map((v) => 100 * v + 2);
    const found = findBrightFieldDisk(blurred, c.detY, c.detX);
    const e = errors(found, c);
    // reference: the analytic geometry; the area of the disk is unchanged by a normalised blur
    expect(found.method).toBe('moments');
    expect(Math.max(Math.abs(e.dx), Math.abs(e.dy), Math.abs(e.dr))).toBeLessThanOrEqual(0.05);
  });

  it('throws InputError when there is no disk: all zeros, flat, pure noise, or non-finite', () => {
    const n = 64 * 64;
    expect(() => findBrightFieldDisk(new Float64Array(n), 64, 64)).toThrow(/bright-field disk: no disk found/);
    expect(() => findBrightFieldDisk(new Float64Array(n).fill(7.5), 64, 64)).toThrow(InputError);
    expect(() => findBrightFieldDisk(new Float64Array(n).fill(NaN), 64, 64)).toThrow(InputError);
    for (const [lambda, seed] of [[0.5, 1], [5, 2], [50, 3], [50, 4], [1000, 5]]) {
      const rand = mulberry32(seed);
      const noise = new Float64Array(n).map(() => poisson(rand, lambda));
      expect(() => findBrightFieldDisk(noise, 64, 64), `Poisson ${lambda}, seed ${seed}`).toThrow(InputError);
    }
  });

  it('throws InputError for a disk cut by the detector edge and for wrong shapes', () => {
    const cut = diskCoverage(64, 65, 8, 32, 12).map((v) => 100 * v);
    expect(() => findBrightFieldDisk(cut, 64, 65)).toThrow(/detector edge/);
    expect(() => findBrightFieldDisk(new Float64Array(10), 64, 64)).toThrow(InputError);
    expect(() => findBrightFieldDisk(cut, 64, 65, { excludePixels: new Uint8Array(3) })).toThrow(/excludePixels/);
  });

  it('takes a few milliseconds on a 256 × 256 pattern', () => {
    const c: DiskCase = { detY: 256, detX: 256, cx: 128.3, cy: 127.6, r: 30 };
    const pattern = realisticPattern(c, 9);
    const times: number[] = [];
    for (let k = 0; k < 7; k++) {
      const t0 = performance.now();
      findBrightFieldDisk(pattern, c.detY, c.detX);
      times.push(performance.now() - t0);
    }
    times.sort((a, b) => a - b);
    // A loose bound, so a loaded 2-core machine does not fail it; a typical desktop takes a few ms.
    expect(times[3]).toBeLessThan(200);
  });
});
