// Worker thread entry: opens its own reader (positional reads for raw/.npy, its own h5wasm
// instance for HDF5), reads tiles straight into the kernel's memory and returns small
// partial results. Tiles never pass through the main thread.
import { parentPort } from 'node:worker_threads';
import * as Comlink from 'comlink';
import nodeEndpoint from 'comlink/dist/esm/node-adapter.mjs';
import type { SourceSpec, DatasetDescriptor } from '../../src-shared/model/dataset';
import { allocTyped, DTYPE_BYTES, type DType, type NumericArray } from '../../src-shared/model/dtype';
import type { CompiledDetector } from '../../src-shared/model/detectors';
import type { FirstPassGeometry, FirstPassKernel, FirstPassTileResult } from '../../src-shared/compute/first-pass-types';
import type { ComKernel, ComOptions, VirtualImageKernel } from '../../src-shared/compute/tile-kernels-types';
import { createReferenceKernel } from '../../src-shared/compute/first-pass';
import { createWasmFirstPassKernel } from '../../src-shared/compute/first-pass-wasm';
import { createReferenceVirtualImageKernel } from '../../src-shared/compute/virtual-image';
import { createWasmVirtualImageKernel } from '../../src-shared/compute/virtual-image-wasm';
import { createReferenceComKernel } from '../../src-shared/compute/com';
import { createWasmComKernel } from '../../src-shared/compute/com-wasm';
import { accumulateClusterSums, accumulateRegionPatterns } from '../../src-shared/compute/region-pattern';
import { binsAlignWithCrop, featuresFromBins, patternFeatures, type FeaturePlan, type FeatureRows } from '../../src-shared/compute/pattern-features';
import { coRangeRows, rangeBlock } from '../../src-shared/compute/randomized-svd';
import { fitRows, type FitPlan } from '../../src-shared/compute/reference-fit';
import { createWasmSketchKernel, type SketchKernel } from '../../src-shared/compute/sketch-wasm';
import { openTileSource, type TileSource } from '../io/index';
import type { ReaderMemory } from '../io/tile-source';
import { loadFastestWasmModule, loadWasmModule } from './wasm-loader';
import { keepErrorCodesAcrossThreads } from './error-transfer';
import fs from 'node:fs';
import { InputError } from '../../src-shared/model/errors';
import { filesOpenedByHdf5 } from '../io/h5wasm-module';
import { trace } from '../engine/trace';

keepErrorCodesAcrossThreads();

export type KernelKind = 'wasm' | 'reference';

export interface OpenReply {
  descriptor: DatasetDescriptor;
  rowAlignment: number;
  memory: ReaderMemory;
}

export interface KernelOptions {
  /** Largest tile this worker will be asked to read, in bytes. */
  maxTileBytes: number;
  kernel: KernelKind;
}

/** Where the time of one tile went, for benchmarks and diagnostics. */
export interface TileTiming {
  row0: number;
  nRows: number;
  bytes: number;
  readMs: number;
  computeMs: number;
}

export type FirstPassTileReply = Pick<FirstPassTileResult, 'sum' | 'max' | 'nonFinite'> & TileTiming & {
  /** Only for a tile holding NaN or ±Inf (float data): how many of its values each pixel lacks (detY × detX). */
  nonFinitePerPixel?: Float64Array;
  /** With a COM plan: the tile's centre-of-mass sums and the watched pixels' values (pattern-major). */
  com?: { total: Float64Array; sumX: Float64Array; sumY: Float64Array; nonFinite: number; watchValues: Float64Array; images: Float64Array | null };
};

/**
 * Centre-of-mass sums taken in the first pass, on the tile already in memory: over `mask`
 * (the whole detector less the watched pixels, or null for all of it), no threshold; and the
 * value of every watched pixel at every position, so pixels that turn out not to be bad can be
 * added back once the pass has found the real ones.
 */
export interface FirstPassComPlan {
  mask: CompiledDetector | null;
  watch: Uint32Array;
  /** Default virtual images taken along (bright field, annular dark field), or none. */
  images: CompiledDetector[];
}

/** The whole preview cube (float32) and total-intensity image (float64), shared with the main thread. */
export interface FirstPassShared {
  preview: SharedArrayBuffer;
  /** Where the cube starts in `preview` (it may live inside a WebAssembly memory). */
  previewByteOffset: number;
  total: SharedArrayBuffer;
  /** Preview values per preview row (qX × pY × pX). */
  previewRowValues: number;
}

function sharedOutputs(row0: number, nRows: number, g: FirstPassGeometry, shared: FirstPassShared) {
  const rows = Math.ceil(nRows / g.scanBin);
  return {
    preview: new Float32Array(shared.preview, shared.previewByteOffset + (row0 / g.scanBin) * shared.previewRowValues * 4, rows * shared.previewRowValues),
    total: new Float64Array(shared.total, row0 * g.scanX * 8, nRows * g.scanX),
  };
}
export type VirtualImagesTileReply = { images: Float64Array; nonFinite: number } & TileTiming;
export type ComTileReply = { total: Float64Array; sumX: Float64Array; sumY: Float64Array; nonFinite: number } & TileTiming;
/**
 * One tile of a PCA pass, in groups of `groupRows` scan rows (the tile holds whole groups): the
 * tile's rows of Y and each group's part of W = Cᵀ·Y are written into shared memory (Y in place,
 * W into the slots the main thread lent); the reply holds each group's column sums and sum of
 * squares, so the main thread can add the groups in scan order whatever the tiling.
 */
export type PcaTileReply = {
  groupColSum: Float64Array;
  groupSumSq: Float64Array;
  nonFinite: number;
  zeroPatterns: number;
} & TileTiming;

export type ClusterTileReply = { sums: Float64Array; counts: Float64Array; nonFinite: number; /** Per cluster and pixel, values left out (with any non-finite). */ lacking?: Float64Array } & TileTiming;

export type FeatureSumsReply = { sums: Float64Array; counts: Float64Array; nonFinite: number } & TileTiming;

export type RegionTileReply = { sum: Float64Array; max: Float64Array; count: number; nonFinite: number; /** Per pixel, values left out (with any non-finite). */ lacking?: Float64Array } & TileTiming;

/** This worker's place in its pool and what it may hold for a reader and its tiles. */
export interface WorkerConfig {
  index: number;
  memoryPerWorkerBytes?: number;
}
let config: WorkerConfig = { index: -1 };

/**
 * Open sources, most recently used last; several datasets can be open at once. Every request
 * names its source by spec, so jobs on different datasets never read each other's data.
 */
const sources = new Map<string, TileSource>();
const MAX_OPEN_SOURCES = 4;

/** The file each open source was opened from, to see it replaced under the same name. */
const openedAs = new WeakMap<TileSource, string>();

function fileState(path: string): string {
  try {
    const st = fs.statSync(path);
    return `${st.dev}:${st.ino}:${st.size}:${st.mtimeMs}`;
  } catch {
    return 'gone';
  }
}

function changedError(path: string): InputError {
  return new InputError(`${path}: the file changed on disk (moved, replaced or rewritten) since it was opened; open it again`, 'unreadable');
}

/** Opens under way, by spec: a second request for the same source (a warm-up, then a tile) waits for the first. */
const opening = new Map<string, Promise<TileSource>>();

/**
 * The open source for `spec`. A spec the engine got back from an open names one version of the
 * file (fileState): reading it after the file changed fails. A user's spec (no fileState) opens
 * the file as it is now, reopening a source whose file has changed.
 */
function sourceFor(spec: SourceSpec): Promise<TileSource> {
  const key = JSON.stringify(spec);
  const pending = opening.get(key);
  if (pending) return pending;
  const p = openOrReuse(spec, key);
  opening.set(key, p);
  const done = () => { if (opening.get(key) === p) opening.delete(key); };
  p.then(done, done);
  return p;
}

async function openOrReuse(spec: SourceSpec, key: string): Promise<TileSource> {
  const hit = sources.get(key);
  if (hit && openedAs.get(hit) === fileState(hit.descriptor.path)) {
    sources.delete(key);
    sources.set(key, hit);
    return hit;
  }
  if (hit) {
    for (const [k, v] of sources) if (v === hit) sources.delete(k);
    hit.close();
  }
  const { fileState: wanted, ...plain } = spec;
  const state = fileState(plain.path);
  if (wanted !== undefined && wanted !== state) throw changedError(plain.path);
  const src = await openTileSource(plain, { memoryPerWorkerBytes: config.memoryPerWorkerBytes });
  openedAs.set(src, state);
  // Jobs name this version of the file.
  src.descriptor.spec = { ...src.descriptor.spec, fileState: state };
  const resolvedKey = JSON.stringify(src.descriptor.spec);
  const same = sources.get(resolvedKey);
  if (same) {
    src.close();
    sources.set(key, same);
    return same;
  }
  sources.set(key, src);
  if (resolvedKey !== key) sources.set(resolvedKey, src);
  while (new Set(sources.values()).size > MAX_OPEN_SOURCES) {
    const oldest = sources.values().next().value!;
    for (const [k, v] of sources) if (v === oldest) sources.delete(k);
    oldest.close();
  }
  return src;
}

function closeSource(spec: SourceSpec): void {
  const src = sources.get(JSON.stringify(spec));
  if (!src) return;
  for (const [k, v] of sources) if (v === src) sources.delete(k);
  src.close();
}

/**
 * One WebAssembly memory per worker, shared by every kernel (they have no static data and only
 * one runs at a time): the memory budget counts one tile per worker, whichever analysis runs.
 * It grows to the largest tile planned and is never replaced.
 */
const workerMemory = new WebAssembly.Memory({ initial: 1 });
type AnyKernel = FirstPassKernel | VirtualImageKernel | ComKernel;
type KernelName = 'first-pass' | 'virtual-image' | 'com';
/** The kernels in use, at most one per kind (the first pass runs the COM kernel on its tiles too). */
const kernels = new Map<KernelName, { key: string; kernel: AnyKernel }>();

function kernelFor<K extends AnyKernel>(kind: KernelName, options: KernelOptions): K {
  const key = `${options.kernel}:${options.maxTileBytes}`;
  const hit = kernels.get(kind);
  if (hit && hit.key === key) return hit.kernel as K;
  let kernel: AnyKernel;
  if (options.kernel === 'wasm') {
    const module = loadWasmModule(kind);
    kernel = kind === 'first-pass' ? createWasmFirstPassKernel(module, options.maxTileBytes, workerMemory)
      : kind === 'virtual-image' ? createWasmVirtualImageKernel(module, options.maxTileBytes, {}, workerMemory)
        : createWasmComKernel(module, options.maxTileBytes, {}, workerMemory);
  } else {
    kernel = kind === 'first-pass' ? createReferenceKernel()
      : kind === 'virtual-image' ? createReferenceVirtualImageKernel()
        : createReferenceComKernel();
  }
  kernels.set(kind, { key, kernel });
  return kernel as K;
}

/** Element types whose bin sums of up to 8 × 8 pixels are exact in float32. */
const SMALL_INTEGER_DTYPES = new Set<DType>(['uint8', 'uint16', 'int8', 'int16']);

let sketch: SketchKernel | null = null;
function sketchKernel(): SketchKernel {
  sketch ??= createWasmSketchKernel(loadFastestWasmModule('sketch'));
  return sketch;
}

/** The feature vectors of a tile's patterns (nPatterns × nFeatures, in a reused scratch array). */
/**
 * A tile read for feature vectors: for 8/16-bit data through the first-pass kernel, whose
 * detector bins are exact sums (float32 holds 64 × 65535 < 2²⁴) and only the kept bins are then
 * gathered; otherwise the raw tile, binned in plain TypeScript. `features(p0, p1, out)` writes
 * the feature vectors of the tile's patterns p0 … p1 − 1 into `out`.
 */
function readForFeatures(src: TileSource, row0: number, nRows: number, plan: FeaturePlan, kernel: KernelKind) {
  const { dtype, shape } = src.descriptor;
  const nPix = shape.detY * shape.detX;
  const nPatterns = nRows * shape.scanX;
  const nElements = nPatterns * nPix;
  const t0 = performance.now();
  const viaBins = kernel === 'wasm' && SMALL_INTEGER_DTYPES.has(dtype) && binsAlignWithCrop(plan);
  const fk = viaBins ? kernelFor<FirstPassKernel>('first-pass', { kernel: 'wasm', maxTileBytes: nElements * DTYPE_BYTES[dtype] }) : null;
  const raw = fk ? fk.tileBuffer(dtype, nElements) : scratch('feature-raw', dtype, nElements);
  src.readRows(row0, nRows, raw);
  const readMs = performance.now() - t0;
  const t1 = performance.now();
  const pY = Math.ceil(shape.detY / plan.bin), pX = Math.ceil(shape.detX / plan.bin);
  // Into reused arrays: fresh ones per tile would pile up faster than the collector frees them.
  const bins = fk ? fk.run(dtype, nRows, { scanX: shape.scanX, detY: shape.detY, detX: shape.detX, detBin: plan.bin, scanBin: 1 },
    { preview: scratch('feature-bins', 'float32', nPatterns * pY * pX) as Float32Array, total: scratch('feature-totals', 'float64', nPatterns) as Float64Array }).preview : null;
  const binMs = performance.now() - t1;
  const features = (p0: number, p1: number, out: FeatureRows): { nonFinite: number; zeroPatterns: number } => bins
    ? { nonFinite: 0, ...featuresFromBins(bins.subarray(p0 * pY * pX, p1 * pY * pX), p1 - p0, pY, pX, plan, out) }
    : patternFeatures(raw.subarray(p0 * nPix, p1 * nPix), p1 - p0, plan, out);
  return { features, nPatterns, readMs, binMs, rawBytes: nElements * DTYPE_BYTES[dtype] };
}

/** The feature vectors of a tile's patterns (nPatterns × nFeatures, in a reused scratch array). */
function featuresOfTile(src: TileSource, row0: number, nRows: number, plan: FeaturePlan, kernel: KernelKind) {
  const t = readForFeatures(src, row0, nRows, plan, kernel);
  const t1 = performance.now();
  const features = scratch('features', 'float64', t.nPatterns * plan.nFeatures) as Float64Array;
  const f = t.features(0, t.nPatterns, features);
  return { features, ...f, readMs: t.readMs, computeMs: t.binMs + performance.now() - t1, rawBytes: t.rawBytes };
}

/** Buffers a worker reuses between tiles of plain-TypeScript work (grown, never shrunk; dropped with the kernels). */
const scratchBuffers = new Map<string, NumericArray>();
function scratch(name: string, dtype: DType, n: number): NumericArray {
  const key = `${name}:${dtype}`;
  const have = scratchBuffers.get(key);
  if (have && have.length >= n) return have.subarray(0, n);
  const fresh = allocTyped(dtype, n);
  scratchBuffers.set(key, fresh);
  return fresh;
}

/** Read rows straight into `buffer` (kernel memory) and time it. */
function readInto(src: TileSource, row0: number, nRows: number, buffer: (n: number) => NumericArray) {
  const d = src.descriptor;
  const n = nRows * d.shape.scanX * d.shape.detY * d.shape.detX;
  const t0 = performance.now();
  const tile = buffer(n);
  src.readRows(row0, nRows, tile);
  return { tile, n, bytes: n * DTYPE_BYTES[d.dtype], readMs: performance.now() - t0 };
}

const api = {
  /** Open (or keep open) the source; returns its descriptor and storage row alignment. */
  async open(spec: SourceSpec): Promise<OpenReply> {
    trace('worker: open');
    const source = await sourceFor(spec);
    trace('worker: opened');
    return { descriptor: source.descriptor, rowAlignment: source.rowAlignment, memory: source.memory };
  },

  /** Every file this worker has read data from (its sources, and what HDF5 opened for them). */
  filesRead(): { path: string; dev: number; ino: number }[] {
    const files = filesOpenedByHdf5();
    for (const src of new Set(sources.values())) {
      for (const f of src.descriptor.sourceFiles) {
        try {
          const st = fs.statSync(f);
          files.push({ path: f, dev: st.dev, ino: st.ino });
        } catch {
          // gone since it was opened; nothing to protect under that name
        }
      }
    }
    return files;
  },

  /** Forget a dataset (closed by the user). */
  closeSource(spec: SourceSpec): void {
    closeSource(spec);
  },

  /** The pattern at one probe position, as float64 (hover). */
  async readPattern(spec: SourceSpec, y: number, x: number): Promise<Float64Array> {
    const src = await sourceFor(spec);
    const { detY, detX } = src.descriptor.shape;
    const pattern = allocTyped(src.descriptor.dtype, detY * detX);
    src.readPattern(y, x, pattern);
    const out = Float64Array.from(pattern as ArrayLike<number>);
    return Comlink.transfer(out, [out.buffer]);
  },

  /**
   * One tile of the first pass. The preview rows and the totals go straight into the shared
   * arrays that hold the whole preview cube and total-intensity image; sum and max come back.
   */
  async firstPassTile(spec: SourceSpec, row0: number, nRows: number, geometry: FirstPassGeometry, options: KernelOptions, shared: FirstPassShared, com?: FirstPassComPlan): Promise<FirstPassTileReply> {
    const src = await sourceFor(spec);
    const k = kernelFor<FirstPassKernel>('first-pass', options);
    const ck = com ? kernelFor<ComKernel>('com', options) : null;
    const dtype = src.descriptor.dtype;
    const { tile, n, bytes, readMs } = readInto(src, row0, nRows, (n) => k.tileBuffer(dtype, n));
    const t1 = performance.now();
    const nPatterns = nRows * geometry.scanX;
    const nPix = geometry.detY * geometry.detX;
    let watchValues: Float64Array | null = null;
    let copy: NumericArray | null = null;
    if (com) {
      // Views of kernel memory may detach when a run grows it: take what is needed first.
      const watch = com.watch;
      watchValues = new Float64Array(nPatterns * watch.length);
      for (let p = 0, o = 0; p < nPatterns; p++) for (let j = 0; j < watch.length; j++) watchValues[o++] = tile[p * nPix + watch[j]];
      // The WebAssembly kernels share the worker's memory and tile offset; the reference kernels do not.
      if (options.kernel !== 'wasm') copy = tile.slice();
    }
    const out = sharedOutputs(row0, nRows, geometry, shared);
    const r = k.run(dtype, nRows, geometry, out);
    const transfers: ArrayBuffer[] = [r.sum.buffer as ArrayBuffer, r.max.buffer as ArrayBuffer];
    // Float data with NaN or ±Inf: which pixels lacked values, so the mean pattern divides each
    // pixel's sum by its own count of finite values (a SIMD scan of the tile, only where any).
    let nonFinitePerPixel: Float64Array | undefined;
    if (r.nonFinite > 0) {
      nonFinitePerPixel = k.nonFiniteCounts(dtype, nPatterns, nPix);
      transfers.push(nonFinitePerPixel.buffer as ArrayBuffer);
    }
    let comReply: FirstPassTileReply['com'];
    if (com && ck) {
      ck.setOptions({ mask: com.mask, threshold: 0 }, geometry.detY, geometry.detX);
      const view = ck.tileBuffer(dtype, n);
      if (copy) view.set(copy as never);
      const c = ck.run(dtype, nPatterns);
      // The default images, from the same tile (the kernels share the worker's memory).
      let images: Float64Array | null = null;
      if (com.images.length) {
        const vk = kernelFor<VirtualImageKernel>('virtual-image', options);
        vk.setDetectors(com.images);
        const vview = vk.tileBuffer(dtype, n);
        if (copy) vview.set(copy as never);
        images = vk.run(dtype, nPatterns).images;
        transfers.push(images.buffer as ArrayBuffer);
      }
      comReply = { total: c.total, sumX: c.sumX, sumY: c.sumY, nonFinite: c.nonFinite, watchValues: watchValues!, images };
      transfers.push(c.total.buffer as ArrayBuffer, c.sumX.buffer as ArrayBuffer, c.sumY.buffer as ArrayBuffer, watchValues!.buffer as ArrayBuffer);
    }
    const reply: FirstPassTileReply = {
      sum: r.sum, max: r.max, nonFinite: r.nonFinite, row0, nRows, bytes, readMs, computeMs: performance.now() - t1,
      ...(nonFinitePerPixel ? { nonFinitePerPixel } : {}), ...(comReply ? { com: comReply } : {}),
    };
    return Comlink.transfer(reply, transfers);
  },

  async virtualImagesTile(spec: SourceSpec, row0: number, nRows: number, detectors: CompiledDetector[], options: KernelOptions): Promise<VirtualImagesTileReply> {
    const src = await sourceFor(spec);
    const k = kernelFor<VirtualImageKernel>('virtual-image', options);
    const dtype = src.descriptor.dtype;
    const { n, bytes, readMs } = readInto(src, row0, nRows, (n) => k.tileBuffer(dtype, n));
    void n;
    const t1 = performance.now();
    k.setDetectors(detectors);
    const r = k.run(dtype, nRows * src.descriptor.shape.scanX);
    const reply: VirtualImagesTileReply = { images: r.images, nonFinite: r.nonFinite, row0, nRows, bytes, readMs, computeMs: performance.now() - t1 };
    return Comlink.transfer(reply, [r.images.buffer as ArrayBuffer]);
  },

  async comTile(spec: SourceSpec, row0: number, nRows: number, com: ComOptions, options: KernelOptions): Promise<ComTileReply> {
    const src = await sourceFor(spec);
    const k = kernelFor<ComKernel>('com', options);
    const { dtype, shape } = src.descriptor;
    const { bytes, readMs } = readInto(src, row0, nRows, (n) => k.tileBuffer(dtype, n));
    const t1 = performance.now();
    k.setOptions(com, shape.detY, shape.detX);
    const r = k.run(dtype, nRows * shape.scanX);
    const reply: ComTileReply = { ...r, row0, nRows, bytes, readMs, computeMs: performance.now() - t1 };
    return Comlink.transfer(reply, [r.total.buffer, r.sumX.buffer, r.sumY.buffer] as ArrayBuffer[]);
  },

  /** One tile of a PCA pass (see PcaTileReply): features of every pattern, then Y = C·Z and W = Cᵀ·Y by groups of rows. */
  async pcaTile(spec: SourceSpec, row0: number, nRows: number, groupRows: number, plan: FeaturePlan, z: Float64Array, l: number, centre: Float64Array | null,
    kernel: KernelKind, yAll: Float64Array, wSlots: Float64Array, slotIds: Int32Array, coRange?: { s: number; seed: number }): Promise<PcaTileReply> {
    const src = await sourceFor(spec);
    const { shape } = src.descriptor;
    const d = plan.nFeatures;
    const tile = readForFeatures(src, row0, nRows, plan, kernel);
    const { nPatterns, readMs, rawBytes } = tile;
    const t1 = performance.now() - tile.binMs;
    const sk = kernel === 'wasm' ? sketchKernel() : null;
    const groups = Math.ceil(nRows / groupRows);
    // Y rows and each group's W go straight into the shared arrays (see PcaTileReply).
    const y = yAll.subarray(row0 * shape.scanX * l, (row0 * shape.scanX + nPatterns) * l);
    const groupColSum = new Float64Array(groups * d);
    const groupSumSq = new Float64Array(groups);
    let nonFinite = 0, zeroPatterns = 0;
    for (let g = 0; g < groups; g++) {
      const p0 = g * groupRows * shape.scanX;
      const p1 = Math.min(nRows, (g + 1) * groupRows) * shape.scanX;
      const m = p1 - p0;
      // Features go straight into the kernel's memory (or a scratch array for the reference).
      const rows: FeatureRows = sk ? sk.rows(m, d, l, coRange?.s ?? 0) : scratch('pca-features', 'float64', m * d) as Float64Array;
      const f = tile.features(p0, p1, rows);
      nonFinite += f.nonFinite;
      zeroPatterns += f.zeroPatterns;
      const wl = coRange ? coRange.s : l;
      const into = { y: y.subarray(p0 * l, p1 * l), w: wSlots.subarray(slotIds[g] * d * wl, (slotIds[g] + 1) * d * wl) };
      // The one-pass sketch's co-range rows, by position (so any tiling draws the same).
      const first = row0 * shape.scanX + p0;
      const psi = coRange ? { rows: coRangeRows(first, first + m, coRange.s, coRange.seed), s: coRange.s } : undefined;
      const b = sk ? sk.run(m, d, z, l, centre, into, psi) : rangeBlock(rows as Float64Array, m, d, z, l, centre, psi);
      if (!sk) { into.y.set(b.y); into.w.set(b.w); }
      groupColSum.set(b.colSum, g * d);
      groupSumSq[g] = b.sumSq;
    }
    const reply: PcaTileReply = {
      groupColSum, groupSumSq, nonFinite, zeroPatterns,
      row0, nRows, bytes: rawBytes, readMs, computeMs: performance.now() - t1,
    };
    return Comlink.transfer(reply, [groupColSum.buffer, groupSumSq.buffer]);
  },

  /** Per-cluster sums of the patterns of rows [row0, row0+nRows), by the labels of their positions. */
  async clusterSumsTile(spec: SourceSpec, row0: number, nRows: number, labels: Int32Array, k: number, kernel: KernelKind = 'wasm'): Promise<ClusterTileReply> {
    const src = await sourceFor(spec);
    const { dtype, shape } = src.descriptor;
    const pixels = shape.detY * shape.detX;
    const n = nRows * shape.scanX;
    const t0 = performance.now();
    // uint16 (the common detector type) in the WebAssembly kernel; other types in plain TypeScript.
    const sk = kernel === 'wasm' && dtype === 'uint16' ? sketchKernel() : null;
    const raw = sk ? sk.patternsU16(n, pixels, k) : scratch('cluster-raw', dtype, n * pixels);
    src.readRows(row0, nRows, raw);
    const readMs = performance.now() - t0;
    const t1 = performance.now();
    let sums: Float64Array;
    const counts = new Float64Array(k);
    let nonFinite = 0;
    let lacking: Float64Array | null = null;
    if (sk) {
      sums = sk.clusterSums(n, pixels, labels, k);
      for (let p = 0; p < n; p++) counts[labels[p]]++;
    } else {
      sums = new Float64Array(k * pixels);
      lacking = new Float64Array(k * pixels);
      nonFinite = accumulateClusterSums(raw, n, pixels, labels, k, sums, counts, lacking).nonFinite;
    }
    const reply: ClusterTileReply = {
      sums, counts, nonFinite, ...(nonFinite > 0 && lacking ? { lacking } : {}), row0, nRows, bytes: n * pixels * DTYPE_BYTES[dtype], readMs, computeMs: performance.now() - t1,
    };
    return Comlink.transfer(reply, [sums.buffer, counts.buffer]);
  },

  /**
   * One tile of a streamed k-means iteration on feature vectors: each pattern's nearest centre
   * (written into the shared labels), and per cluster the sum of its vectors and its count.
   */
  async kmeansTile(spec: SourceSpec, row0: number, nRows: number, plan: FeaturePlan, kernel: KernelKind, centers: Float64Array, k: number,
    labels: Int32Array): Promise<{ sums: Float64Array; counts: Float64Array; inertia: number; changed: number; nonFinite: number } & TileTiming> {
    const src = await sourceFor(spec);
    const f = featuresOfTile(src, row0, nRows, plan, kernel);
    const t1 = performance.now();
    const n = nRows * src.descriptor.shape.scanX, d = plan.nFeatures, at = row0 * src.descriptor.shape.scanX;
    const sums = new Float64Array(k * d), counts = new Float64Array(k);
    let inertia = 0, changed = 0;
    for (let p = 0; p < n; p++) {
      const off = p * d;
      let best = 0, bestD = Infinity;
      for (let c = 0; c < k; c++) {
        let s2 = 0;
        const co = c * d;
        for (let x = 0; x < d; x++) { const v = f.features[off + x] - centers[co + x]; s2 += v * v; }
        if (s2 < bestD) { bestD = s2; best = c; }
      }
      if (labels[at + p] !== best) { labels[at + p] = best; changed++; }
      inertia += bestD;
      counts[best]++;
      for (let x = 0; x < d; x++) sums[best * d + x] += f.features[off + x];
    }
    const reply = { sums, counts, inertia, changed, nonFinite: f.nonFinite, row0, nRows, bytes: f.rawBytes, readMs: f.readMs, computeMs: f.computeMs + performance.now() - t1 };
    return Comlink.transfer(reply, [sums.buffer, counts.buffer]);
  },

  /** The feature vectors of the patterns of rows [row0, row0+nRows) (a k-means sample). */
  async featureRowsTile(spec: SourceSpec, row0: number, nRows: number, plan: FeaturePlan, kernel: KernelKind): Promise<{ features: Float64Array; nonFinite: number } & TileTiming> {
    const src = await sourceFor(spec);
    const f = featuresOfTile(src, row0, nRows, plan, kernel);
    const features = f.features.slice(0, nRows * src.descriptor.shape.scanX * plan.nFeatures);
    const reply = { features, nonFinite: f.nonFinite, row0, nRows, bytes: f.rawBytes, readMs: f.readMs, computeMs: f.computeMs };
    return Comlink.transfer(reply, [features.buffer]);
  },

  /** Sums of the feature vectors of the positions in each of r regions (masks r × the tile's positions), and their counts. */
  async regionFeatureSumsTile(spec: SourceSpec, row0: number, nRows: number, plan: FeaturePlan, kernel: KernelKind, masks: Uint8Array, r: number): Promise<FeatureSumsReply> {
    const src = await sourceFor(spec);
    const f = featuresOfTile(src, row0, nRows, plan, kernel);
    const t1 = performance.now();
    const n = nRows * src.descriptor.shape.scanX, d = plan.nFeatures;
    const sums = new Float64Array(r * d), counts = new Float64Array(r);
    for (let i = 0; i < r; i++) {
      for (let p = 0; p < n; p++) {
        if (!masks[i * n + p]) continue;
        counts[i]++;
        for (let x = 0; x < d; x++) sums[i * d + x] += f.features[p * d + x];
      }
    }
    const reply: FeatureSumsReply = { sums, counts, nonFinite: f.nonFinite, row0, nRows, bytes: f.rawBytes, readMs: f.readMs, computeMs: f.computeMs + performance.now() - t1 };
    return Comlink.transfer(reply, [sums.buffer, counts.buffer]);
  },

  /** The reference fit of every pattern of rows [row0, row0+nRows), written into the shared coefficient (N × r) and residual (N) arrays. */
  async fitTile(spec: SourceSpec, row0: number, nRows: number, plan: FeaturePlan, kernel: KernelKind, fit: FitPlan, nonnegative: boolean,
    coefficients: Float64Array, residual: Float64Array): Promise<{ nonFinite: number; zeroPatterns: number } & TileTiming> {
    const src = await sourceFor(spec);
    const f = featuresOfTile(src, row0, nRows, plan, kernel);
    const t1 = performance.now();
    const n = nRows * src.descriptor.shape.scanX;
    const at = row0 * src.descriptor.shape.scanX;
    const r = fitRows(f.features, n, fit, nonnegative);
    coefficients.set(r.coefficients, at * fit.r);
    residual.set(r.residual, at);
    return { nonFinite: f.nonFinite, zeroPatterns: f.zeroPatterns, row0, nRows, bytes: f.rawBytes, readMs: f.readMs, computeMs: f.computeMs + performance.now() - t1 };
  },

  /** Sum and max pattern over the selected positions of rows [row0, row0+nRows). */
  async regionPatternTile(spec: SourceSpec, row0: number, nRows: number, select: Uint8Array): Promise<RegionTileReply> {
    const src = await sourceFor(spec);
    const { dtype, shape } = src.descriptor;
    const pixels = shape.detY * shape.detX;
    // Rows are read one at a time: a region usually touches few positions per row.
    const t0 = performance.now();
    const rowBuf = allocTyped(dtype, shape.scanX * pixels);
    const sum = new Float64Array(pixels);
    const max = new Float64Array(pixels).fill(-Infinity);
    const lacking = new Float64Array(pixels);
    let count = 0, nonFinite = 0, readMs = 0, bytes = 0;
    for (let r = 0; r < nRows; r++) {
      const sel = select.subarray(r * shape.scanX, (r + 1) * shape.scanX);
      if (!sel.some((v) => v !== 0)) continue;
      const tr = performance.now();
      src.readRows(row0 + r, 1, rowBuf);
      readMs += performance.now() - tr;
      bytes += rowBuf.byteLength;
      const a = accumulateRegionPatterns(rowBuf, shape.scanX, pixels, sel, sum, max, lacking);
      count += a.count;
      nonFinite += a.nonFinite;
    }
    const computeMs = performance.now() - t0 - readMs;
    return Comlink.transfer({ sum, max, count, nonFinite, ...(nonFinite > 0 ? { lacking } : {}), row0, nRows, bytes, readMs, computeMs }, [sum.buffer, max.buffer]);
  },

  close(): void {
    for (const src of new Set(sources.values())) src.close();
    sources.clear();
    kernels.clear();
    scratchBuffers.clear();
    sketch = null;
  },

  /** The pool's first message to a worker (which may have started before the pool, see prestart.ts). */
  configure(c: WorkerConfig): void {
    config = { ...c };
  },

  ping(): number {
    return config.index;
  },
};

export type TileWorkerApi = typeof api;

if (parentPort) Comlink.expose(api, nodeEndpoint(parentPort as never));
trace('worker: ready');
