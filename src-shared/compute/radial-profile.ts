import { InputError } from '../model/errors';

/**
 * Azimuthal average of a pattern about (cx, cy) in 1-px-wide rings (ring k holds pixels whose
 * centre lies at k − 0.5 < distance ≤ k + 0.5), leaving out flagged pixels.
 */
export function radialProfile(pattern: ArrayLike<number>, detY: number, detX: number, cx: number, cy: number,
  exclude?: Uint8Array): { mean: Float64Array; count: Uint32Array } {
  const rMax = Math.ceil(Math.hypot(Math.max(cx, detX - 1 - cx), Math.max(cy, detY - 1 - cy))) + 1;
  const sum = new Float64Array(rMax + 1);
  const count = new Uint32Array(rMax + 1);
  for (let y = 0; y < detY; y++) {
    for (let x = 0; x < detX; x++) {
      const i = y * detX + x;
      if (exclude && exclude[i]) continue;
      const v = pattern[i];
      if (!Number.isFinite(v)) continue;
      const k = Math.round(Math.hypot(x - cx, y - cy));
      sum[k] += v;
      count[k]++;
    }
  }
  const mean = new Float64Array(rMax + 1);
  for (let k = 0; k <= rMax; k++) mean[k] = count[k] ? sum[k] / count[k] : NaN;
  return { mean, count };
}

export interface RingCandidate {
  /** Distance from the centre, px (sub-pixel: a parabola through the top three rings). */
  radius: number;
  /** Excess of the ring over the straight line between its neighbouring minima. */
  prominence: number;
  /** prominence / the strongest ring's prominence. */
  strength: number;
}

/** A ring this weak beside the strongest is not counted as a candidate. */
export const RING_STRENGTH_FLOOR = 0.15;

/**
 * Rings of the azimuthal average beyond `rMin`, strongest first: the Bragg rings of a
 * polycrystal or the nearest Bragg disks. A ring's excess over a straight-line background
 * between its neighbouring minima is what counts, so a falling diffuse halo does not win.
 * Only rings of at least RING_STRENGTH_FLOOR of the strongest are returned.
 */
export function ringCandidates(pattern: ArrayLike<number>, detY: number, detX: number, cx: number, cy: number,
  rMin: number, exclude?: Uint8Array): RingCandidate[] {
  const { mean, count } = radialProfile(pattern, detY, detX, cx, cy, exclude);
  return peaksOfProfile(mean, count, rMin, Math.floor(Math.min(cx, cy, detX - 1 - cx, detY - 1 - cy)));
}

/** Peaks of a radial profile between rMin and rMax, strongest first (see ringCandidates). */
function peaksOfProfile(profile: Float64Array, count: Uint32Array, rMin: number, rMaxInside: number): RingCandidate[] {
  const mean = profile;
  const found: { k: number; prominence: number }[] = [];
  for (let k = Math.max(1, Math.ceil(rMin)); k < Math.min(rMaxInside, mean.length - 1); k++) {
    if (!(count[k] > 0) || !(mean[k] >= mean[k - 1]) || !(mean[k] >= mean[k + 1])) continue;
    // Walk down to the minima on either side.
    let lo = k; while (lo > rMin && mean[lo - 1] <= mean[lo]) lo--;
    let hi = k; while (hi < rMaxInside && mean[hi + 1] <= mean[hi]) hi++;
    const base = hi === lo ? mean[lo] : mean[lo] + ((mean[hi] - mean[lo]) * (k - lo)) / (hi - lo);
    const prominence = mean[k] - base;
    if (prominence > 0) found.push({ k, prominence });
  }
  if (found.length === 0) return [];
  const top = Math.max(...found.map((f) => f.prominence));
  return found
    .filter((f) => f.prominence >= RING_STRENGTH_FLOOR * top)
    .sort((a, b) => b.prominence - a.prominence)
    .map(({ k, prominence }) => {
      const a = mean[k - 1], b = mean[k], c = mean[k + 1];
      const denom = a - 2 * b + c;
      const shift = denom !== 0 ? Math.max(-0.5, Math.min(0.5, (0.5 * (a - c)) / denom)) : 0;
      return { radius: k + shift, prominence, strength: prominence / top };
    });
}

/**
 * How much brighter than its surroundings a disk of the probe's size centred on each pixel is:
 * the mean inside radius r minus the mean of the ring r + 0.5 … 1.6 r + 0.5 around it (pixels
 * off the detector or flagged are left out of both). A Bragg disk has the bright-field disk's
 * size, so this peaks at Bragg disk centres, while a broad halo or a smooth background, whose
 * level inside and around a disk is about the same, gives little.
 */
export function diskContrast(pattern: ArrayLike<number>, detY: number, detX: number, r: number, exclude?: Uint8Array): Float64Array {
  if (!(r > 0)) throw new RangeError(`disk contrast: radius must be > 0 px, got ${r}`);
  const outerR = 1.6 * r + 0.5;
  const reach = Math.ceil(outerR);
  const offsets: { dy: number; dx: number; inner: boolean }[] = [];
  for (let dy = -reach; dy <= reach; dy++) {
    for (let dx = -reach; dx <= reach; dx++) {
      const d = Math.hypot(dx, dy);
      if (d <= r) offsets.push({ dy, dx, inner: true });
      else if (d > r + 0.5 && d <= outerR) offsets.push({ dy, dx, inner: false });
    }
  }
  const out = new Float64Array(detY * detX);
  for (let y = 0; y < detY; y++) {
    for (let x = 0; x < detX; x++) {
      let si = 0, ni = 0, so = 0, no = 0;
      for (const o of offsets) {
        const yy = y + o.dy, xx = x + o.dx;
        if (yy < 0 || yy >= detY || xx < 0 || xx >= detX) continue;
        const i = yy * detX + xx;
        const v = pattern[i];
        if ((exclude && exclude[i]) || !Number.isFinite(v)) continue;
        if (o.inner) { si += v; ni++; } else { so += v; no++; }
      }
      out[y * detX + x] = ni > 0 && no > 0 ? si / ni - so / no : 0;
    }
  }
  return out;
}

/**
 * Rings on which Bragg disks of radius `diskR` sit, about (cx, cy), strongest first: peaks of
 * the radial profile of diskContrast, taking in each 1-px ring its 95th percentile (a few disks
 * of a textured film fill little of their ring, so its mean would drown them). Searched from
 * just outside the bright-field disk's own response (2.6 × diskR + 1) to the detector's edge.
 */
export function braggRingCandidates(pattern: ArrayLike<number>, detY: number, detX: number, cx: number, cy: number,
  diskR: number, exclude?: Uint8Array): RingCandidate[] {
  // The contrast costs (detector pixels) × (disk area): for large disks it is taken on a binned
  // copy whose disks are at most MAX_BINNED_DISK_R px across, and only the disk centroids, which
  // set the radii, use the full pattern.
  const b = diskR > MAX_BINNED_DISK_R ? Math.ceil(diskR / MAX_BINNED_DISK_R) : 1;
  const binned = b > 1 ? binPattern(pattern, detY, detX, b, exclude) : { pattern, detY, detX, exclude };
  const [bY, bX] = [binned.detY, binned.detX];
  const bcx = (cx - (b - 1) / 2) / b, bcy = (cy - (b - 1) / 2) / b;
  const contrast = diskContrast(binned.pattern, bY, bX, diskR / b, binned.exclude);
  const rMax = Math.ceil(Math.hypot(Math.max(bcx, bX - 1 - bcx), Math.max(bcy, bY - 1 - bcy))) + 1;
  const rings: number[][] = Array.from({ length: rMax + 1 }, () => []);
  for (let y = 0; y < bY; y++) {
    for (let x = 0; x < bX; x++) {
      const i = y * bX + x;
      if (binned.exclude && binned.exclude[i]) continue;
      rings[Math.round(Math.hypot(x - bcx, y - bcy))].push(contrast[i]);
    }
  }
  const profile = new Float64Array(rMax + 1);
  const count = new Uint32Array(rMax + 1);
  rings.forEach((values, k) => {
    count[k] = values.length;
    if (values.length === 0) { profile[k] = Number.NaN; return; }
    values.sort((p, q) => p - q);
    profile[k] = values[Math.min(values.length - 1, Math.floor(0.95 * values.length))];
  });
  const rMaxInside = Math.floor(Math.min(bcx, bcy, bX - 1 - bcx, bY - 1 - bcy));
  // Each ring's radius to a fraction of a pixel: the median distance of its disks' centres —
  // local maxima of the contrast within 3 (binned) px of the ring that reach half its level,
  // each placed by the centroid of the disk above its surroundings on the full pattern.
  return peaksOfProfile(profile, count, (2.6 * diskR + 1) / b, rMaxInside).map((cb) => {
    const level = 0.5 * profile[Math.round(cb.radius)];
    const distances: number[] = [];
    for (let y = 1; y < bY - 1; y++) {
      for (let x = 1; x < bX - 1; x++) {
        const i = y * bX + x;
        const v = contrast[i];
        if (!(v >= level) || (binned.exclude && binned.exclude[i]) || Math.abs(Math.hypot(x - bcx, y - bcy) - cb.radius) > 3) continue;
        let isMax = true;
        for (let dy = -1; dy <= 1 && isMax; dy++) for (let dx = -1; dx <= 1; dx++) if ((dy || dx) && contrast[i + dy * bX + dx] > v) { isMax = false; break; }
        if (!isMax) continue;
        const centre = diskCentroid(pattern, detY, detX, x * b + (b - 1) / 2, y * b + (b - 1) / 2, diskR, exclude);
        distances.push(Math.hypot(centre.x - cx, centre.y - cy));
      }
    }
    const c = { ...cb, radius: cb.radius * b };
    if (distances.length === 0) return c;
    distances.sort((p, q) => p - q);
    const mid = distances.length >> 1;
    return { ...c, radius: distances.length % 2 ? distances[mid] : 0.5 * (distances[mid - 1] + distances[mid]) };
  });
}

/** Disks larger than this (px) are searched on a binned copy of the pattern. */
const MAX_BINNED_DISK_R = 12;

/** Sums of b × b pixels (partial at the far edges); a bin is excluded when any of its pixels is. */
function binPattern(pattern: ArrayLike<number>, detY: number, detX: number, b: number, exclude?: Uint8Array) {
  const oy = Math.ceil(detY / b), ox = Math.ceil(detX / b);
  const out = new Float64Array(oy * ox);
  const ex = exclude ? new Uint8Array(oy * ox) : undefined;
  for (let y = 0; y < detY; y++) {
    for (let x = 0; x < detX; x++) {
      const o = Math.floor(y / b) * ox + Math.floor(x / b);
      const i = y * detX + x;
      if (exclude && exclude[i]) { ex![o] = 1; continue; }
      const v = pattern[i];
      if (Number.isFinite(v)) out[o] += v;
    }
  }
  return { pattern: out, detY: oy, detX: ox, exclude: ex };
}

/** The strongest ring beyond `rMin` (see ringCandidates). */
export function strongestRing(pattern: ArrayLike<number>, detY: number, detX: number, cx: number, cy: number,
  rMin: number, exclude?: Uint8Array): { radius: number; prominence: number } {
  const rings = ringCandidates(pattern, detY, detX, cx, cy, rMin, exclude);
  if (rings.length === 0) throw new InputError(`no ring found beyond ${rMin.toFixed(1)} px from the centre; give the Bragg disk distance by hand`);
  return { radius: rings[0].radius, prominence: rings[0].prominence };
}

/**
 * Centre of a disk of radius r near (x0, y0): the centroid of the pixels within 1.3 r that stand
 * above half-way between the disk's top (its 90th percentile) and its surroundings (the median of
 * the ring 1.3 r … 1.6 r + 0.5), re-taken about each estimate until it moves less than 0.005 px
 * (at most 20 times). Thresholding rather than weighting by height keeps a sloping halo under
 * the disk from pulling the centre towards its brighter side.
 */
function diskCentroid(pattern: ArrayLike<number>, detY: number, detX: number, x0: number, y0: number, r: number, exclude?: Uint8Array): { x: number; y: number } {
  let x = x0, y = y0;
  const innerR = 1.3 * r, outerR = 1.6 * r + 0.5;
  for (let iter = 0; iter < 20; iter++) {
    const inside: [number, number, number][] = [];
    const ring: number[] = [];
    for (let yy = Math.max(0, Math.floor(y - outerR)); yy <= Math.min(detY - 1, Math.ceil(y + outerR)); yy++) {
      for (let xx = Math.max(0, Math.floor(x - outerR)); xx <= Math.min(detX - 1, Math.ceil(x + outerR)); xx++) {
        const i = yy * detX + xx;
        const v = pattern[i];
        if ((exclude && exclude[i]) || !Number.isFinite(v)) continue;
        const d = Math.hypot(xx - x, yy - y);
        if (d <= innerR) inside.push([xx, yy, v]);
        else if (d <= outerR) ring.push(v);
      }
    }
    if (inside.length === 0) break;
    const top = quantile(inside.map((p) => p[2]), 0.9);
    const floor = ring.length ? quantile(ring, 0.5) : Math.min(...inside.map((p) => p[2]));
    const level = 0.5 * (top + floor);
    let n = 0, sx = 0, sy = 0;
    for (const [xx, yy, v] of inside) if (v >= level && v > floor) { n++; sx += xx; sy += yy; }
    if (n === 0) break;
    const nx = sx / n, ny = sy / n;
    const moved = Math.hypot(nx - x, ny - y);
    x = nx;
    y = ny;
    if (moved < 0.005) break;
  }
  return { x, y };
}

function quantile(values: number[], q: number): number {
  const s = values.slice().sort((a, b) => a - b);
  return s[Math.min(s.length - 1, Math.floor(q * s.length))];
}

/** Solve the 3×3 system m·v = rhs (row-major) by Cramer's rule; null when it is singular. */
function solve3(m: Float64Array, rhs: Float64Array): number[] | null {
  const det = (a: ArrayLike<number>) => a[0] * (a[4] * a[8] - a[5] * a[7]) - a[1] * (a[3] * a[8] - a[5] * a[6]) + a[2] * (a[3] * a[7] - a[4] * a[6]);
  const d = det(m);
  if (!(Math.abs(d) > 1e-12 * Math.max(1, Math.abs(m[0] * m[4] * m[8])))) return null;
  return [0, 1, 2].map((c) => {
    const k = Float64Array.from(m);
    for (let row = 0; row < 3; row++) k[row * 3 + c] = rhs[row];
    return det(k) / d;
  });
}
