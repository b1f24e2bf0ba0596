// Seeded synthetic data shared by the tests: a PRNG, Poisson deviates, random tiles over each
// type's range, detectors built from predicates, and element-wise comparison helpers.
import { expect } from 'vitest';
import { allocTyped, isFloatDType, type DType, type NumericArray } from '../../src-shared/model/dtype';
import type { CompiledDetector } from '../../src-shared/model/detectors';

/** mulberry32: a small seeded PRNG giving uniform values in [0, 1). */
export function mulberry32(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/** Poisson deviate by Knuth's product of uniforms, in chunks of λ ≤ 30 so e^−λ stays representable. */
export function poisson(rand: () => number, lambda: number): number {
  let total = 0;
  for (let left = lambda; left > 0; left -= 30) {
    const limit = Math.exp(-Math.min(left, 30));
    let p = rand();
    while (p > limit) { total++; p *= rand(); }
  }
  return total;
}

/** The value range random tiles are drawn from: the whole range of integer types, a wide span for floats. */
export const RANGES: Record<DType, [number, number]> = {
  uint8: [0, 255], uint16: [0, 65535], uint32: [0, 4294967295],
  int8: [-128, 127], int16: [-32768, 32767], int32: [-2147483648, 2147483647],
  float32: [-1000, 1000], float64: [-1e6, 1e6],
};

/**
 * Random values over the type's whole range; float data also get NaN, +Inf and −Inf sprinkled in
 * (about 3 %), and `nonFinite` counts them.
 */
export function randomTileCounted(dtype: DType, n: number, seed: number): { tile: NumericArray; nonFinite: number } {
  const rand = mulberry32(seed);
  const tile = allocTyped(dtype, n);
  const [lo, hi] = RANGES[dtype];
  let nonFinite = 0;
  for (let i = 0; i < n; i++) {
    if (isFloatDType(dtype)) {
      const u = rand();
      if (u < 0.03) { tile[i] = [NaN, Infinity, -Infinity][i % 3]; nonFinite++; continue; }
      tile[i] = lo + (hi - lo) * rand();
    } else {
      tile[i] = Math.min(hi, lo + Math.floor((hi - lo + 1) * rand()));
    }
  }
  return { tile, nonFinite };
}

/** Random values over the type's whole range; float data also get NaN, +Inf and −Inf. */
export function randomTile(dtype: DType, n: number, seed: number): NumericArray {
  return randomTileCounted(dtype, n, seed).tile;
}

/** A binary detector (sorted pixel indices) of the pixels where `inside` holds. */
export function binary(detY: number, detX: number, inside: (x: number, y: number) => boolean, label: string): CompiledDetector {
  const indices: number[] = [];
  for (let y = 0; y < detY; y++) for (let x = 0; x < detX; x++) if (inside(x, y)) indices.push(y * detX + x);
  return { mode: 'indices', indices: Uint32Array.from(indices), detY, detX, label };
}

/** A weighted detector with weight `w(x, y)` at each pixel. */
export function weighted(detY: number, detX: number, w: (x: number, y: number) => number, label: string): CompiledDetector {
  const weights = new Float64Array(detY * detX);
  for (let y = 0; y < detY; y++) for (let x = 0; x < detX; x++) weights[y * detX + x] = w(x, y);
  return { mode: 'weights', weights, detY, detX, label };
}

/** |tile| as float64, non-finite values kept as they are: the scale for tolerances on sums. */
export function absTile(tile: NumericArray): Float64Array {
  return Float64Array.from(tile, (v) => (Number.isFinite(v) ? Math.abs(v) : v));
}

/** Index of the first element where `ok` fails, or −1 (−2: lengths differ). */
export function firstMismatch(a: ArrayLike<number>, b: ArrayLike<number>, ok: (x: number, y: number, i: number) => boolean): number {
  if (a.length !== b.length) return -2;
  for (let i = 0; i < a.length; i++) if (!ok(a[i], b[i], i)) return i;
  return -1;
}

/** Expect `ok` to hold at every element, naming the first that fails. */
export function expectAll(name: string, got: ArrayLike<number>, want: ArrayLike<number>, ok: (x: number, y: number, i: number) => boolean) {
  const i = firstMismatch(got, want, ok);
  const detail = i === -2 ? `length ${got.length} vs ${want.length}` : `at ${i}: ${got[i]} vs ${want[i]}`;
  expect(i, `${name} differs ${detail}`).toBe(-1);
}
