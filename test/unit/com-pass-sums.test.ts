// The first pass's COM sums turned into the sums over the detector less the bad pixels:
// watched pixels that turned out good are added back from their kept values.
import { describe, expect, it } from 'vitest';
import { comSumsLessBadPixels } from '../../src-main/engine/com-field';

// Two patterns on a 2×3 detector (x = column, y = row), written out so the sums can be checked by hand.
const detX = 3;
const patterns = [
  [1, 2, 3, 4, 5, 6],
  [0, 7, 0, 2, 0, 9],
];
/** Reference: Σ I, Σ I·x, Σ I·y over the pixels not in `left`, straight from the definition. */
function direct(left: number[]) {
  return patterns.map((p) => {
    let t = 0, sx = 0, sy = 0;
    p.forEach((v, i) => { if (left.includes(i)) return; t += v; sx += v * (i % detX); sy += v * Math.floor(i / detX); });
    return [t, sx, sy];
  });
}
/** What the pass returns when it watched `watch` (left out of its mask, values kept). */
function passSums(watch: number[]) {
  const d = direct(watch);
  return {
    total: Float64Array.from(d.map((r) => r[0])), sumX: Float64Array.from(d.map((r) => r[1])), sumY: Float64Array.from(d.map((r) => r[2])),
    watch: Uint32Array.from(watch), watchValues: Float64Array.from(patterns.flatMap((p) => watch.map((i) => p[i]))), nonFinite: 0,
  };
}
const maskOf = (bad: number[]) => { const m = new Uint8Array(6); for (const i of bad) m[i] = 1; return m; };
const mean = Float64Array.from([0.5, 4.5, 1.5, 3, 2.5, 7.5]);
const max = Float64Array.from([1, 7, 3, 4, 5, 9]);

describe('COM sums from the first pass', () => {
  it('equal the sums without the bad pixels when every bad pixel was watched (good ones added back)', () => {
    const r = comSumsLessBadPixels(passSums([1, 5]), maskOf([5]), mean, max, detX)!;
    const want = direct([5]);
    expect(Array.from(r.total)).toEqual(want.map((w) => w[0]));
    expect(Array.from(r.sumX)).toEqual(want.map((w) => w[1]));
    expect(Array.from(r.sumY)).toEqual(want.map((w) => w[2]));
  });

  it('cannot be used when a bad pixel with counts was not watched', () => {
    expect(comSumsLessBadPixels(passSums([1]), maskOf([1, 5]), mean, max, detX)).toBeNull();
  });

  it('a bad pixel never lit (max and mean 0) or never finite adds nothing, watched or not', () => {
    const darkMax = Float64Array.from(max); darkMax[2] = 0;
    const darkMean = Float64Array.from(mean); darkMean[2] = 0;
    const zeroed = patterns.map((p) => p.map((v, i) => (i === 2 ? 0 : v)));
    const saved = patterns.map((p) => p.slice());
    patterns.splice(0, 2, ...zeroed);
    try {
      const r = comSumsLessBadPixels(passSums([]), maskOf([2]), darkMean, darkMax, detX)!;
      expect(Array.from(r.total)).toEqual(direct([2]).map((w) => w[0]));
      const never = Float64Array.from(max); never[2] = -Infinity;
      expect(comSumsLessBadPixels(passSums([]), maskOf([2]), mean, never, detX)).not.toBeNull();
    } finally {
      patterns.splice(0, 2, ...saved);
    }
  });

  it('a non-finite kept value is counted, not added', () => {
    const s = passSums([4]);
    s.watchValues[1] = Number.NaN;
    const r = comSumsLessBadPixels(s, maskOf([]), mean, max, detX)!;
    expect(r.nonFinite).toBe(1);
    expect(r.total[0]).toBe(direct([])[0][0]);
    expect(r.total[1]).toBe(direct([4])[1][0]);
  });
});
