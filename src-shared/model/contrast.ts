// How a view turns values into a position on its colour map: limits (automatic from percentiles
// of the finite values, or the user's), then linear, log or gamma scaling. The same function
// runs in the fragment shader (src-renderer/views/image-layer.ts), in exported figures and in tests, so all of them agree on every pixel.
import { selectKth } from '../compute/select';

export type Scaling = { kind: 'linear' } | { kind: 'log' } | { kind: 'gamma'; gamma: number };

export interface Contrast {
  lo: number;
  hi: number;
  scaling: Scaling;
}

/** The colour-map entry (of 256) for a position t in [0, 1]: the nearest, as the shader takes it (floor(t·255 + 0.5)). */
export function lutIndex(t: number): number {
  return Math.round(t * 255);
}

/** The grey (0–255) drawn where a value is missing (not finite), as the shader draws it (0.5). */
export const MISSING_GREY = 128;

/**
 * The p-th and (100 − p)-th percentiles of the finite values (nearest rank), or [0, 1] when there
 * are none. Found by selection, not by sorting: the limits follow a dragged detector's image.
 */
export function percentileLimits(values: ArrayLike<number>, p = 0.5): [number, number] {
  const finite = new Float64Array(values.length);
  let n = 0;
  for (let i = 0; i < values.length; i++) if (Number.isFinite(values[i])) finite[n++] = values[i];
  if (!n) return [0, 1];
  const a = finite.subarray(0, n);
  const rank = (q: number) => Math.min(n - 1, Math.max(0, Math.round((q / 100) * (n - 1))));
  let lo = selectKth(a, rank(p));
  let hi = selectKth(a, rank(100 - p));
  if (!(hi > lo)) {
    let min = Infinity, max = -Infinity;
    for (let i = 0; i < n; i++) { if (a[i] < min) min = a[i]; if (a[i] > max) max = a[i]; }
    lo = min; hi = max;
  }
  if (!(hi > lo)) hi = lo + 1;
  return [lo, hi];
}

/**
 * A direction image's colour: the cyclic map's entry at the direction (radians, −π…π, as a
 * fraction of a turn from −π) times the brightness, the length over the upper limit (clamped).
 */
export function wheelColour(direction: number, length: number, hi: number, lut: Uint8Array): [number, number, number] {
  const turn = Math.min(1, Math.max(0, (direction + Math.PI) / (2 * Math.PI)));
  const i = Math.round(turn * 255);
  const b = Math.min(1, Math.max(0, length / Math.max(hi, 1e-30)));
  return [lut[4 * i] * b, lut[4 * i + 1] * b, lut[4 * i + 2] * b];
}

/** Position on the colour map, 0…1 (clamped), of a value; NaN for a non-finite value. */
export function mapValue(v: number, c: Contrast): number {
  if (!Number.isFinite(v)) return NaN;
  let t: number;
  if (c.scaling.kind === 'log') {
    // log(1 + v − lo) over log(1 + hi − lo): defined for every value at or above lo.
    const span = Math.max(c.hi - c.lo, 1e-30);
    t = Math.log1p(Math.max(v - c.lo, 0)) / Math.log1p(span);
  } else {
    t = (v - c.lo) / Math.max(c.hi - c.lo, 1e-30);
    t = Math.min(1, Math.max(0, t));
    if (c.scaling.kind === 'gamma') t = Math.pow(t, c.scaling.gamma);
  }
  return Math.min(1, Math.max(0, t));
}
