// How a view turns values into a position on its colour map: limits (automatic from percentiles
// of the finite values, or the user's), then linear, log or gamma scaling. The same function
// runs in the fragment shader (image-layer.ts) and in tests, so both agree on every pixel.

export type Scaling = { kind: 'linear' } | { kind: 'log' } | { kind: 'gamma'; gamma: number };

export interface Contrast {
  lo: number;
  hi: number;
  scaling: Scaling;
}

/** The p-th and (100 − p)-th percentiles of the finite values (nearest rank), or [0, 1] when there are none. */
export function percentileLimits(values: ArrayLike<number>, p = 0.5): [number, number] {
  const finite: number[] = [];
  for (let i = 0; i < values.length; i++) if (Number.isFinite(values[i])) finite.push(values[i]);
  if (!finite.length) return [0, 1];
  const sorted = Float64Array.from(finite).sort();
  const at = (q: number) => sorted[Math.min(sorted.length - 1, Math.max(0, Math.round((q / 100) * (sorted.length - 1))))];
  let lo = at(p);
  let hi = at(100 - p);
  if (!(hi > lo)) { lo = sorted[0]; hi = sorted[sorted.length - 1]; }
  if (!(hi > lo)) hi = lo + 1;
  return [lo, hi];
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
