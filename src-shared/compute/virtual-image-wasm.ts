import { DTYPE_BYTES, isFloatDType, typedView, type DType, type NumericArray } from '../model/dtype';
import { ensureMemoryBytes, exportNames, kernelMemory, roundUp, KeptWrites, TILE_OFFSET, PAGE_BYTES } from './wasm-memory';
import type { CompiledDetector } from '../model/detectors';
import type { VirtualImageKernel } from './tile-kernels-types';
import { checkDetectors, sameCompiledDetector, supportUnion } from './virtual-image';

/**
 * The WebAssembly SIMD virtual-image kernel (built from wasm-src/virtual-image.ts to
 * dist/wasm/virtual-image.wasm). The caller compiles the module (see src-main/workers/wasm-loader.ts);
 * this file stays free of Node imports so a browser worker could use it too.
 *
 * Memory layout: [0, 64 KiB) is left to the module's own static data; the tile buffer starts at
 * 64 KiB (page-aligned, for callers that read files straight into it); the detector tables,
 * masks, scratch and results follow it. The memory is sized by tileBuffer and setDetectors,
 * never by run. Growing it (a larger tile, more or bigger detectors) detaches every view of
 * it, so: call tileBuffer after setDetectors and before every run, fill the view it returns,
 * then run. The tile's contents survive growth.
 *
 * Each detector is summed one of two ways, chosen per element type by how many pixels it
 * covers: over its own pixels only, as runs of consecutive pixels, or by a dense SIMD sweep with a
 * lane mask or weights; see SPARSE_RULE.
 */
export function createWasmVirtualImageKernel(wasmModule: WebAssembly.Module, maxTileBytes: number,
  tuning: VirtualImageTuning = {}, sharedMemory?: WebAssembly.Memory): VirtualImageKernel {
  if (!Number.isFinite(maxTileBytes) || maxTileBytes < 0) throw new RangeError(`virtual image: maxTileBytes must be ≥ 0, got ${maxTileBytes}`);
  let tileCapacity = roundUp(Math.max(maxTileBytes, 1), PAGE_BYTES);
  // Room for the tile plus detector data for a few large detectors, so most runs never grow the memory.
  const memory = kernelMemory(TILE_OFFSET + tileCapacity + tileCapacity / 64 + 4 * 2 ** 20, 'virtual image', sharedMemory);
  const instance = new WebAssembly.Instance(wasmModule, {
    env: {
      memory,
      abort: () => { throw new Error('virtual image: WebAssembly kernel aborted'); },
    },
  });
  const exports = instance.exports as unknown as Record<string, VirtualImageExport>;

  let tileDType: DType | null = null;
  let tileElements = 0;
  let detectors: CompiledDetector[] = [];
  let nPix = 0;
  let preparedFor: DType | null = null;
  /** The detectors as prepared, written back before each run that reuses them (see KeptWrites). */
  const kept = new KeptWrites();
  let layout: Layout | null = null;

  const ensureBytes = (bytes: number) => ensureMemoryBytes(memory, bytes, 'virtual image');

  /** Worst-case room for every detector in every representation, after the tile. */
  const planLayout = (): Layout => {
    let cursor = TILE_OFFSET + tileCapacity + OVER_READ_SLACK;
    const take = (bytes: number) => { const at = cursor; cursor = roundUp(cursor + bytes, 16); return at; };
    const padded = roundUp(Math.max(nPix, 1), DENSE_ALIGN);
    const nDet = detectors.length;
    const table = take(nDet * RECORD_INTS * 4);
    const acc = take(nDet * 8);
    const scratch = take(BLOCK * 8);
    const perDetector = detectors.map((det) => {
      const n = det.mode === 'indices' ? det.indices.length : countNonzero(det.weights);
      // Runs take two words each, and splitting at MAX_RUN adds at most one run per MAX_RUN pixels.
      const listWords = 2 * n + 2 * Math.ceil(nPix / MAX_RUN);
      return { indices: take(listWords * 4), weights: take(det.mode === 'weights' ? n * 8 : 0), dense: take(padded * 8) };
    });
    const unionMask = take(padded * 8);
    const unionIndices = take((2 * nPix + 2 * Math.ceil(nPix / MAX_RUN)) * 4);
    const maxPatterns = nPix > 0 ? Math.floor(tileCapacity / nPix) : 0;
    const out = take(nDet * maxPatterns * 8);
    return { table, acc, scratch, perDetector, unionMask, unionIndices, out, end: cursor };
  };

  const refreshLayout = () => {
    layout = planLayout();
    ensureBytes(layout.end);
    preparedFor = null;
    kept.clear();
  };

  /** Writes the detector table and whichever representation each detector gets for this dtype. */
  const prepare = (dtype: DType, l: Layout) => {
    kept.clear();
    const buf = memory.buffer;
    const padded = roundUp(nPix, DENSE_ALIGN);
    const float = isFloatDType(dtype);
    const rules = SPARSE_RULE[dtype];
    const records: number[][] = [];
    detectors.forEach((det, d) => {
      const at = l.perDetector[d];
      if (det.mode === 'indices') {
        const n = det.indices.length;
        const runs = runsOf(det.indices);
        if (prefersRuns(n, runs.length / 2, nPix, rules.binary, tuning.sparseFill)) {
          new Uint32Array(buf, at.indices, runs.length).set(runs);
          kept.keep(buf, at.indices, runs.byteLength);
          records.push([KIND.sparseRuns, runs.length / 2, at.indices, 0, d]);
        } else if (dtype === 'float64') {
          // float64 has no binary sweep of its own: 0/1 weights.
          const w = new Float64Array(buf, at.dense, padded).fill(0);
          for (const i of det.indices) w[i] = 1;
          kept.keep(buf, at.dense, w.byteLength);
          records.push([KIND.denseWeights, n, at.dense, 0, d]);
        } else {
          writeLaneMask(buf, at.dense, DTYPE_BYTES[dtype], padded, det.indices);
          kept.keep(buf, at.dense, padded * DTYPE_BYTES[dtype]);
          records.push([KIND.denseBinary, n, at.dense, 0, d]);
        }
      } else {
        const nonzero = countNonzero(det.weights);
        const listed = new Uint32Array(nonzero);
        for (let i = 0, k = 0; i < nPix; i++) if (det.weights[i] !== 0) listed[k++] = i;
        const runs = runsOf(listed);
        if (prefersRuns(nonzero, runs.length / 2, nPix, rules.weighted, tuning.sparseFill)) {
          // Runs of nonzero weights; their weights packed in the same (pixel) order.
          const weights = new Float64Array(buf, at.weights, nonzero);
          listed.forEach((i, k) => { weights[k] = det.weights[i]; });
          new Uint32Array(buf, at.indices, runs.length).set(runs);
          kept.keep(buf, at.weights, weights.byteLength);
          kept.keep(buf, at.indices, runs.byteLength);
          records.push([KIND.sparseWeighted, runs.length / 2, at.indices, at.weights, d]);
        } else {
          const w = new Float64Array(buf, at.dense, padded).fill(0);
          w.set(det.weights);
          kept.keep(buf, at.dense, w.byteLength);
          records.push([KIND.denseWeights, nonzero, at.dense, 0, d]);
        }
      }
    });
    // Dense binary detectors side by side: the kernel serves four of them from each vector load.
    records.sort((a, b) => (a[0] === KIND.denseBinary ? 0 : 1) - (b[0] === KIND.denseBinary ? 0 : 1) || a[4] - b[4]);
    const table = new Int32Array(buf, l.table, detectors.length * RECORD_INTS).fill(0);
    records.forEach((r, k) => table.set(r, k * RECORD_INTS));
    kept.keep(buf, l.table, table.byteLength);
    const anyDense = records.some((r) => r[0] === KIND.denseBinary || r[0] === KIND.denseWeights);

    let unionCount = 0;
    let unionDense = 0;
    if (float) {
      const inUnion = supportUnion(detectors, nPix);
      if (anyDense) {
        // One all-ones lane of the data's width per pixel of the union.
        const perPixel = dtype === 'float64' ? 2 : 1;
        const lanes = new Int32Array(buf, l.unionMask, padded * perPixel).fill(0);
        inUnion.forEach((inside, i) => { if (inside) lanes.fill(-1, i * perPixel, (i + 1) * perPixel); });
        kept.keep(buf, l.unionMask, lanes.byteLength);
        unionDense = 1;
      } else {
        const listed: number[] = [];
        inUnion.forEach((inside, i) => { if (inside) listed.push(i); });
        const runs = runsOf(Uint32Array.from(listed));
        new Uint32Array(buf, l.unionIndices, runs.length).set(runs);
        kept.keep(buf, l.unionIndices, runs.byteLength);
        unionCount = runs.length / 2;
      }
    }
    preparedFor = dtype;
    return { unionCount, unionDense, union: unionDense ? l.unionMask : l.unionIndices };
  };
  let preparedUnion = { unionCount: 0, unionDense: 0, union: 0 };

  return {
    tileBuffer(dtype: DType, nElements: number): NumericArray {
      const bytes = nElements * DTYPE_BYTES[dtype];
      if (bytes > tileCapacity || !layout) {
        tileCapacity = Math.max(tileCapacity, roundUp(bytes, PAGE_BYTES));
        refreshLayout();
      }
      ensureBytes(TILE_OFFSET + tileCapacity + OVER_READ_SLACK);
      tileDType = dtype;
      tileElements = nElements;
      return typedView(dtype, memory.buffer, TILE_OFFSET, nElements);
    },

    setDetectors(list: CompiledDetector[]): void {
      // The same detectors again (every tile of a pass sends them): keep what was prepared.
      if (layout && list.length === detectors.length && list.every((det, k) => sameCompiledDetector(det, detectors[k]))) return;
      checkDetectors(list);
      detectors = list.slice();
      nPix = detectors.length ? detectors[0].detY * detectors[0].detX : 0;
      refreshLayout();
    },

    run(dtype: DType, nPatterns: number) {
      if (tileDType !== dtype) throw new Error(`virtual image: tileBuffer('${dtype}', …) must be called before run`);
      if (!Number.isInteger(nPatterns) || nPatterns < 0) throw new RangeError(`virtual image: nPatterns must be an integer ≥ 0, got ${nPatterns}`);
      const nDet = detectors.length;
      if (nDet === 0 || nPatterns === 0) return { images: new Float64Array(nDet * nPatterns), nonFinite: 0 };
      const nElements = nPatterns * nPix;
      if (nElements > tileElements) throw new RangeError(`virtual image: run needs ${nElements} elements but tileBuffer was asked for ${tileElements}`);
      const l = layout!;
      if (preparedFor !== dtype) preparedUnion = prepare(dtype, l);
      else kept.restore(memory.buffer);
      const { union, unionCount, unionDense } = preparedUnion;
      const nonFinite = exports[EXPORT_NAMES[dtype]](TILE_OFFSET, nPatterns, nPix, l.table, nDet, union, unionCount, unionDense, l.scratch, l.acc, l.out);
      return { images: new Float64Array(memory.buffer, l.out, nDet * nPatterns).slice(), nonFinite };
    },
  };
}

export interface VirtualImageTuning {
  /**
   * Fill (covered pixels ÷ detector pixels) below which a detector is summed over its own
   * pixels (runs) instead of by a dense sweep, in place of SPARSE_RULE, for binary and weighted
   * detectors alike (0: always dense, > 1: always runs).
   */
  sparseFill?: number;
}

/**
 * When a detector is summed over runs of its own pixels rather than by a dense SIMD sweep of the
 * whole pattern: when `covered pixels + runWeight × runs < limit × detector pixels`. Measured
 * with `scripts/bench-detector-kernels.ts --sweep [--weighted] --dtype D` (annuli of growing
 * width over 128×128 patterns, a 128 MiB tile fresh from memory, and the same in cache) and
 * with scattered masks (many one-pixel runs). Runs cost per covered pixel plus a fixed cost per
 * run and skip what they do not cover; the sweep costs per detector pixel but streams the
 * pattern in order and serves several detectors from one load. 8/16-bit sweeps are cheapest,
 * float sweeps go through float64 and cost several times more.
 */
export const SPARSE_RULE: Record<DType, { binary: SparseRule; weighted: SparseRule }> = {
  uint8: { binary: { limit: 0.15, runWeight: 8 }, weighted: { limit: 0.75, runWeight: 4 } },
  int8: { binary: { limit: 0.15, runWeight: 8 }, weighted: { limit: 0.75, runWeight: 4 } },
  uint16: { binary: { limit: 0.2, runWeight: 8 }, weighted: { limit: 0.75, runWeight: 4 } },
  int16: { binary: { limit: 0.2, runWeight: 8 }, weighted: { limit: 0.75, runWeight: 4 } },
  uint32: { binary: { limit: 0.5, runWeight: 8 }, weighted: { limit: 0.75, runWeight: 4 } },
  int32: { binary: { limit: 0.5, runWeight: 8 }, weighted: { limit: 0.75, runWeight: 4 } },
  float32: { binary: { limit: 0.9, runWeight: 4 }, weighted: { limit: 0.75, runWeight: 4 } },
  float64: { binary: { limit: 0.6, runWeight: 4 }, weighted: { limit: 0.75, runWeight: 4 } },
};

export interface SparseRule {
  /** Fraction of the detector's pixels the runs may cost. */
  limit: number;
  /** What one run costs beyond its pixels, in pixels. */
  runWeight: number;
}

/** Runs (true) or the dense sweep: by the rule, or by plain fill when a tuning override is given. */
export function prefersRuns(covered: number, nRuns: number, nPix: number, rule: SparseRule, overrideFill?: number): boolean {
  if (overrideFill !== undefined) return covered / nPix < overrideFill;
  return covered + rule.runWeight * nRuns < rule.limit * nPix;
}

/** Detector kinds of the kernel's table (see wasm-src/virtual-image.ts). */
const KIND = { sparseRuns: 0, sparseWeighted: 1, denseBinary: 2, denseWeights: 3 } as const;
/** i32 words of one detector record: kind, n, a, b, image, and padding to 32 bytes. */
const RECORD_INTS = 8;
/** Longest run of the kernel's run lists: keeps its i32 lanes from overflowing within a run. */
const MAX_RUN = 32768;

interface Layout {
  table: number;
  acc: number;
  scratch: number;
  perDetector: { indices: number; weights: number; dense: number }[];
  unionMask: number;
  unionIndices: number;
  out: number;
  end: number;
}

type VirtualImageExport = (tile: number, nPatterns: number, nPix: number, table: number, nDet: number,
  union: number, unionCount: number, unionDense: number, scratch: number, acc: number, out: number) => number;

const EXPORT_NAMES = exportNames('virtualImages');

/** Lane masks in the data's width: 0xFF for 8-bit, the multiplier 1 for 16-bit (dot product), all-ones for 32-bit and float32. */
function writeLaneMask(buf: ArrayBuffer, at: number, elementBytes: number, padded: number, indices: Uint32Array) {
  if (elementBytes === 1) {
    const m = new Uint8Array(buf, at, padded).fill(0);
    for (const i of indices) m[i] = 0xff;
  } else if (elementBytes === 2) {
    const m = new Int16Array(buf, at, padded).fill(0);
    for (const i of indices) m[i] = 1;
  } else {
    const m = new Int32Array(buf, at, padded).fill(0);
    for (const i of indices) m[i] = -1;
  }
}

/** Sorted pixel indices as (first, length) runs of consecutive pixels, none longer than MAX_RUN. */
export function runsOf(indices: Uint32Array): Uint32Array {
  const runs: number[] = [];
  let k = 0;
  while (k < indices.length) {
    const first = indices[k];
    let length = 1;
    while (k + length < indices.length && indices[k + length] === first + length && length < MAX_RUN) length++;
    runs.push(first, length);
    k += length;
  }
  return Uint32Array.from(runs);
}

function countNonzero(a: Float64Array): number {
  let n = 0;
  for (let i = 0; i < a.length; i++) if (a[i] !== 0) n++;
  return n;
}

/** Pixels per block of the kernel's dense sweeps (wasm-src/virtual-image.ts BLOCK). */
const BLOCK = 1024;
/** Dense masks and weights are zero-padded to whole blocks of this many pixels (the kernel's sweeps take 32 at a time). */
const DENSE_ALIGN = 32;
/** Whole-vector sweeps read up to 31 elements (248 bytes) past the last pattern. */
const OVER_READ_SLACK = 512;

