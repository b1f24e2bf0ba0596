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

/**
 * Distance (px, sub-pixel) of the strongest ring beyond `rMin` in the azimuthal average: the
 * first Bragg ring of a polycrystal or the nearest Bragg disks. The ring's excess over a
 * straight-line background between its neighbouring minima is what counts, so a falling
 * diffuse halo does not win; the peak is refined by a parabola through the top three rings.
 */
export function strongestRing(pattern: ArrayLike<number>, detY: number, detX: number, cx: number, cy: number,
  rMin: number, exclude?: Uint8Array): { radius: number; prominence: number } {
  const { mean, count } = radialProfile(pattern, detY, detX, cx, cy, exclude);
  const rMaxInside = Math.floor(Math.min(cx, cy, detX - 1 - cx, detY - 1 - cy));
  let best = -1;
  let bestProm = 0;
  for (let k = Math.max(1, Math.ceil(rMin)); k < Math.min(rMaxInside, mean.length - 1); k++) {
    if (!(count[k] > 0) || !(mean[k] >= mean[k - 1]) || !(mean[k] >= mean[k + 1])) continue;
    // Walk down to the minima on either side.
    let lo = k; while (lo > rMin && mean[lo - 1] <= mean[lo]) lo--;
    let hi = k; while (hi < rMaxInside && mean[hi + 1] <= mean[hi]) hi++;
    const base = hi === lo ? mean[lo] : mean[lo] + ((mean[hi] - mean[lo]) * (k - lo)) / (hi - lo);
    const prom = mean[k] - base;
    if (prom > bestProm) { bestProm = prom; best = k; }
  }
  if (best < 0) throw new InputError(`no ring found beyond ${rMin.toFixed(1)} px from the centre; give the Bragg disk distance by hand`);
  const a = mean[best - 1], b = mean[best], c = mean[best + 1];
  const denom = a - 2 * b + c;
  const shift = denom !== 0 ? Math.max(-0.5, Math.min(0.5, (0.5 * (a - c)) / denom)) : 0;
  return { radius: best + shift, prominence: bestProm };
}
