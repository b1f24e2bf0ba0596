import { DTYPE_BYTES, isFloatDType, typedView, type DType, type NumericArray } from '../model/dtype';
import { ensureMemoryBytes, exportNames, kernelMemory, roundUp, KeptWrites, TILE_OFFSET, PAGE_BYTES } from './wasm-memory';
import type { ComKernel, ComOptions } from './tile-kernels-types';
import { checkComOptions, type ComSums } from './com';
import { prefersRuns, type SparseRule } from './virtual-image-wasm';
import { sameCompiledDetector } from './virtual-image';

/**
 * The WebAssembly SIMD centre-of-mass kernel (built from wasm-src/com.ts to dist/wasm/com.wasm).
 * The caller compiles the module (see src-main/workers/wasm-loader.ts); this file stays free of
 * Node imports so a browser worker could use it too.
 *
 * Memory layout: [0, 64 KiB) is left to the module's own static data; the tile buffer starts at
 * 64 KiB (page-aligned, for callers that read files straight into it); the mask and the results
 * follow it. The memory is sized by tileBuffer and setOptions, never by run. Growing it detaches
 * every view of it, so: call tileBuffer after setOptions and before every run, fill the view it
 * returns, then run. The tile's contents survive growth.
 *
 * A mask is applied one of two ways, chosen per element type by how many pixels it covers: over
 * runs of its own pixels, or by a dense SIMD sweep of the whole pattern (see SPARSE_RULE).
 */
export function createWasmComKernel(wasmModule: WebAssembly.Module, maxTileBytes: number, tuning: ComTuning = {}, sharedMemory?: WebAssembly.Memory): ComKernel {
  if (!Number.isFinite(maxTileBytes) || maxTileBytes < 0) throw new RangeError(`centre of mass: maxTileBytes must be ≥ 0, got ${maxTileBytes}`);
  let tileCapacity = roundUp(Math.max(maxTileBytes, 1), PAGE_BYTES);
  const memory = kernelMemory(TILE_OFFSET + tileCapacity + tileCapacity / 64 + 4 * 2 ** 20, 'centre of mass', sharedMemory);
  const instance = new WebAssembly.Instance(wasmModule, {
    env: {
      memory,
      abort: () => { throw new Error('centre of mass: WebAssembly kernel aborted'); },
    },
  });
  const exports = instance.exports as unknown as Record<string, ComExport>;

  let tileDType: DType | null = null;
  let tileElements = 0;
  let options: ComOptions | null = null;
  let detY = 0;
  let detX = 0;
  let layout: Layout | null = null;
  let prepared: Prepared | null = null;
  let preparedFor: DType | null = null;
  /** The mask as prepared, written back before each run that reuses it (see KeptWrites). */
  const kept = new KeptWrites();

  const ensureBytes = (bytes: number) => ensureMemoryBytes(memory, bytes, 'centre of mass');

  /** Worst-case room for the mask in every representation, after the tile. */
  const refreshLayout = () => {
    let cursor = TILE_OFFSET + tileCapacity + OVER_READ_SLACK;
    const take = (bytes: number) => { const at = cursor; cursor = roundUp(cursor + bytes + OVER_READ_SLACK, 16); return at; };
    const nPix = detY * detX;
    const hasMask = options?.mask != null;
    // A run per listed pixel at worst, four words each.
    const runs = take(hasMask ? nPix * 16 : 0);
    const weights = take(hasMask ? nPix * 8 : 0);
    const dense = take(hasMask ? nPix * 8 : 0);
    const maxPatterns = nPix > 0 ? Math.floor(tileCapacity / nPix) : 0;
    const total = take(maxPatterns * 8);
    const sumX = take(maxPatterns * 8);
    const sumY = take(maxPatterns * 8);
    layout = { runs, weights, dense, total, sumX, sumY, end: cursor };
    ensureBytes(cursor);
    preparedFor = null;
    kept.clear();
  };

  const prepare = (dtype: DType, l: Layout): Prepared => {
    kept.clear();
    const o = options!;
    const buf = memory.buffer;
    const nPix = detY * detX;
    const p: Prepared = { mode: MODE.none, a: 0, d: 0, n: 0, useThreshold: 0, thrInt: 0, thrF: o.threshold, allZero: false };

    if (o.threshold !== 0) {
      if (isFloatDType(dtype)) {
        p.useThreshold = 1;
      } else {
        // Integers: v < t exactly when v < ceil(t).
        const [lowest, highest] = INTEGER_RANGE[dtype];
        const t = Math.ceil(o.threshold);
        if (t > highest) p.allZero = true;
        else if (t > lowest) { p.useThreshold = 1; p.thrInt = t | 0; }
      }
    }

    const mask = o.mask;
    if (mask !== null) {
      const rules = SPARSE_RULE[dtype];
      const weighted = mask.mode === 'weights';
      const listed = weighted ? nonzeroIndices(mask.weights) : mask.indices;
      const runs = rowRunsOf(listed, detX);
      if (prefersRuns(listed.length, runs.length / 4, nPix, weighted ? rules.weighted : rules.binary, tuning.sparseFill)) {
        new Uint32Array(buf, l.runs, runs.length).set(runs);
        kept.keep(buf, l.runs, runs.byteLength);
        p.mode = MODE.runs;
        p.a = l.runs;
        p.n = runs.length / 4;
        if (weighted) {
          // Packed in pixel order, which is the order of the runs.
          const w = new Float64Array(buf, l.weights, listed.length);
          listed.forEach((i, k) => { w[k] = mask.weights[i]; });
          kept.keep(buf, l.weights, w.byteLength);
          p.d = l.weights;
        }
      } else if (weighted || isFloatDType(dtype)) {
        const w = new Float64Array(buf, l.dense, nPix);
        if (weighted) w.set(mask.weights);
        else { w.fill(0); for (const i of listed) w[i] = 1; }
        kept.keep(buf, l.dense, w.byteLength);
        p.mode = MODE.denseWeights;
        p.a = l.dense;
      } else {
        // Integer data, binary mask: all-ones lanes of the data's width.
        const bytes = DTYPE_BYTES[dtype];
        const lanes = typedView(bytes === 1 ? 'uint8' : bytes === 2 ? 'uint16' : 'uint32', buf, l.dense, nPix).fill(0);
        const ones = bytes === 1 ? 0xff : bytes === 2 ? 0xffff : 0xffffffff;
        for (const i of listed) lanes[i] = ones;
        kept.keep(buf, l.dense, lanes.byteLength);
        p.mode = MODE.denseLanes;
        p.a = l.dense;
      }
    }
    preparedFor = dtype;
    return p;
  };

  return {
    tileBuffer(dtype: DType, nElements: number): NumericArray {
      const bytes = nElements * DTYPE_BYTES[dtype];
      if (bytes > tileCapacity || !layout) {
        tileCapacity = Math.max(tileCapacity, roundUp(bytes, PAGE_BYTES));
        refreshLayout();
      }
      tileDType = dtype;
      tileElements = nElements;
      return typedView(dtype, memory.buffer, TILE_OFFSET, nElements);
    },

    setOptions(o: ComOptions, y: number, x: number): void {
      // The same options again (every tile of a pass sends them): keep what was prepared.
      if (options && y === detY && x === detX && o.threshold === options.threshold && sameCompiledDetector(o.mask, options.mask)) return;
      checkComOptions(o, y, x);
      options = { mask: o.mask, threshold: o.threshold };
      detY = y;
      detX = x;
      refreshLayout();
    },

    run(dtype: DType, nPatterns: number): ComSums {
      if (!options) throw new Error('centre of mass: setOptions must be called before run');
      if (tileDType !== dtype) throw new Error(`centre of mass: tileBuffer('${dtype}', …) must be called before run`);
      if (!Number.isInteger(nPatterns) || nPatterns < 0) throw new RangeError(`centre of mass: nPatterns must be an integer ≥ 0, got ${nPatterns}`);
      const nElements = nPatterns * detY * detX;
      if (nElements > tileElements) throw new RangeError(`centre of mass: run needs ${nElements} elements but tileBuffer was asked for ${tileElements}`);
      const l = layout!;
      if (preparedFor !== dtype || !prepared) prepared = prepare(dtype, l);
      else kept.restore(memory.buffer);
      const p = prepared;
      if (nPatterns === 0 || p.allZero) {
        return { total: new Float64Array(nPatterns), sumX: new Float64Array(nPatterns), sumY: new Float64Array(nPatterns), nonFinite: 0 };
      }
      const nonFinite = exports[EXPORT_NAMES[dtype]](TILE_OFFSET, nPatterns, detY, detX, p.mode, p.a, p.d, p.n,
        p.useThreshold, p.thrInt, p.thrF, l.total, l.sumX, l.sumY);
      const buf = memory.buffer;
      return {
        total: new Float64Array(buf, l.total, nPatterns).slice(),
        sumX: new Float64Array(buf, l.sumX, nPatterns).slice(),
        sumY: new Float64Array(buf, l.sumY, nPatterns).slice(),
        nonFinite,
      };
    },
  };
}

export interface ComTuning {
  /** Fill below which a mask is applied over runs of its own pixels, in place of SPARSE_RULE (0: always dense, > 1: always runs). */
  sparseFill?: number;
}

/**
 * When a mask is applied over runs of its own pixels rather than by a dense sweep with a lane
 * mask or weights: when `masked pixels + runWeight × runs < limit × detector pixels` (see
 * prefersRuns in virtual-image-wasm.ts). Measured on 128×128 patterns with disks of growing
 * radius (runs won at every fill: a row of a disk is one run, and the sweep pays for the mask
 * loads) and with scattered masks, where a one-pixel run costs about 64 pixels of an integer
 * sweep (about 16 of a float one).
 */
export const SPARSE_RULE: Record<DType, { binary: SparseRule; weighted: SparseRule }> = {
  uint8: { binary: { limit: 0.9, runWeight: 64 }, weighted: { limit: 0.9, runWeight: 16 } },
  int8: { binary: { limit: 0.9, runWeight: 64 }, weighted: { limit: 0.9, runWeight: 16 } },
  uint16: { binary: { limit: 0.9, runWeight: 64 }, weighted: { limit: 0.9, runWeight: 16 } },
  int16: { binary: { limit: 0.9, runWeight: 64 }, weighted: { limit: 0.9, runWeight: 16 } },
  uint32: { binary: { limit: 0.9, runWeight: 64 }, weighted: { limit: 0.9, runWeight: 16 } },
  int32: { binary: { limit: 0.9, runWeight: 64 }, weighted: { limit: 0.9, runWeight: 16 } },
  float32: { binary: { limit: 0.9, runWeight: 16 }, weighted: { limit: 0.9, runWeight: 16 } },
  float64: { binary: { limit: 0.9, runWeight: 16 }, weighted: { limit: 0.9, runWeight: 16 } },
};

const MODE = { none: 0, runs: 1, denseLanes: 2, denseWeights: 3 } as const;

const INTEGER_RANGE: Record<DType, [number, number]> = {
  uint8: [0, 255], uint16: [0, 65535], uint32: [0, 4294967295],
  int8: [-128, 127], int16: [-32768, 32767], int32: [-2147483648, 2147483647],
  float32: [-Infinity, Infinity], float64: [-Infinity, Infinity],
};

interface Layout {
  runs: number; weights: number; dense: number;
  total: number; sumX: number; sumY: number; end: number;
}

interface Prepared {
  mode: number; a: number; d: number; n: number;
  useThreshold: number; thrInt: number; thrF: number;
  /** Integer data under a threshold above the type's largest value: every value counts as zero. */
  allZero: boolean;
}

type ComExport = (tile: number, nPatterns: number, detY: number, detX: number, mode: number, a: number, d: number, n: number,
  useThreshold: number, thrInt: number, thrF: number, totalOut: number, sumXOut: number, sumYOut: number) => number;

const EXPORT_NAMES = exportNames('com');

/** Whole-vector sweeps read up to one vector past the last pattern, and past the mask arrays. */
const OVER_READ_SLACK = 256;

/** Sorted pixel indices as runs within rows: (first, length, column, row) each. */
export function rowRunsOf(indices: ArrayLike<number>, detX: number): Uint32Array {
  const runs: number[] = [];
  let k = 0;
  while (k < indices.length) {
    const first = indices[k];
    const x = first % detX;
    let length = 1;
    while (k + length < indices.length && indices[k + length] === first + length && x + length < detX) length++;
    runs.push(first, length, x, (first - x) / detX);
    k += length;
  }
  return Uint32Array.from(runs);
}

function nonzeroIndices(weights: Float64Array): Uint32Array {
  let n = 0;
  for (let i = 0; i < weights.length; i++) if (weights[i] !== 0) n++;
  const out = new Uint32Array(n);
  for (let i = 0, k = 0; i < weights.length; i++) if (weights[i] !== 0) out[k++] = i;
  return out;
}

