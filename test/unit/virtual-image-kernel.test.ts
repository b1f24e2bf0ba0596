import { beforeAll, describe, expect, it } from 'vitest';
import { allocTyped, DTYPES, isFloatDType, type DType, type NumericArray } from '../../src-shared/model/dtype';
import type { CompiledDetector } from '../../src-shared/model/detectors';
import { createReferenceVirtualImageKernel, virtualImagesReference } from '../../src-shared/compute/virtual-image';
import { createWasmVirtualImageKernel, runsOf, type VirtualImageTuning } from '../../src-shared/compute/virtual-image-wasm';
import { loadWasmModule } from '../../src-main/workers/wasm-loader';
import { mulberry32, RANGES, randomTile, binary, weighted, absTile, expectAll } from '../helpers/synthetic';

// The WebAssembly kernel must reproduce its TypeScript twin — exactly for binary detectors over
// integer data, to 1e-12 of Σ|w·I| otherwise — and the twin is held to NumPy in
// test/reference/virtual-image-numpy.test.ts. Where the answer is known in closed form
// (constant tiles, known non-finite positions) it is checked directly.

let wasmModule: WebAssembly.Module;
beforeAll(() => {
  wasmModule = loadWasmModule('virtual-image');
});

/** Every way the kernel can sum a detector: over runs of its pixels, by the dense sweep, its own choice. */
const MODES: { name: string; tuning: VirtualImageTuning }[] = [
  { name: 'runs', tuning: { sparseFill: 2 } },
  { name: 'dense', tuning: { sparseFill: 0 } },
  { name: "kernel's choice", tuning: {} },
];

function ring(detY: number, detX: number, cx: number, cy: number, r0: number, r1: number, label: string): CompiledDetector {
  return binary(detY, detX, (x, y) => { const r2 = (x - cx) ** 2 + (y - cy) ** 2; return r2 >= r0 * r0 && r2 <= r1 * r1; }, label);
}

/** Detectors of every kind and fill over a detY × detX pattern. */
function detectorZoo(detY: number, detX: number, seed: number): CompiledDetector[] {
  const rand = mulberry32(seed);
  const cx = detX / 2 - 0.3, cy = detY / 2 + 0.2, r = Math.min(detX, detY) / 2;
  const scattered = new Set<number>();
  while (scattered.size < Math.floor(0.3 * detY * detX)) scattered.add(Math.floor(rand() * detY * detX));
  return [
    ring(detY, detX, cx, cy, 0, 0.2 * r, 'small disk'),
    ring(detY, detX, cx, cy, 0.3 * r, 0.9 * r, 'annulus'),
    binary(detY, detX, () => true, 'everything'),
    binary(detY, detX, (x, y) => x === detX - 1 && y === detY - 1, 'last pixel'),
    binary(detY, detX, () => false, 'nothing'),
    binary(detY, detX, (x, y) => scattered.has(y * detX + x), 'scattered 30 %'),
    ring(detY, detX, cx, cy, 0.9 * r, 2 * r, 'outer rim'),
    weighted(detY, detX, () => (rand() < 0.4 ? 0 : rand()), 'random weights'),
    weighted(detY, detX, (x, y) => ((x - cx) ** 2 + (y - cy) ** 2 <= (0.3 * r) ** 2 ? 0.5 + 0.5 * rand() : 0), 'weighted disk'),
  ];
}

function runWasm(dtype: DType, tile: NumericArray, nPatterns: number, detectors: CompiledDetector[], tuning: VirtualImageTuning) {
  // Deliberately small, so the first tileBuffer grows the memory.
  const kernel = createWasmVirtualImageKernel(wasmModule, 1024, tuning);
  kernel.setDetectors(detectors);
  kernel.tileBuffer(dtype, tile.length).set(tile as never);
  return kernel.run(dtype, nPatterns);
}

/** Non-finite values at pixels some detector reads, counted directly from the tile. */
function nonFiniteInUnion(tile: NumericArray, nPatterns: number, nPix: number, detectors: CompiledDetector[]): number {
  const inUnion = new Uint8Array(nPix);
  for (const d of detectors) {
    if (d.mode === 'indices') d.indices.forEach((i) => { inUnion[i] = 1; });
    else d.weights.forEach((w, i) => { if (w !== 0) inUnion[i] = 1; });
  }
  let n = 0;
  for (let p = 0; p < nPatterns; p++) for (let i = 0; i < nPix; i++) if (inUnion[i] && !Number.isFinite(tile[p * nPix + i])) n++;
  return n;
}

describe('WebAssembly virtual images equal the TypeScript twin', () => {
  for (const dtype of DTYPES) {
    it(`${dtype}: 37×41 detector, binary and weighted detectors of every fill`, () => {
      const detY = 37, detX = 41, nPatterns = 7, nPix = detY * detX;
      const tile = randomTile(dtype, nPatterns * nPix, 11 + DTYPES.indexOf(dtype));
      const detectors = detectorZoo(detY, detX, 5);
      const want = virtualImagesReference(tile, nPatterns, detY, detX, detectors);
      const scale = virtualImagesReference(absTile(tile), nPatterns, detY, detX, detectors).images;
      // reference: the non-finite values placed in the tile, counted at the detectors' union
      expect(want.nonFinite).toBe(nonFiniteInUnion(tile, nPatterns, nPix, detectors));
      for (const mode of MODES) {
        const got = runWasm(dtype, tile, nPatterns, detectors, mode.tuning);
        expect(got.nonFinite, `${mode.name}: non-finite count`).toBe(want.nonFinite);
        expectAll(`${dtype} ${mode.name}`, got.images, want.images, (a, b, i) => {
          const det = detectors[Math.floor(i / nPatterns)];
          if (!isFloatDType(dtype) && det.mode === 'indices') return a === b;
          return Math.abs(a - b) <= 1e-12 * scale[i];
        });
      }
    });
  }

  it('one detector at a time, any number of patterns, matches the twin kernel', () => {
    const detY = 16, detX = 19, nPix = detY * detX;
    const reference = createReferenceVirtualImageKernel();
    const fast = createWasmVirtualImageKernel(wasmModule, 0);
    for (const [k, det] of detectorZoo(detY, detX, 9).entries()) {
      for (const nPatterns of [0, 1, 3]) {
        const tile = randomTile('uint16', nPatterns * nPix, 100 + k);
        reference.setDetectors([det]);
        fast.setDetectors([det]);
        reference.tileBuffer('uint16', tile.length).set(tile);
        fast.tileBuffer('uint16', tile.length).set(tile);
        // Binary detectors exactly; weighted ones to 1e-12 (u16 values and weights are ≥ 0, no cancellation).
        expectAll(`${det.label}, ${nPatterns} patterns`, fast.run('uint16', nPatterns).images, reference.run('uint16', nPatterns).images,
          (a, b) => (det.mode === 'indices' ? a === b : Math.abs(a - b) <= 1e-12 * b));
      }
    }
  });
});

describe('WebAssembly virtual images: known answers', () => {
  // Patterns of 300×300 pixels (more than the 65537 values of 65535 a u32 lane holds), with
  // every pixel at the type's largest or smallest value: lane sums must be flushed to stay exact.
  const detY = 300, detX = 300, nPix = detY * detX;
  const detectors = [
    binary(detY, detX, () => true, 'everything'),
    ring(detY, detX, 150, 150, 40, 140, 'annulus'),
    ring(detY, detX, 150, 150, 0, 30, 'disk'),
    binary(detY, detX, (x) => x % 2 === 0, 'every other column'),
    binary(detY, detX, (x, y) => y < 3, 'three rows'),
  ];
  const count = (d: CompiledDetector) => (d.mode === 'indices' ? d.indices.length : 0);
  for (const dtype of DTYPES.filter((d) => !isFloatDType(d))) {
    for (const extreme of [RANGES[dtype][1], RANGES[dtype][0]]) {
      if (extreme === 0) continue;
      it(`${dtype}: every pixel ${extreme}`, () => {
        const nPatterns = 2;
        const tile = allocTyped(dtype, nPatterns * nPix).fill(extreme);
        for (const mode of MODES) {
          const got = runWasm(dtype, tile, nPatterns, detectors, mode.tuning);
          // reference: analytic — a constant tile sums to value × number of pixels (exact below 2^53)
          const want = detectors.flatMap((d) => [extreme * count(d), extreme * count(d)]);
          expectAll(`${dtype} ${mode.name}`, got.images, want, (a, b) => a === b);
        }
      });
    }
  }

  for (const dtype of ['float32', 'float64'] as const) {
    it(`${dtype}: NaN and ±Infinity are left out and counted once per pixel of the union`, () => {
      const dY = 23, dX = 29, n = dY * dX, nPatterns = 5;
      const value = 2.5;
      const tile = allocTyped(dtype, nPatterns * n).fill(value);
      const rand = mulberry32(3);
      for (let k = 0; k < 200; k++) tile[Math.floor(rand() * tile.length)] = [NaN, Infinity, -Infinity][k % 3];
      const dets = [
        ring(dY, dX, 14, 11, 0, 6, 'disk'),
        ring(dY, dX, 14, 11, 3, 9, 'overlapping annulus'),
        weighted(dY, dX, (x) => (x < 10 ? 0.25 : 0), 'left band'),
      ];
      for (const mode of MODES) {
        const got = runWasm(dtype, tile, nPatterns, dets, mode.tuning);
        // reference: analytic — the tile's non-finite values sit where we put them
        expect(got.nonFinite, mode.name).toBe(nonFiniteInUnion(tile, nPatterns, n, dets));
        // reference: analytic — the finite pixels all hold `value`
        const want = dets.flatMap((d) => Array.from({ length: nPatterns }, (_, p) => {
          let s = 0;
          if (d.mode === 'indices') d.indices.forEach((i) => { if (Number.isFinite(tile[p * n + i])) s += value; });
          else d.weights.forEach((w, i) => { if (w !== 0 && Number.isFinite(tile[p * n + i])) s += w * value; });
          return s;
        }));
        expectAll(`${dtype} ${mode.name}`, got.images, want, (a, b) => Math.abs(a - b) <= 1e-12 * Math.abs(b));
      }
    });
  }

  it('a detector covering whole rows is one run, split where the kernel needs it', () => {
    // reference: analytic — consecutive indices collapse to runs of at most 32768 pixels
    const indices = Uint32Array.from({ length: 70000 }, (_, i) => i + 5);
    expect(Array.from(runsOf(indices))).toEqual([5, 32768, 32773, 32768, 65541, 70000 - 65536]);
    expect(Array.from(runsOf(Uint32Array.from([1, 2, 3, 7, 9, 10])))).toEqual([1, 3, 7, 1, 9, 2]);
  });
});

describe('WebAssembly virtual images: the kernel as a long-lived object', () => {
  it('keeps answering while the tile grows and detectors, geometry and dtype change', () => {
    const reference = createReferenceVirtualImageKernel();
    const fast = createWasmVirtualImageKernel(wasmModule, 4096);
    const steps: [DType, number, number, number][] = [['uint16', 8, 9, 2], ['float32', 40, 37, 6], ['uint8', 64, 64, 20], ['uint16', 40, 37, 3]];
    steps.forEach(([dtype, detY, detX, nPatterns], k) => {
      const detectors = detectorZoo(detY, detX, 20 + k);
      const tile = randomTile(dtype, nPatterns * detY * detX, 40 + k);
      for (const kernel of [reference, fast]) {
        kernel.setDetectors(detectors);
        kernel.tileBuffer(dtype, tile.length).set(tile as never);
      }
      const want = reference.run(dtype, nPatterns);
      const got = fast.run(dtype, nPatterns);
      const scale = virtualImagesReference(absTile(tile), nPatterns, detY, detX, detectors).images;
      expect(got.nonFinite).toBe(want.nonFinite);
      expectAll(`step ${k}`, got.images, want.images, (a, b, i) => Math.abs(a - b) <= 1e-12 * scale[i]);
    });
  });

  it('switching the dtype on the same detectors leaves nothing of the previous masks behind', () => {
    // 37×41 = 1517 pixels: the last block is not a whole number of 32-pixel steps, and the
    // float64 weights written first leave nonzero bytes past the narrower masks that follow.
    const detY = 37, detX = 41, nPatterns = 3;
    const detectors = detectorZoo(detY, detX, 12);
    const fast = createWasmVirtualImageKernel(wasmModule, 0, { sparseFill: 0 });
    fast.setDetectors(detectors);
    for (const dtype of ['float64', 'uint8', 'float32', 'int8', 'uint16', 'uint32'] as const) {
      const tile = randomTile(dtype, nPatterns * detY * detX, 60);
      fast.tileBuffer(dtype, tile.length).set(tile as never);
      const got = fast.run(dtype, nPatterns);
      const want = virtualImagesReference(tile, nPatterns, detY, detX, detectors);
      const scale = virtualImagesReference(absTile(tile), nPatterns, detY, detX, detectors).images;
      expect(got.nonFinite, dtype).toBe(want.nonFinite);
      expectAll(dtype, got.images, want.images, (a, b, i) => Math.abs(a - b) <= 1e-12 * scale[i]);
    }
  });

  it('rejects detectors that are unsorted, out of range or of another geometry', () => {
    const kernel = createWasmVirtualImageKernel(wasmModule, 0);
    const ok = ring(10, 12, 5, 5, 0, 3, 'disk');
    expect(() => kernel.setDetectors([{ ...ok, indices: Uint32Array.from([3, 2]) } as CompiledDetector])).toThrow(RangeError);
    expect(() => kernel.setDetectors([{ ...ok, indices: Uint32Array.from([120]) } as CompiledDetector])).toThrow(/below 120/);
    expect(() => kernel.setDetectors([ok, ring(10, 13, 5, 5, 0, 3, 'other')])).toThrow(/10×13 detector, expected 10×12/);
    expect(() => kernel.setDetectors([weighted(10, 12, () => NaN, 'bad')])).toThrow(/finite/);
    kernel.setDetectors([ok]);
    kernel.tileBuffer('uint16', 10 * 12);
    expect(() => kernel.run('uint16', 2)).toThrow(/needs 240 elements/);
    expect(() => kernel.run('uint8', 1)).toThrow(/tileBuffer/);
  });
});
