import { DTYPE_BYTES, typedView, type DType, type NumericArray } from '../model/dtype';
import { ensureMemoryBytes, exportNames, kernelMemory, roundUp, TILE_OFFSET, PAGE_BYTES } from './wasm-memory';
import { checkGeometry } from './first-pass';
import { previewDims, type FirstPassGeometry, type FirstPassKernel, type FirstPassOutputs, type FirstPassTileResult } from './first-pass-types';

/**
 * The WebAssembly SIMD first-pass kernel (built from wasm-src/first-pass.ts to
 * dist/wasm/first-pass.wasm). The caller compiles the module (see src-main/workers/wasm-loader.ts);
 * this file stays free of Node imports so a browser worker could use it too.
 *
 * Memory layout: [0, 64 KiB) is left to the module's own static data; the tile buffer starts at
 * 64 KiB, so its start is page-aligned for callers that read files straight into it; the
 * accumulators and results follow the tile buffer and are laid out afresh on every run.
 *
 * The tile buffer never moves, but growing the memory (tileBuffer for a larger tile, or run
 * for a geometry needing more scratch than any run before) detaches every view of it.
 * So: call tileBuffer before every run, fill the view it returns, then run; never keep a view
 * across a run. The tile's contents survive growth.
 */
export function createWasmFirstPassKernel(wasmModule: WebAssembly.Module, maxTileBytes: number, sharedMemory?: WebAssembly.Memory): FirstPassKernel {
  if (!Number.isFinite(maxTileBytes) || maxTileBytes < 0) throw new RangeError(`first pass: maxTileBytes must be ≥ 0, got ${maxTileBytes}`);
  let tileCapacity = roundUp(Math.max(maxTileBytes, 1), PAGE_BYTES);
  // Room for the tile plus the scratch of a typical run, so most runs never grow the memory.
  const memory = kernelMemory(TILE_OFFSET + tileCapacity + tileCapacity / 2 + PAGE_BYTES, 'first pass', sharedMemory);
  const instance = new WebAssembly.Instance(wasmModule, {
    env: {
      memory,
      abort: () => { throw new Error('first pass: WebAssembly kernel aborted'); },
    },
  });
  const exports = instance.exports as unknown as Record<string, FirstPassExport>;

  const ensureBytes = (bytes: number) => ensureMemoryBytes(memory, bytes, 'first pass');

  let tileDType: DType | null = null;
  let tileElements = 0;

  return {
    tileBuffer(dtype: DType, nElements: number): NumericArray {
      const bytes = nElements * DTYPE_BYTES[dtype];
      if (bytes > tileCapacity) tileCapacity = roundUp(bytes, PAGE_BYTES);
      ensureBytes(TILE_OFFSET + tileCapacity);
      tileDType = dtype;
      tileElements = nElements;
      return typedView(dtype, memory.buffer, TILE_OFFSET, nElements);
    },

    run(dtype: DType, nRows: number, g: FirstPassGeometry, out?: FirstPassOutputs): FirstPassTileResult {
      checkGeometry(nRows, g);
      if (tileDType !== dtype) throw new Error(`first pass: tileBuffer('${dtype}', …) must be called before run`);
      const nPix = g.detY * g.detX;
      const nElements = nRows * g.scanX * nPix;
      if (nElements > tileElements) throw new RangeError(`first pass: run needs ${nElements} elements but tileBuffer was asked for ${tileElements}`);
      if (Math.min(g.detBin, g.detX) > MAX_BIN_ROW_VALUES) {
        // A bin lane takes up to min(detBin, detX) values per detector row and must not overflow within one row.
        throw new RangeError(`first pass: detector rows of more than ${MAX_BIN_ROW_VALUES} pixels per bin are not supported`);
      }
      const { qY, qX, pY, pX } = previewDims(nRows, g);
      const nPreview = qY * qX * pY * pX;
      const nPatterns = nRows * g.scanX;
      if (nPatterns === 0) {
        return { sum: new Float64Array(nPix), max: new Float64Array(nPix).fill(-Infinity), total: new Float64Array(0), preview: new Float32Array(nPreview), nonFinite: 0 };
      }

      // A bin wider than what it bins is one bin either way; clamping keeps the kernel's i32 index arithmetic small.
      const detBin = Math.min(g.detBin, Math.max(g.detY, g.detX));
      const scanBin = Math.min(g.scanBin, Math.max(nRows, g.scanX));
      let cursor = TILE_OFFSET + tileCapacity;
      const take = (bytes: number) => { const at = cursor; cursor = roundUp(cursor + bytes, 16); return at; };
      const sumOut = take(nPix * 8);
      const maxOut = take(nPix * 8);
      const totalOut = take(nPatterns * 8);
      const previewOut = take(nPreview * 4);
      const sumAcc = take(nPix * 8);
      const maxAcc = take(nPix * 8);
      const binAcc = take(pX * 8 + 64);
      const binF64 = take(pX * 8);
      const columnAcc = take(g.detX * 8);
      const previewAcc = take(scanBin > 1 ? qX * pY * pX * 8 : 0);
      ensureBytes(cursor);

      const nonFinite = exports[EXPORT_NAMES[dtype]](TILE_OFFSET, nRows, g.scanX, g.detY, g.detX, detBin, scanBin,
        sumOut, maxOut, totalOut, previewOut, sumAcc, maxAcc, binAcc, binF64, columnAcc, previewAcc);

      const buf = memory.buffer;
      return {
        sum: new Float64Array(buf, sumOut, nPix).slice(),
        max: new Float64Array(buf, maxOut, nPix).slice(),
        total: place(new Float64Array(buf, totalOut, nPatterns), out?.total, 'total'),
        preview: place(new Float32Array(buf, previewOut, nPreview), out?.preview, 'preview'),
        nonFinite,
      };
    },

    nonFiniteCounts(dtype: DType, nPatterns: number, nPix: number): Float64Array {
      if (dtype !== 'float32' && dtype !== 'float64') return new Float64Array(nPix);
      if (tileDType !== dtype) throw new Error(`first pass: tileBuffer('${dtype}', …) must be called before nonFiniteCounts`);
      if (nPatterns * nPix > tileElements) throw new RangeError(`first pass: nonFiniteCounts needs ${nPatterns * nPix} elements but tileBuffer was asked for ${tileElements}`);
      // Scratch after the tile, as run's (whose results are copied out by now).
      const counts = TILE_OFFSET + tileCapacity;
      ensureBytes(counts + nPix * 4);
      new Int32Array(memory.buffer, counts, nPix).fill(0);
      const count = exports[dtype === 'float32' ? 'nonFiniteCountsFloat32' : 'nonFiniteCountsFloat64'] as unknown as (tile: number, nPatterns: number, nPix: number, counts: number) => void;
      count(TILE_OFFSET, nPatterns, nPix, counts);
      return Float64Array.from(new Int32Array(memory.buffer, counts, nPix));
    },
  };
}

/** Copy a result out of kernel memory: into the caller's array when given, else a fresh one. */
function place<T extends Float32Array | Float64Array>(view: T, target: T | undefined, what: string): T {
  if (!target) return view.slice() as T;
  if (target.length !== view.length) throw new RangeError(`first pass: ${what} output holds ${target.length} values, expected ${view.length}`);
  target.set(view);
  return target;
}

type FirstPassExport = (tile: number, nRows: number, scanX: number, detY: number, detX: number, detBin: number, scanBin: number,
  sumOut: number, maxOut: number, totalOut: number, previewOut: number,
  sumAcc: number, maxAcc: number, binAcc: number, binF64: number, columnAcc: number, previewAcc: number) => number;

const EXPORT_NAMES = exportNames('firstPass');

const MAX_BIN_ROW_VALUES = 65536;

