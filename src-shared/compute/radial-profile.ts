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
  const contrast = diskContrast(pattern, detY, detX, diskR, exclude);
  const rMax = Math.ceil(Math.hypot(Math.max(cx, detX - 1 - cx), Math.max(cy, detY - 1 - cy))) + 1;
  const rings: number[][] = Array.from({ length: rMax + 1 }, () => []);
  for (let y = 0; y < detY; y++) {
    for (let x = 0; x < detX; x++) {
      const i = y * detX + x;
      if (exclude && exclude[i]) continue;
      rings[Math.round(Math.hypot(x - cx, y - cy))].push(contrast[i]);
    }
  }
  const profile = new Float64Array(rMax + 1);
  const count = new Uint32Array(rMax + 1);
  rings.forEach((values, k) => {
    count[k] = values.length;
    if (values.length === 0) { profile[k] = Number.NaN; return; }
    values.sort((a, b) => a - b);
    profile[k] = values[Math.min(values.length - 1, Math.floor(0.95 * values.length))];
  });
  const rMaxInside = Math.floor(Math.min(cx, cy, detX - 1 - cx, detY - 1 - cy));
  // Each ring's radius to a fraction of a pixel: the median distance of its disks' centres —
  // local maxima of the contrast within 3 px of the ring that reach half its level, each placed
  // by the centroid of the disk above its surroundings.
  return peaksOfProfile(profile, count, 2.6 * diskR + 1, rMaxInside).map((c) => {
    const level = 0.5 * profile[Math.round(c.radius)];
    const distances: number[] = [];
    for (let y = 1; y < detY - 1; y++) {
      for (let x = 1; x < detX - 1; x++) {
        const i = y * detX + x;
        const v = contrast[i];
        if (!(v >= level) || (exclude && exclude[i]) || Math.abs(Math.hypot(x - cx, y - cy) - c.radius) > 3) continue;
        let isMax = true;
        for (let dy = -1; dy <= 1 && isMax; dy++) for (let dx = -1; dx <= 1; dx++) if ((dy || dx) && contrast[i + dy * detX + dx] > v) { isMax = false; break; }
        if (!isMax) continue;
        const centre = diskCentroid(pattern, detY, detX, x, y, diskR, exclude);
        distances.push(Math.hypot(centre.x - cx, centre.y - cy));
      }
    }
    if (distances.length === 0) return c;
    distances.sort((p, q) => p - q);
    const mid = distances.length >> 1;
    return { ...c, radius: distances.length % 2 ? distances[mid] : 0.5 * (distances[mid - 1] + distances[mid]) };
  });
}

/** The strongest ring beyond `rMin` (see ringCandidates). */
export function strongestRing(pattern: ArrayLike<number>, detY: number, detX: number, cx: number, cy: number,
  rMin: number, exclude?: Uint8Array): { radius: number; prominence: number } {
  const rings = ringCandidates(pattern, detY, detX, cx, cy, rMin, exclude);
  if (rings.length === 0) throw new InputError(`no ring found beyond ${rMin.toFixed(1)} px from the centre; give the Bragg disk distance by hand`);
  return { radius: rings[0].radius, prominence: rings[0].prominence };
}

/**
 * Centre of a disk of radius r near (x0, y0): the centroid of the pattern above the mean of the
 * ring r + 0.5 … 1.6 r + 0.5 around it, over the pixels within r, taken about the last estimate
 * three times so a start a pixel off converges.
 */
function diskCentroid(pattern: ArrayLike<number>, detY: number, detX: number, x0: number, y0: number, r: number, exclude?: Uint8Array): { x: number; y: number } {
  let x = x0, y = y0;
  const outerR = 1.6 * r + 0.5;
  for (let iter = 0; iter < 3; iter++) {
    // Background: a plane a + b·dx + c·dy fitted to the ring around the disk (a halo's slope
    // would otherwise pull the centroid towards the brighter side).
    const m = new Float64Array(9), rhs = new Float64Array(3);
    const pts: [number, number, number][] = [];
    for (let yy = Math.max(0, Math.floor(y - outerR)); yy <= Math.min(detY - 1, Math.ceil(y + outerR)); yy++) {
      for (let xx = Math.max(0, Math.floor(x - outerR)); xx <= Math.min(detX - 1, Math.ceil(x + outerR)); xx++) {
        const i = yy * detX + xx;
        const v = pattern[i];
        if ((exclude && exclude[i]) || !Number.isFinite(v)) continue;
        const dx = xx - x, dy = yy - y, d = Math.hypot(dx, dy);
        if (d <= r) pts.push([xx, yy, v]);
        else if (d > r + 0.5 && d <= outerR) {
          const f = [1, dx, dy];
          for (let a = 0; a < 3; a++) { rhs[a] += f[a] * v; for (let b = 0; b < 3; b++) m[a * 3 + b] += f[a] * f[b]; }
        }
      }
    }
    const plane = solve3(m, rhs) ?? [m[0] > 0 ? rhs[0] / m[0] : 0, 0, 0];
    let sw = 0, sx = 0, sy = 0;
    for (const [xx, yy, v] of pts) {
      const w = v - (plane[0] + plane[1] * (xx - x) + plane[2] * (yy - y));
      if (w <= 0) continue;
      sw += w; sx += w * xx; sy += w * yy;
    }
    if (sw <= 0) break;
    x = sx / sw;
    y = sy / sw;
  }
  return { x, y };
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
