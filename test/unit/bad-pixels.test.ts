import { describe, expect, it } from 'vitest';
import { findBadPixels, replaceBadPixels } from '../../src-shared/compute/bad-pixels';
import { InputError } from '../../src-shared/model/errors';
import { mulberry32, poisson } from '../helpers/synthetic';

// Synthetic stacks of Poisson-noise frames whose true content is known: a disk (area-weighted
// pixel coverage, supersampled 16×16 per pixel, plenty for a detection test), a background, and
// planted hot pixels (a stuck excess in every frame) and dead pixels (zero in every frame). The
// planted lists are the reference; mean and max are computed here over the frames.

function diskCoverage(detY: number, detX: number, cx: number, cy: number, r: number, sub = 16): Float64Array {
  const out = new Float64Array(detY * detX);
  for (let y = 0; y < detY; y++) {
    for (let x = 0; x < detX; x++) {
      let inside = 0;
      for (let i = 0; i < sub; i++) {
        for (let j = 0; j < sub; j++) {
          const px = x - 0.5 + (j + 0.5) / sub - cx, py = y - 0.5 + (i + 0.5) / sub - cy;
          if (px * px + py * py < r * r) inside++;
        }
      }
      out[y * detX + x] = inside / (sub * sub);
    }
  }
  return out;
}

interface Scene {
  detY: number; detX: number; frames: number;
  /** Expected counts per frame at each pixel. */
  rate: Float64Array;
  hot?: [number, number][]; hotExcess?: number;
  dead?: [number, number][];
  seed: number;
}

/** Mean and max over the frames, with and without the planted defects (same noise). */
function simulate(s: Scene) {
  const n = s.detY * s.detX;
  const rand = mulberry32(s.seed);
  const mean = new Float64Array(n), max = new Float64Array(n), cleanMean = new Float64Array(n);
  const hotSet = new Set((s.hot ?? []).map(([y, x]) => y * s.detX + x));
  const deadSet = new Set((s.dead ?? []).map(([y, x]) => y * s.detX + x));
  for (let f = 0; f < s.frames; f++) {
    for (let i = 0; i < n; i++) {
      const clean = poisson(rand, s.rate[i]);
      const v = deadSet.has(i) ? 0 : clean + (hotSet.has(i) ? s.hotExcess ?? 0 : 0);
      cleanMean[i] += clean / s.frames;
      mean[i] += v / s.frames;
      if (v > max[i]) max[i] = v;
    }
  }
  return { mean, max, cleanMean };
}

function sorted(list: [number, number][]): string[] {
  return list.map(([y, x]) => `${y},${x}`).sort();
}

function diskScene(detY: number, detX: number, cx: number, cy: number, r: number, plateau: number, background: number): Float64Array {
  const cover = diskCoverage(detY, detX, cx, cy, r);
  return cover.map((c, i) => {
    const y = Math.floor(i / detX), x = i % detX;
    // A weak diffuse halo on top of the flat background.
    const halo = 0.5 * background * Math.exp(-((x - cx) ** 2 + (y - cy) ** 2) / (2 * (2 * r) ** 2));
    return plateau * c + background + halo;
  });
}

describe('findBadPixels', () => {
  const detY = 96, detX = 97, cx = 47.6, cy = 48.2, r = 14.3;
  // Hot: in the background, in the disk, an adjacent pair, just outside the edge, on the border.
  const hot: [number, number][] = [[10, 12], [50, 45], [70, 80], [70, 81], [48, 63], [0, 40]];
  // Dead: in the disk, in the background, on the edge (about half covered), in a detector corner.
  const dead: [number, number][] = [[44, 50], [85, 20], [48, 33], [95, 96]];

  it('finds every planted hot and dead pixel and nothing else, over several noise seeds', () => {
    const rate = diskScene(detY, detX, cx, cy, r, 50, 2);
    for (const seed of [1, 2, 3, 4]) {
      const frames = 16;
      const { mean, max } = simulate({ detY, detX, frames, rate, hot, hotExcess: 300, dead, seed });
      const found = findBadPixels(mean, max, detY, detX, { patternCount: frames });
      // reference: the planted lists (analytic: we put them there)
      expect(sorted(found.hot)).toEqual(sorted(hot));
      expect(sorted(found.dead)).toEqual(sorted(dead));
      let flagged = 0;
      for (const v of found.mask) flagged += v;
      expect(flagged).toBe(hot.length + dead.length);
    }
  });

  it('flags nothing on steep noiseless disk edges, even with zero background and small Bragg-like disks', () => {
    // The steepest legitimate gradient: a 1000-count plateau on an exact-zero background, one frame.
    const cases = [
      { cx: 31.5, cy: 30.25, r: 5 }, { cx: 30.13, cy: 32.71, r: 12.6 }, { cx: 33.9, cy: 29.4, r: 2.5 }, { cx: 32, cy: 32, r: 20 },
    ];
    for (const c of cases) {
      const rate = diskCoverage(64, 65, c.cx, c.cy, c.r).map((v) => 1000 * v);
      const found = findBadPixels(rate, rate, 64, 65);
      // reference: analytic, a disk has no bad pixels
      expect(found.hot).toEqual([]);
      expect(found.dead).toEqual([]);
    }
  });

  it('at low counts (0.5 counts/px/frame outside the disk) takes zeros for normal, not dead', () => {
    const lowY = 128, lowX = 127;
    // 6 frames: a live background pixel (0.5–0.75 counts per frame with the halo) expects 3–4.5
    // counts and stays at zero with chance e⁻³–e⁻⁴·⁵ (5–1 %), so hundreds of background pixels
    // never light; none may be flagged. The disk, 8 counts per frame on top, expects about 52
    // counts over 6 frames, its dimmest neighbour rarely below 40 (≥ 20), so a dead pixel there
    // is still found.
    const rate = diskScene(lowY, lowX, 63.3, 64.8, 20, 8, 0.5);
    const lowDead: [number, number][] = [[64, 60]];
    const lowHot: [number, number][] = [[20, 20], [64, 70]];
    for (const seed of [11, 12, 13]) {
      const frames = 6;
      const { mean, max } = simulate({ detY: lowY, detX: lowX, frames, rate, hot: lowHot, hotExcess: 20, dead: lowDead, seed });
      let neverLit = 0;
      for (const v of max) if (v === 0) neverLit++;
      expect(neverLit).toBeGreaterThan(200); // the premise: many live pixels caught nothing
      const found = findBadPixels(mean, max, lowY, lowX, { patternCount: frames });
      // reference: the planted lists
      expect(sorted(found.dead)).toEqual(sorted(lowDead));
      expect(sorted(found.hot)).toEqual(sorted(lowHot));
      // Without the pattern count the rule assumes a single pattern and keeps even the disk's dead pixel.
      expect(findBadPixels(mean, max, lowY, lowX).dead).toEqual([]);
    }
  });

  it('reports never-finite pixels as dead', () => {
    const mean = new Float64Array(25).fill(10), max = new Float64Array(25).fill(20);
    mean[7] = NaN; max[7] = -Infinity;
    expect(findBadPixels(mean, max, 5, 5).dead).toEqual([[1, 2]]);
  });

  it('rejects inputs of the wrong shape and bad options with InputError', () => {
    const a = new Float64Array(12);
    expect(() => findBadPixels(a, a, 3, 5)).toThrow(InputError);
    expect(() => findBadPixels(a, new Float64Array(11), 3, 4)).toThrow(/max pattern/);
    expect(() => findBadPixels(a, a, 3, 4, { hotFactor: -1 })).toThrow(/hotFactor/);
    expect(() => findBadPixels(a, a, 0, 12)).toThrow(InputError);
  });
});

describe('replaceBadPixels', () => {
  it('after replacement, a hot pixel no longer shows in a region sum beyond the noise', () => {
    const detY = 80, detX = 81, frames = 16;
    const rate = diskScene(detY, detX, 40.3, 39.6, 15, 50, 2);
    const hot: [number, number][] = [[40, 41], [12, 15], [40, 55]];
    const { mean, max, cleanMean } = simulate({ detY, detX, frames, rate, hot, hotExcess: 500, seed: 5 });
    const { mask } = findBadPixels(mean, max, detY, detX, { patternCount: frames });
    const repaired = replaceBadPixels(mean, detY, detX, mask);
    for (const [hy, hx] of hot) {
      let before = 0, after = 0, truth = 0, maxRate = 0;
      for (let y = hy - 4; y <= hy + 4; y++) {
        for (let x = hx - 4; x <= hx + 4; x++) {
          const i = y * detX + x;
          before += mean[i]; after += repaired[i]; truth += cleanMean[i];
          maxRate = Math.max(maxRate, rate[i]);
        }
      }
      // reference: the same frames without the planted defect. The one replaced value is off by
      // about the noise of one pixel of the mean, sqrt(rate / frames); allow 5 of those.
      const noise = Math.sqrt(maxRate / frames);
      expect(Math.abs(before - truth)).toBeGreaterThan(400); // the defect was there
      expect(Math.abs(after - truth)).toBeLessThan(5 * noise);
    }
  });

  it('uses the median of the valid 3×3 neighbours, growing to 5×5 when none is valid (analytic ramp)', () => {
    // On a plane f = 3y + 7x the valid neighbours of an interior pixel come in pairs symmetric
    // about it, so their median is f itself: reference, analytic.
    const detY = 11, detX = 12;
    const f = (y: number, x: number) => 3 * y + 7 * x;
    const ramp = new Float64Array(detY * detX).map((_, i) => f(Math.floor(i / detX), i % detX));
    const mask = new Uint8Array(detY * detX);
    mask[2 * detX + 9] = 1; // isolated
    for (let y = 5; y <= 7; y++) for (let x = 4; x <= 6; x++) mask[y * detX + x] = 1; // a 3×3 block
    mask[0] = 1; // a corner
    const out = replaceBadPixels(ramp, detY, detX, mask);
    expect(out[2 * detX + 9]).toBe(f(2, 9));
    // Block centre: no valid 3×3 neighbour, so the 16 valid pixels of the 5×5 ring (symmetric).
    expect(out[6 * detX + 5]).toBe(f(6, 5));
    // Block corner (5, 4): valid 3×3 neighbours (4,3) (4,4) (4,5) (5,3) (6,3) → 33, 40, 47, 36, 39 → median 39.
    expect(out[5 * detX + 4]).toBe(39);
    // Detector corner: neighbours (0,1) (1,0) (1,1) → 7, 3, 10 → median 7.
    expect(out[0]).toBe(7);
    // Unflagged pixels are untouched, and the input is not modified.
    expect(out[3 * detX + 3]).toBe(f(3, 3));
    expect(ramp[0]).toBe(0);
  });

  it('throws InputError when every pixel is flagged', () => {
    expect(() => replaceBadPixels(new Float64Array(9), 3, 3, new Uint8Array(9).fill(1))).toThrow(InputError);
  });
});
