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
  const rMaxInside = Math.floor(Math.min(cx, cy, detX - 1 - cx, detY - 1 - cy));
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

/** The strongest ring beyond `rMin` (see ringCandidates). */
export function strongestRing(pattern: ArrayLike<number>, detY: number, detX: number, cx: number, cy: number,
  rMin: number, exclude?: Uint8Array): { radius: number; prominence: number } {
  const rings = ringCandidates(pattern, detY, detX, cx, cy, rMin, exclude);
  if (rings.length === 0) throw new InputError(`no ring found beyond ${rMin.toFixed(1)} px from the centre; give the Bragg disk distance by hand`);
  return { radius: rings[0].radius, prominence: rings[0].prominence };
}
