// The views' contrast: percentile limits by selection equal NumPy's nearest-rank percentiles
// (numpy.percentile(..., method='nearest') as the reference, via Debian's python3-numpy), and
// the value-to-colour-map mapping of each scaling.
import { spawnSync } from 'node:child_process';
import { describe, expect, it } from 'vitest';
import { mapValue, percentileLimits } from '../../src-shared/model/contrast';
import { selectKth as select } from '../../src-shared/compute/select';
import { PYTHON } from '../helpers/fixtures';

function lcg(seed: number) {
  let s = seed >>> 0;
  return () => ((s = (Math.imul(s, 1664525) + 1013904223) >>> 0) / 2 ** 32);
}

describe('contrast', () => {
  it('selects the k-th smallest value, for random, sorted, reversed and constant data', () => {
    const r = lcg(7);
    for (const make of [() => r() * 1000, (i: number) => i, (i: number) => -i, () => 3]) {
      const a = Float64Array.from({ length: 1001 }, (_, i) => make(i));
      const sorted = Float64Array.from(a).sort();
      for (const k of [0, 1, 500, 999, 1000]) expect(select(Float64Array.from(a), k)).toBe(sorted[k]);
    }
  });

  it('finds the same 0.5 % and 99.5 % limits as NumPy’s nearest-rank percentiles, ignoring NaN and ±Inf', () => {
    const r = lcg(11);
    const values = Array.from({ length: 5000 }, () => Math.round(Math.exp(r() * 8)));
    const withJunk = [...values, NaN, Infinity, -Infinity];
    const p = spawnSync(PYTHON, ['-c', 'import sys, json, numpy as np; a = np.array(json.load(sys.stdin)); print(json.dumps([float(np.percentile(a, 0.5, method="nearest")), float(np.percentile(a, 99.5, method="nearest"))]))'], { input: JSON.stringify(values), encoding: 'utf8' });
    expect(p.status, p.stderr).toBe(0);
    expect(percentileLimits(withJunk)).toEqual(JSON.parse(p.stdout));
  });

  it('maps linearly, by log and by gamma onto 0…1, clamped; non-finite values to NaN', () => {
    expect(mapValue(5, { lo: 0, hi: 10, scaling: { kind: 'linear' } })).toBe(0.5);
    expect(mapValue(-3, { lo: 0, hi: 10, scaling: { kind: 'linear' } })).toBe(0);
    expect(mapValue(30, { lo: 0, hi: 10, scaling: { kind: 'linear' } })).toBe(1);
    expect(mapValue(Math.E - 1, { lo: 0, hi: Math.E ** 2 - 1, scaling: { kind: 'log' } })).toBeCloseTo(0.5, 12);
    expect(mapValue(2.5, { lo: 0, hi: 10, scaling: { kind: 'gamma', gamma: 2 } })).toBeCloseTo(0.0625, 12);
    expect(Number.isNaN(mapValue(NaN, { lo: 0, hi: 1, scaling: { kind: 'linear' } }))).toBe(true);
  });
});
