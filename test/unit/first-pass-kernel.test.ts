import { beforeAll, describe, expect, it } from 'vitest';
import { allocTyped, DTYPES, isFloatDType, type DType, type NumericArray } from '../../src-shared/model/dtype';
import { previewDims, type FirstPassGeometry, type FirstPassKernel, type FirstPassTileResult } from '../../src-shared/compute/first-pass-types';
import { firstPassReference, createReferenceKernel } from '../../src-shared/compute/first-pass';
import { createWasmFirstPassKernel } from '../../src-shared/compute/first-pass-wasm';
import { loadWasmModule } from '../../src-main/workers/wasm-loader';
import { mulberry32, randomTileCounted as randomTile, absTile, expectAll as expectSame } from '../helpers/synthetic';

// The WebAssembly kernel must reproduce its TypeScript twin, which test/reference/first-pass-numpy.test.ts
// checks against NumPy. Where the answer is known in closed form (constant tiles), it is checked directly.

let wasmModule: WebAssembly.Module;
let shared: FirstPassKernel;

beforeAll(() => {
  wasmModule = loadWasmModule('first-pass');
  // Deliberately small, so the first runs grow the memory and the re-fetch rule is exercised.
  shared = createWasmFirstPassKernel(wasmModule, 1024);
});

function constantTile(dtype: DType, n: number, value: number): NumericArray {
  return allocTyped(dtype, n).fill(value);
}

function runKernel(kernel: FirstPassKernel, dtype: DType, tile: NumericArray, nRows: number, g: FirstPassGeometry): FirstPassTileResult {
  // The view is fetched afresh for every run: a run may grow the memory and detach older views.
  kernel.tileBuffer(dtype, tile.length).set(tile as never);
  return kernel.run(dtype, nRows, g);
}

/** Exact for integer data; ≤1e-12 of Σ|v| for float sums; within one float32 rounding for the preview. */
function expectMatchesReference(got: FirstPassTileResult, tile: NumericArray, dtype: DType, nRows: number, g: FirstPassGeometry) {
  const want = firstPassReference(tile, nRows, g);
  expect(got.nonFinite).toBe(want.nonFinite);
  expectSame('max', got.max, want.max, (x, y) => Object.is(x, y));
  if (!isFloatDType(dtype)) {
    expectSame('sum', got.sum, want.sum, (x, y) => x === y);
    expectSame('total', got.total, want.total, (x, y) => x === y);
    expectSame('preview', got.preview, want.preview, (x, y) => x === y);
    return;
  }
  // Scale of each value: the same statistics of |tile|, so cancellation cannot make the tolerance vanish.
  const scale = firstPassReference(absTile(tile), nRows, g);
  expectSame('sum', got.sum, want.sum, (x, y, i) => Math.abs(x - y) <= 1e-12 * scale.sum[i]);
  expectSame('total', got.total, want.total, (x, y, i) => Math.abs(x - y) <= 1e-12 * scale.total[i]);
  expectSame('preview', got.preview, want.preview,
    (x, y, i) => Math.abs(x - y) <= 2 ** -23 * Math.abs(y) + 1e-12 * scale.preview[i]);
}

const SMALL_GEOMETRIES: { nRows: number; g: FirstPassGeometry }[] = [];
for (const detBin of [1, 2, 3, 4]) {
  for (const scanBin of [1, 2, 3]) {
    // 5 rows: the last scan bin of the tile is partial for scanBin 2 and 3; 7 columns likewise.
    SMALL_GEOMETRIES.push({ nRows: 5, g: { scanX: 7, detY: 9, detX: 13, detBin, scanBin } });
  }
}
// Wider rows reach every SIMD path (vector groups of 8–64 values) plus a scalar tail and a partial edge bin.
for (const detBin of [1, 2, 4, 5, 8, 16, 24, 32, 64]) {
  SMALL_GEOMETRIES.push({ nRows: 3, g: { scanX: 4, detY: 11, detX: 133, detBin, scanBin: 2 } });
}
SMALL_GEOMETRIES.push({ nRows: 2, g: { scanX: 3, detY: 1, detX: 1, detBin: 1, scanBin: 1 } });
SMALL_GEOMETRIES.push({ nRows: 4, g: { scanX: 5, detY: 9, detX: 13, detBin: 16, scanBin: 4 } }); // one bin bigger than the detector

function label(nRows: number, g: FirstPassGeometry): string {
  return `${nRows}×${g.scanX}×${g.detY}×${g.detX} detBin ${g.detBin} scanBin ${g.scanBin}`;
}

describe('first-pass WebAssembly kernel equals the TypeScript reference', () => {
  for (const dtype of DTYPES) {
    it(`${dtype}: random data over the type's range, odd shapes, partial bins`, () => {
      let seed = 1;
      for (const { nRows, g } of SMALL_GEOMETRIES) {
        const n = nRows * g.scanX * g.detY * g.detX;
        const { tile, nonFinite } = randomTile(dtype, n, seed++);
        const got = runKernel(shared, dtype, tile, nRows, g);
        // reference: the count of NaN/±Inf values this test planted
        expect(got.nonFinite, label(nRows, g)).toBe(nonFinite);
        const d = previewDims(nRows, g);
        expect(got.preview.length).toBe(d.qY * d.qX * d.pY * d.pX);
        expectMatchesReference(got, tile, dtype, nRows, g);
      }
    });
  }

  it('the reference kernel object gives the same results as firstPassReference', () => {
    const g: FirstPassGeometry = { scanX: 7, detY: 9, detX: 13, detBin: 3, scanBin: 2 };
    const { tile } = randomTile('uint16', 5 * 7 * 9 * 13, 99);
    const got = runKernel(createReferenceKernel(), 'uint16', tile, 5, g);
    expect(got).toEqual(firstPassReference(tile, 5, g));
  });
});

describe('first-pass kernel near the type limits (analytic answers for constant tiles)', () => {
  // A constant tile c over P patterns of N pixels has sum = max·P = c·P per pixel, total c·N per
  // pattern, and preview = c × (detector pixels in the bin), since the scan mean of a constant is itself.
  function expectConstantTile(r: FirstPassTileResult, c: number, nRows: number, g: FirstPassGeometry) {
    const nPatterns = nRows * g.scanX;
    const nPix = g.detY * g.detX;
    expectSame('sum', r.sum, new Float64Array(nPix).fill(c * nPatterns), (x, y) => x === y);
    expectSame('max', r.max, new Float64Array(nPix).fill(c), (x, y) => x === y);
    expectSame('total', r.total, new Float64Array(nPatterns).fill(c * nPix), (x, y) => x === y);
    const { qY, qX, pY, pX } = previewDims(nRows, g);
    const want = new Float32Array(qY * qX * pY * pX);
    for (let i = 0; i < want.length; i++) {
      const by = Math.floor(i / pX) % pY, bx = i % pX;
      const pixelsInBin = (Math.min(g.detY, (by + 1) * g.detBin) - by * g.detBin) * (Math.min(g.detX, (bx + 1) * g.detBin) - bx * g.detBin);
      want[i] = c * pixelsInBin;
    }
    expectSame('preview', r.preview, want, (x, y) => x === y);
  }

  const cases: { dtype: DType; value: number; nRows: number; g: FirstPassGeometry; why: string }[] = [
    { dtype: 'uint16', value: 65535, nRows: 230, g: { scanX: 300, detY: 3, detX: 5, detBin: 2, scanBin: 3 }, why: '69000 patterns: u32 sum lanes must be flushed' },
    { dtype: 'uint16', value: 65535, nRows: 1, g: { scanX: 2, detY: 300, detX: 300, detBin: 300, scanBin: 1 }, why: '90000-pixel bin: i32 bin lanes must be flushed mid-bin' },
    { dtype: 'uint16', value: 65535, nRows: 1, g: { scanX: 2, detY: 300, detX: 300, detBin: 1, scanBin: 2 }, why: 'pattern total over 90000 pixels' },
    { dtype: 'int16', value: -32768, nRows: 230, g: { scanX: 300, detY: 3, detX: 5, detBin: 4, scanBin: 2 }, why: 'i32 sum lanes flushed before −2³¹' },
    { dtype: 'int16', value: 32767, nRows: 230, g: { scanX: 300, detY: 2, detX: 9, detBin: 1, scanBin: 1 }, why: 'i32 sum lanes flushed before 2³¹' },
    { dtype: 'uint8', value: 255, nRows: 30, g: { scanX: 20, detY: 5, detX: 37, detBin: 4, scanBin: 1 }, why: '600 patterns: u16 sum lanes flushed every 257' },
    { dtype: 'int8', value: -128, nRows: 30, g: { scanX: 20, detY: 5, detX: 37, detBin: 2, scanBin: 3 }, why: 'i16 sum lanes flushed every 256' },
    { dtype: 'int8', value: 127, nRows: 30, g: { scanX: 20, detY: 5, detX: 37, detBin: 16, scanBin: 1 }, why: 'i16 sum lanes, positive limit' },
    { dtype: 'uint16', value: 65535, nRows: 1, g: { scanX: 2, detY: 256, detX: 256, detBin: 256, scanBin: 1 }, why: 'one bin of 65536 · 65535, just below 2³²' },
    { dtype: 'int16', value: -32768, nRows: 1, g: { scanX: 2, detY: 256, detX: 256, detBin: 256, scanBin: 2 }, why: 'one bin of exactly −2³¹' },
    { dtype: 'uint8', value: 255, nRows: 1, g: { scanX: 3, detY: 256, detX: 260, detBin: 256, scanBin: 1 }, why: '256-row column sums of 8-bit data' },
    { dtype: 'int8', value: -128, nRows: 1, g: { scanX: 3, detY: 256, detX: 260, detBin: 256, scanBin: 1 }, why: '256-row column sums of signed 8-bit data' },
    { dtype: 'uint32', value: 4e9, nRows: 5, g: { scanX: 7, detY: 9, detX: 13, detBin: 3, scanBin: 2 }, why: 'sums far beyond 2³²' },
    { dtype: 'int32', value: -2147483648, nRows: 5, g: { scanX: 7, detY: 9, detX: 13, detBin: 4, scanBin: 3 }, why: 'sums far below −2³¹' },
  ];
  for (const { dtype, value, nRows, g, why } of cases) {
    it(`${dtype} ${value} everywhere, ${label(nRows, g)} (${why})`, () => {
      const tile = constantTile(dtype, nRows * g.scanX * g.detY * g.detX, value);
      const got = runKernel(shared, dtype, tile, nRows, g);
      // reference: closed form for a constant tile (see expectConstantTile)
      expectConstantTile(got, value, nRows, g);
      expectConstantTile(firstPassReference(tile, nRows, g), value, nRows, g);
      expect(got.nonFinite).toBe(0);
    });
  }

  it('uint32 random values near 4e9 equal the reference exactly', () => {
    const g: FirstPassGeometry = { scanX: 9, detY: 7, detX: 21, detBin: 2, scanBin: 2 };
    const rand = mulberry32(7);
    const tile = Uint32Array.from({ length: 3 * 9 * 7 * 21 }, () => 4e9 + Math.floor(rand() * 2.9e8));
    expectMatchesReference(runKernel(shared, 'uint32', tile, 3, g), tile, 'uint32', 3, g);
  });
});

describe('first-pass kernel on non-finite float data', () => {
  for (const dtype of ['float32', 'float64'] as const) {
    it(`${dtype}: NaN and ±Inf are counted and left out of sums, max and preview`, () => {
      const g: FirstPassGeometry = { scanX: 3, detY: 4, detX: 10, detBin: 2, scanBin: 3 };
      const nRows = 2;
      const nPix = g.detY * g.detX;
      const tile = allocTyped(dtype, nRows * g.scanX * nPix);
      // Every pattern holds −p at every pixel; pixel 0 is non-finite everywhere, pixel 5 only in pattern 0.
      let planted = 0;
      for (let p = 0; p < nRows * g.scanX; p++) {
        for (let i = 0; i < nPix; i++) tile[p * nPix + i] = -(p + 1);
        tile[p * nPix] = [NaN, Infinity, -Infinity][p % 3]; planted++;
        if (p === 0) { tile[5] = Infinity; planted++; }
      }
      const got = runKernel(shared, dtype, tile, nRows, g);
      const nPatterns = nRows * g.scanX;
      // reference: closed form for this planted tile
      expect(got.nonFinite).toBe(planted);
      expect(got.max[0]).toBe(-Infinity);
      expect(got.sum[0]).toBe(0);
      expect(got.max[1]).toBe(-1);
      expect(got.sum[1]).toBe(-(nPatterns * (nPatterns + 1)) / 2);
      expect(got.max[5]).toBe(-2);
      expect(got.sum[5]).toBe(-(nPatterns * (nPatterns + 1)) / 2 + 1);
      expect(got.total[0]).toBe(-1 * (nPix - 2));
      expect(got.total[4]).toBe(-5 * (nPix - 1));
      expect(Array.from(got.preview).every(Number.isFinite)).toBe(true);
      expectMatchesReference(got, tile, dtype, nRows, g);
    });
  }
});

describe('first-pass kernel object', () => {
  it('a tile with no rows gives empty totals and −Infinity max', () => {
    const g: FirstPassGeometry = { scanX: 4, detY: 3, detX: 3, detBin: 2, scanBin: 2 };
    const r = runKernel(shared, 'uint16', new Uint16Array(0), 0, g);
    // reference: max over an empty set is −Infinity, sums over it are 0 (FirstPassTileResult contract)
    expect(r.total.length).toBe(0);
    expect(Array.from(r.max)).toEqual(new Array(9).fill(-Infinity));
    expect(Array.from(r.sum)).toEqual(new Array(9).fill(0));
  });

  it('places the tile at a 64 KiB-aligned offset and keeps it there when the memory grows', () => {
    const kernel = createWasmFirstPassKernel(wasmModule, 0);
    const tileOffset = kernel.tileBuffer('uint16', 16).byteOffset;
    expect(tileOffset % 65536).toBe(0);
    const g: FirstPassGeometry = { scanX: 64, detY: 32, detX: 32, detBin: 1, scanBin: 1 };
    const { tile } = randomTile('uint16', 8 * 64 * 32 * 32, 5);
    const view = kernel.tileBuffer('uint16', tile.length);
    expect(view.byteOffset).toBe(tileOffset);
    view.set(tile);
    // This run needs more scratch than the memory holds, so it grows it during the run.
    const r = kernel.run('uint16', 8, g);
    expectMatchesReference(r, tile, 'uint16', 8, g);
    expect(view.length, 'the old view is detached by the growth').toBe(0);
    expectSame('tile after growth', kernel.tileBuffer('uint16', tile.length), tile, (x, y) => x === y);
  });

  it('rejects a run larger than the tile buffer and a bad geometry', () => {
    const kernel = createWasmFirstPassKernel(wasmModule, 4096);
    kernel.tileBuffer('uint8', 100);
    expect(() => kernel.run('uint8', 2, { scanX: 10, detY: 3, detX: 3, detBin: 1, scanBin: 1 })).toThrow(/tileBuffer was asked for 100/);
    expect(() => kernel.run('uint8', 1, { scanX: 10, detY: 3, detX: 3, detBin: 0, scanBin: 1 })).toThrow(/detBin/);
    expect(() => kernel.run('uint16', 1, { scanX: 1, detY: 3, detX: 3, detBin: 1, scanBin: 1 })).toThrow(/tileBuffer\('uint16'/);
  });
});
