import { beforeAll, describe, expect, it } from 'vitest';
import { allocTyped, DTYPES, isFloatDType, type DType, type NumericArray } from '../../src-shared/model/dtype';
import type { CompiledDetector } from '../../src-shared/model/detectors';
import type { ComOptions } from '../../src-shared/compute/tile-kernels-types';
import { comSumsReference, createReferenceComKernel, type ComSums } from '../../src-shared/compute/com';
import { createWasmComKernel, rowRunsOf, type ComTuning } from '../../src-shared/compute/com-wasm';
import { loadWasmModule } from '../../src-main/workers/wasm-loader';
import { mulberry32, RANGES, randomTile, binary, weighted, absTile, expectAll } from '../helpers/synthetic';

// The WebAssembly centre-of-mass kernel must reproduce its TypeScript twin — exactly for
// integer data without weights, to 1e-12 of the sums of |contributions| otherwise — and the
// twin is held to NumPy and to analytic centres in test/reference/com-numpy.test.ts. Where the
// answer is known in closed form (constant tiles, known non-finite positions) it is checked directly.

let wasmModule: WebAssembly.Module;
beforeAll(() => {
  wasmModule = loadWasmModule('com');
});

const MODES: { name: string; tuning: ComTuning }[] = [
  { name: 'runs', tuning: { sparseFill: 2 } },
  { name: 'dense', tuning: { sparseFill: 0 } },
  { name: "kernel's choice", tuning: {} },
];

function masks(detY: number, detX: number, seed: number): (CompiledDetector | null)[] {
  const rand = mulberry32(seed);
  const cx = detX / 2 - 0.3, cy = detY / 2 + 0.2, r = Math.min(detX, detY) / 2;
  const inRing = (x: number, y: number, r0: number, r1: number) => {
    const d2 = (x - cx) ** 2 + (y - cy) ** 2;
    return d2 >= r0 * r0 && d2 <= r1 * r1;
  };
  return [
    null,
    binary(detY, detX, (x, y) => inRing(x, y, 0, 0.25 * r), 'small disk'),
    binary(detY, detX, (x, y) => inRing(x, y, 0.3 * r, 0.95 * r), 'annulus'),
    binary(detY, detX, () => rand() < 0.3, 'scattered 30 %'),
    binary(detY, detX, (x, y) => x === 0 && y === detY - 1, 'one pixel'),
    binary(detY, detX, () => false, 'nothing'),
    weighted(detY, detX, () => (rand() < 0.4 ? 0 : rand()), 'random weights'),
    weighted(detY, detX, (x, y) => (inRing(x, y, 0, 0.3 * r) ? 0.5 : 0), 'weighted disk'),
  ];
}

function runWasm(dtype: DType, tile: NumericArray, nPatterns: number, detY: number, detX: number, options: ComOptions, tuning: ComTuning): ComSums {
  const kernel = createWasmComKernel(wasmModule, 1024, tuning);
  kernel.setOptions(options, detY, detX);
  kernel.tileBuffer(dtype, tile.length).set(tile as never);
  return kernel.run(dtype, nPatterns);
}

const SUMS = ['total', 'sumX', 'sumY'] as const;

describe('WebAssembly centre-of-mass sums equal the TypeScript twin', () => {
  for (const dtype of DTYPES) {
    it(`${dtype}: 37×41 detector, every kind of mask, with and without a threshold`, () => {
      const detY = 37, detX = 41, nPatterns = 6;
      const tile = randomTile(dtype, nPatterns * detY * detX, 31 + DTYPES.indexOf(dtype));
      const [lo, hi] = RANGES[dtype];
      const thresholds = [0, lo + 0.37 * (hi - lo) + 0.5];
      for (const mask of masks(detY, detX, 4)) {
        for (const threshold of thresholds) {
          const options = { mask, threshold };
          const want = comSumsReference(tile, nPatterns, detY, detX, options);
          const scale = comSumsReference(absTile(tile), nPatterns, detY, detX, { mask, threshold: 0 });
          const exact = !isFloatDType(dtype) && mask?.mode !== 'weights';
          for (const mode of MODES) {
            const got = runWasm(dtype, tile, nPatterns, detY, detX, options, mode.tuning);
            const name = `${dtype}, ${mask?.label ?? 'no mask'}, threshold ${threshold}, ${mode.name}`;
            expect(got.nonFinite, `${name}: non-finite count`).toBe(want.nonFinite);
            for (const key of SUMS) {
              expectAll(`${name}: ${key}`, got[key], want[key], (a, b, i) => (exact ? a === b : Math.abs(a - b) <= 1e-12 * scale[key][i]));
            }
          }
        }
      }
    });
  }

  it('the twin kernel and the fast one agree as long-lived objects', () => {
    const reference = createReferenceComKernel();
    const fast = createWasmComKernel(wasmModule, 0);
    const steps: [DType, number, number, number][] = [['uint16', 9, 8, 2], ['uint8', 64, 70, 5], ['float32', 33, 17, 4], ['uint16', 130, 128, 3]];
    steps.forEach(([dtype, detY, detX, nPatterns], k) => {
      const tile = randomTile(dtype, nPatterns * detY * detX, 70 + k);
      const options = { mask: masks(detY, detX, k)[2], threshold: 0 };
      for (const kernel of [reference, fast]) {
        kernel.setOptions(options, detY, detX);
        kernel.tileBuffer(dtype, tile.length).set(tile as never);
      }
      const want = reference.run(dtype, nPatterns);
      const got = fast.run(dtype, nPatterns);
      const scale = comSumsReference(absTile(tile), nPatterns, detY, detX, options);
      for (const key of SUMS) expectAll(`step ${k} ${key}`, got[key], want[key], (a, b, i) => Math.abs(a - b) <= 1e-12 * scale[key][i]);
    });
  });
});

describe('WebAssembly centre-of-mass sums: known answers', () => {
  /** Σ of 0 … n−1. */
  const triangle = (n: number) => (n * (n - 1)) / 2;

  // Rows wider than the 2048 pixels of one exact i32 chunk, odd widths, and patterns larger than
  // 65537 pixels, every value at the type's extreme: the lanes must be emptied in time.
  const shapes: [number, number][] = [[5, 3001], [300, 300], [3, 7]];
  for (const dtype of DTYPES.filter((d) => !isFloatDType(d))) {
    for (const extreme of [RANGES[dtype][1], RANGES[dtype][0]].filter((v) => v !== 0)) {
      it(`${dtype}: every pixel ${extreme}`, () => {
        for (const [detY, detX] of shapes) {
          const nPatterns = 2;
          const tile = allocTyped(dtype, nPatterns * detY * detX).fill(extreme);
          for (const mode of MODES) {
            for (const mask of [null, binary(detY, detX, () => true, 'everything')]) {
              const got = runWasm(dtype, tile, nPatterns, detY, detX, { mask, threshold: 0 }, mode.tuning);
              // reference: analytic — a constant v gives v·N, v·detY·Σx and v·detX·Σy; exact below
              // 2^53; above it (32-bit values on large detectors) float64 sums of exact row sums
              const name = `${dtype} ${detY}×${detX} ${mode.name} ${mask ? 'masked' : 'unmasked'}`;
              const same = (a: number, b: number) => a === b || (Math.abs(b) > 2 ** 53 && Math.abs(a - b) <= 1e-14 * Math.abs(b));
              expectAll(`${name} total`, got.total, [extreme * detY * detX, extreme * detY * detX], same);
              expectAll(`${name} sumX`, got.sumX, [extreme * detY * triangle(detX), extreme * detY * triangle(detX)], same);
              expectAll(`${name} sumY`, got.sumY, [extreme * detX * triangle(detY), extreme * detX * triangle(detY)], same);
            }
          }
        }
      });
    }
  }

  for (const dtype of ['float32', 'float64'] as const) {
    it(`${dtype}: NaN and ±Infinity are left out and counted where the mask reads`, () => {
      const detY = 21, detX = 27, nPix = detY * detX, nPatterns = 4, value = 3;
      const tile = allocTyped(dtype, nPatterns * nPix).fill(value);
      const rand = mulberry32(8);
      for (let k = 0; k < 150; k++) tile[Math.floor(rand() * tile.length)] = [NaN, Infinity, -Infinity][k % 3];
      const supports: [CompiledDetector | null, (i: number) => number][] = [
        [null, () => 1],
        [binary(detY, detX, (x, y) => (x - 13) ** 2 + (y - 10) ** 2 <= 36, 'disk'), (i) => ((i % detX - 13) ** 2 + (Math.floor(i / detX) - 10) ** 2 <= 36 ? 1 : 0)],
        [weighted(detY, detX, (x) => (x < 9 ? 0.25 : 0), 'left band'), (i) => (i % detX < 9 ? 0.25 : 0)],
      ];
      for (const [mask, weightOf] of supports) {
        // reference: analytic — every finite pixel holds `value`; the non-finite ones sit where we put them
        const want = { total: [] as number[], sumX: [] as number[], sumY: [] as number[], nonFinite: 0 };
        for (let p = 0; p < nPatterns; p++) {
          let t = 0, sx = 0, sy = 0;
          for (let i = 0; i < nPix; i++) {
            const w = weightOf(i);
            if (w === 0) continue;
            if (!Number.isFinite(tile[p * nPix + i])) { want.nonFinite++; continue; }
            t += w * value; sx += w * value * (i % detX); sy += w * value * Math.floor(i / detX);
          }
          want.total.push(t); want.sumX.push(sx); want.sumY.push(sy);
        }
        for (const mode of MODES) {
          const got = runWasm(dtype, tile, nPatterns, detY, detX, { mask, threshold: 0 }, mode.tuning);
          const name = `${dtype} ${mask?.label ?? 'no mask'} ${mode.name}`;
          expect(got.nonFinite, name).toBe(want.nonFinite);
          for (const key of SUMS) expectAll(`${name} ${key}`, got[key], want[key], (a, b) => Math.abs(a - b) <= 1e-12 * Math.abs(b));
        }
      }
    });
  }

  it('thresholds: fractional ones on integers, ones above the type, negative ones on signed data', () => {
    const detY = 4, detX = 6, nPix = detY * detX;
    // Pattern values 0, 1, …, 23 (x + 6y), and the same negated.
    const cases: [DType, number[], number, number][] = [
      ['uint8', Array.from({ length: nPix }, (_, i) => i), 10.2, 11],
      ['uint16', Array.from({ length: nPix }, (_, i) => i * 1000), 22999.5, 23000],
      ['uint8', Array.from({ length: nPix }, (_, i) => i), 300, Infinity],
      ['uint32', Array.from({ length: nPix }, (_, i) => i * 1.8e8), 3.05e9, 17 * 1.8e8],
      ['int16', Array.from({ length: nPix }, (_, i) => -i), -5.5, -5],
      ['float32', Array.from({ length: nPix }, (_, i) => i / 4), 2.6, 2.75],
    ];
    for (const [dtype, values, threshold, least] of cases) {
      const tile = allocTyped(dtype, nPix);
      values.forEach((v, i) => { tile[i] = v; });
      // reference: analytic — values below the threshold count as zero, i.e. only v ≥ least remain
      let t = 0, sx = 0, sy = 0;
      values.forEach((v, i) => { if (v >= least) { t += v; sx += v * (i % detX); sy += v * Math.floor(i / detX); } });
      for (const mode of MODES) {
        for (const mask of [null, binary(detY, detX, () => true, 'everything')]) {
          const got = runWasm(dtype, tile, 1, detY, detX, { mask, threshold }, mode.tuning);
          const name = `${dtype} threshold ${threshold} ${mode.name}`;
          expect([got.total[0], got.sumX[0], got.sumY[0]], name).toEqual([t, sx, sy]);
        }
      }
    }
  });

  it('masks become runs within rows', () => {
    // reference: analytic — consecutive pixels of one row collapse into (first, length, column, row)
    expect(Array.from(rowRunsOf([1, 2, 3, 4, 5, 9], 4))).toEqual([1, 3, 1, 0, 4, 2, 0, 1, 9, 1, 1, 2]);
  });

  it('rejects options that do not fit', () => {
    const kernel = createWasmComKernel(wasmModule, 0);
    const mask = binary(5, 6, () => true, 'everything');
    expect(() => kernel.setOptions({ mask, threshold: 0 }, 5, 7)).toThrow(/5×6 detector, expected 5×7/);
    expect(() => kernel.setOptions({ mask: null, threshold: NaN }, 5, 7)).toThrow(/threshold/);
    expect(() => kernel.run('uint16', 1)).toThrow(/setOptions/);
    kernel.setOptions({ mask, threshold: 0 }, 5, 6);
    kernel.tileBuffer('uint16', 30);
    expect(() => kernel.run('uint16', 2)).toThrow(/needs 60 elements/);
  });
});
