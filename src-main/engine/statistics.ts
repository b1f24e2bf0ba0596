import type { DatasetDescriptor, SourceSpec } from '../../src-shared/model/dataset';
import { DTYPE_BYTES } from '../../src-shared/model/dtype';
import { CancelledError, InputError } from '../../src-shared/model/errors';
import type { FeaturePlan } from '../../src-shared/compute/pattern-features';
import { meanOfRows, randomizedPca, sampleGrid, type PassSums, type PcaOptions, type PcaResult } from '../../src-shared/compute/pca';
import { planFit } from '../../src-shared/compute/reference-fit';
import { kmeans } from '../../src-shared/compute/kmeans';
import { patternFeatures } from '../../src-shared/compute/pattern-features';
import { coRangeRows } from '../../src-shared/compute/randomized-svd';
import { createWasmSketchKernel } from '../../src-shared/compute/sketch-wasm';
import { loadFastestWasmModule } from '../workers/wasm-loader';
import type { PreviewCube } from './first-pass';
import { MiB, planTiles, type EngineLimits } from './budget';
import { Job } from './job';
import { runTiles } from './tile-runner';
import type { WorkerPool } from './worker-pool';
import type { KernelKind } from '../workers/tile-worker';

export interface PcaJobResult {
  descriptor: DatasetDescriptor;
  pca: PcaResult;
  zeroPatterns: number;
  seconds: number;
}

/**
 * Folds parts in the order of `keys` (scan order), whatever order they arrive in, so sums do not
 * depend on which tile finished first. Returns the function that hands in the part for a key.
 */
function inScanOrder<T>(keys: readonly number[], fold: (part: T) => void): (key: number, part: T) => void {
  const waiting = new Map<number, T>();
  let next = 0;
  return (key, part) => {
    waiting.set(key, part);
    while (next < keys.length && waiting.has(keys[next])) {
      const p = waiting.get(keys[next])!;
      waiting.delete(keys[next++]);
      fold(p);
    }
  };
}

function shared(a: Float64Array): Float64Array {
  const s = new Float64Array(new SharedArrayBuffer(a.byteLength));
  s.set(a);
  return s;
}

/** Raw bytes per group of rows whose partial sums are added in scan order (see PcaTileReply). */
const GROUP_BYTES = 2 * MiB;

/**
 * PCA of every pattern's feature vector, streamed: q + 1 passes over the data through the pool
 * (randomizedPca drives them). Within a pass the partial sums of fixed groups of scan rows are
 * added in scan order, whatever tile finishes first, so the same input and seed give the same
 * output for any number of workers or memory budget.
 */
export function startPca(pool: WorkerPool, spec: SourceSpec, plan: FeaturePlan, options: PcaOptions, limits: EngineLimits, kernel: KernelKind): Job<PcaJobResult> {
  const job = new Job<PcaJobResult>('pca', `PCA of ${spec.path}`, 0);
  (async () => {
    const t0 = performance.now();
    const { descriptor: d, rowAlignment, memory } = await pool.run((w) => w.open(spec));
    if (job.cancelled) return;
    const { scanY, scanX, detY, detX } = d.shape;
    const n = scanY * scanX;
    const dim = plan.nFeatures;
    const l = Math.min(options.components + options.oversample, n, dim);
    const patternBytes = detY * detX * DTYPE_BYTES[d.dtype];
    const rowBytes = scanX * patternBytes;
    // Groups of whole rows, a multiple of the storage's row alignment (HDF5 chunks), so tiles of
    // whole groups need no larger unit than other jobs'.
    const align = Math.max(1, rowAlignment);
    const groupRows = Math.min(scanY, align * Math.max(1, Math.floor(GROUP_BYTES / (rowBytes * align))));
    // Per worker beside its tile: with 8/16-bit data the tile sits in the bin kernel's memory
    // (half a tile of slack) which also holds the detector bins it writes (float32), copied out
    // once; a group's feature vectors (float32) and its Y and W in the sketch kernel.
    const binsRatio = 4 / (DTYPE_BYTES[d.dtype] * plan.bin * plan.bin);
    const viaBins = kernel === 'wasm' && DTYPE_BYTES[d.dtype] <= 2 && !d.dtype.startsWith('float');
    const extraCopies = viaBins ? 0.5 + 2 * binsRatio : 0;
    const sketchCols = options.onePass ? Math.min(2 * l + 1, n) : l;
    // In the kernel: the rows, Y (L columns) and the one-pass Ψ (S), float32, sketch widths padded
    // to 8; Z and W (D × L, D × max(L, S)); Ψ's rows as made in float64 beside it.
    const L8 = Math.ceil(l / 8) * 8, S8 = options.onePass ? Math.ceil(sketchCols / 8) * 8 : 0;
    const perWorkerGroup = groupRows * scanX * (dim * 4 + L8 * 4 + S8 * 4 + (options.onePass ? sketchCols * 8 : 0)) + dim * (L8 + Math.max(L8, S8)) * 4;
    // Slots of partial W (D × sketch columns each) for every worker's tile in flight and one more
    // tile's waiting to be added in scan order; a lane waits for a free slot rather than fail.
    const slotBytes = dim * sketchCols * 8;
    const slotsFor = (groupsPerTile: number) => (limits.workers + 1) * groupsPerTile;
    // On the main thread: Y, and at the end its orthonormal basis, U and the loadings (N × l each);
    // W, Z (D × sketch columns each), the slots; a few D-vectors; each worker's group; the
    // sampled patterns for the provisional centre (one per worker at a time).
    const reservedFor = (groupsPerTile: number) => 4 * n * l * 8 + slotBytes * (3 + slotsFor(groupsPerTile)) + dim * 8 * 4 + limits.workers * perWorkerGroup
      + limits.workers * detY * detX * 8;
    const reader = { rowAlignment, memory: { ...memory, tileCopies: memory.tileCopies + extraCopies } };
    let tp = planTiles(d, reader, limits, reservedFor(1), groupRows);
    // The tiles' height sets how many groups a tile holds: plan again with their slots counted.
    if (tp.tileRows / groupRows > 1) tp = planTiles(d, reader, limits, reservedFor(tp.tileRows / groupRows), groupRows);
    const dataBytes = tp.tiles.reduce((s, t) => s + t.bytes, 0);
    job.bytesTotal = dataBytes * (options.onePass ? 1 : options.powerIterations + 1);
    let zeroPatterns = 0;
    let passIndex = 0;
    // Y and the groups' partial W are written by the workers into shared memory, never sent in
    // replies: fresh buffers per tile would pile up faster than the collector frees them.
    const groupsPerTile = tp.tileRows / groupRows;
    const slotCount = slotsFor(groupsPerTile);
    const wCols = sketchCols;
    const slots = new Float64Array(new SharedArrayBuffer(slotCount * slotBytes));
    const freeSlots = Array.from({ length: slotCount }, (_, i) => i);
    const groupKeys = Array.from({ length: Math.ceil(scanY / groupRows) }, (_, g) => g);
    const slotWaiters: (() => void)[] = [];
    /** Slots for a tile's groups: at once if free, else after an earlier tile's groups are added. */
    const takeSlots = async (groups: number): Promise<Int32Array> => {
      while (freeSlots.length < groups) await new Promise<void>((resolve) => slotWaiters.push(resolve));
      return Int32Array.from(freeSlots.splice(0, groups));
    };
    const pass = async (zLocal: Float64Array, centreLocal: Float64Array | null, coRange?: { s: number; seed: number }): Promise<PassSums> => {
      passIndex++;
      // Z and the centre go to every tile: in shared memory they are not copied into each message.
      const z = shared(zLocal);
      const centre = centreLocal ? shared(centreLocal) : null;
      const y = new Float64Array(new SharedArrayBuffer(n * l * 8));
      const wl = coRange ? coRange.s : l;
      const w = new Float64Array(dim * wl);
      const colSum = new Float64Array(dim);
      let sumSq = 0;
      let nonFinite = 0;
      const slotsOfTile = new Map<number, Int32Array>();
      const addGroup = inScanOrder<{ slot: number; colSum: Float64Array; sumSq: number }>(groupKeys, (part) => {
        const from = part.slot * dim * wl;
        for (let x = 0; x < w.length; x++) w[x] += slots[from + x];
        for (let j = 0; j < dim; j++) colSum[j] += part.colSum[j];
        sumSq += part.sumSq;
        freeSlots.push(part.slot);
      });
      await runTiles({
        pool, job, spec: d.spec, tiles: tp.tiles,
        compute: async (worker, tile) => {
          const ids = await takeSlots(Math.ceil(tile.nRows / groupRows));
          slotsOfTile.set(tile.row0, ids);
          return worker.pcaTile(d.spec, tile.row0, tile.nRows, groupRows, plan, z, l, centre, kernel, y, slots, ids, coRange);
        },
        merge: (r, tile) => {
          const ids = slotsOfTile.get(tile.row0)!;
          slotsOfTile.delete(tile.row0);
          const g0 = tile.row0 / groupRows;
          for (let g = 0; g < ids.length; g++) {
            addGroup(g0 + g, { slot: ids[g], colSum: r.groupColSum.subarray(g * dim, (g + 1) * dim), sumSq: r.groupSumSq[g] });
          }
          for (const wake of slotWaiters.splice(0)) wake();
          nonFinite += r.nonFinite;
          if (passIndex === 1) zeroPatterns += r.zeroPatterns;
        },
      });
      if (job.cancelled) throw new CancelledError();
      if (nonFinite > 0) {
        throw new InputError(`${d.path}: the data hold ${nonFinite} NaN or ±Inf value(s) inside the features; expected finite data for PCA (crop them away, or leave such bins out)`, 'bad-input');
      }
      if (passIndex === 1 && zeroPatterns === n) {
        throw new InputError(`${d.path}: every pattern's features sum to zero; expected data with counts for PCA`, 'bad-input');
      }
      return { y, w, colSum, sumSq };
    };
    // A provisional centre for the first pass, from a sample of patterns (see PcaOptions): read
    // as many at once as there are workers, each made into its features in the sample's order
    // (the same sum for any number of workers), so only that many patterns are held at a time.
    let provisionalCentre: Float64Array | null = null;
    if (options.centre !== false) {
      const rows = sampleGrid(scanY, scanX);
      const sum = new Float64Array(dim), row = new Float64Array(dim);
      for (let s0 = 0; s0 < rows.length && !job.cancelled; s0 += pool.size) {
        const batch = rows.slice(s0, s0 + pool.size);
        const patterns = await Promise.all(batch.map((i) => pool.run((w) => w.readPattern(d.spec, Math.floor(i / scanX), i % scanX))));
        for (const p of patterns) {
          patternFeatures(p, 1, plan, row);
          for (let j = 0; j < dim; j++) sum[j] += row[j];
        }
      }
      provisionalCentre = sum.map((v) => v / rows.length);
    }
    if (job.cancelled) return;
    const pca = await randomizedPca(pass, n, dim, { ...options, provisionalCentre });
    if (job.cancelled) return;
    if (!(pca.totalVariance > 0) || pca.k === 0) {
      throw new InputError(`${d.path}: every pattern has the same features (no variance), so there are no components; expected patterns that differ`, 'bad-input');
    }
    job.succeed({ descriptor: d, pca, zeroPatterns, seconds: (performance.now() - t0) / 1000 });
  })().catch((e) => job.fail(e));
  return job;
}

export interface FitJobResult {
  descriptor: DatasetDescriptor;
  /** r × D: each reference, the mean feature vector over its region. */
  references: Float64Array;
  /** Positions in each region. */
  counts: Float64Array;
  /** N × r: each position's weight of each reference. */
  coefficients: Float64Array;
  /** N: ‖f − Rᵀc‖ / ‖f‖ per position. */
  residual: Float64Array;
  zeroPatterns: number;
  seconds: number;
}

/**
 * The reference fit: one pass (over the tiles the regions touch) for each region's mean feature
 * vector, then one pass fitting every pattern as a combination of them (see reference-fit.ts).
 */
export function startReferenceFit(pool: WorkerPool, spec: SourceSpec, plan: FeaturePlan, regions: Uint8Array[], nonnegative: boolean,
  limits: EngineLimits, kernel: KernelKind): Job<FitJobResult> {
  const job = new Job<FitJobResult>('reference-fit', `reference fit of ${spec.path}`, 0);
  (async () => {
    const t0 = performance.now();
    const { descriptor: d, rowAlignment, memory } = await pool.run((w) => w.open(spec));
    if (job.cancelled) return;
    const { scanY, scanX, detY, detX } = d.shape;
    const n = scanY * scanX, dim = plan.nFeatures, r = regions.length;
    regions.forEach((m, i) => {
      if (m.length !== n) throw new InputError(`reference region ${i + 1}: ${m.length} positions, but ${d.path} has ${n}`);
      if (!m.some((v) => v !== 0)) throw new InputError(`reference region ${i + 1} holds no probe position; expected a region inside the ${scanY}×${scanX} scan`, 'bad-request');
    });
    const patternBytes = detY * detX * DTYPE_BYTES[d.dtype];
    const featureCopies = 1 + (dim * 8) / patternBytes;
    const reserved = n * (r + 1) * 8 * 2 + r * dim * 8 * (limits.workers + 3);
    const tp = planTiles(d, { rowAlignment, memory: { ...memory, tileCopies: memory.tileCopies + featureCopies } }, limits, reserved);
    const touched = tp.tiles.filter((t) => regions.some((m) => m.subarray(t.row0 * scanX, (t.row0 + t.nRows) * scanX).some((v) => v !== 0)));
    job.bytesTotal = touched.reduce((s, t) => s + t.bytes, 0) + tp.tiles.reduce((s, t) => s + t.bytes, 0);
    // Pass 1: each region's feature sums (added in scan order, so any tiling gives the same references).
    const sums = new Float64Array(r * dim), counts = new Float64Array(r);
    const addTile = inScanOrder<{ sums: Float64Array; counts: Float64Array }>(touched.map((t) => t.row0), (q) => {
      for (let i = 0; i < sums.length; i++) sums[i] += q.sums[i];
      for (let i = 0; i < r; i++) counts[i] += q.counts[i];
    });
    let nonFinite = 0;
    await runTiles({
      pool, job, spec: d.spec, tiles: touched,
      compute: (w, tile) => {
        const m = tile.nRows * scanX, at = tile.row0 * scanX;
        const masks = new Uint8Array(r * m);
        regions.forEach((reg, i) => masks.set(reg.subarray(at, at + m), i * m));
        return w.regionFeatureSumsTile(d.spec, tile.row0, tile.nRows, plan, kernel, masks, r);
      },
      merge: (p, tile) => {
        nonFinite += p.nonFinite;
        addTile(tile.row0, p);
      },
    });
    if (job.cancelled) return;
    if (nonFinite > 0) throw new InputError(`${d.path}: the data hold ${nonFinite} NaN or ±Inf value(s) inside the features; expected finite data for the fit`, 'bad-input');
    const references = sums.map((v, i) => v / counts[Math.floor(i / dim)]);
    const fit = planFit(references, r, dim);
    // Pass 2: every pattern, written by the workers into shared arrays.
    const coefficients = new Float64Array(new SharedArrayBuffer(n * r * 8));
    const residual = new Float64Array(new SharedArrayBuffer(n * 8));
    let zeroPatterns = 0;
    await runTiles({
      pool, job, spec: d.spec, tiles: tp.tiles,
      compute: (w, tile) => w.fitTile(d.spec, tile.row0, tile.nRows, plan, kernel, fit, nonnegative, coefficients, residual),
      merge: (p) => { nonFinite += p.nonFinite; zeroPatterns += p.zeroPatterns; },
    });
    if (job.cancelled) return;
    if (nonFinite > 0) throw new InputError(`${d.path}: the data hold ${nonFinite} NaN or ±Inf value(s) inside the features; expected finite data for the fit`, 'bad-input');
    job.succeed({ descriptor: d, references, counts, coefficients: Float64Array.from(coefficients), residual: Float64Array.from(residual), zeroPatterns, seconds: (performance.now() - t0) / 1000 });
  })().catch((e) => job.fail(e));
  return job;
}

/**
 * PCA of the preview cube, in memory, for an answer within seconds while the exact job reads the
 * data: each preview position (a scan bin) is one row, its detector bins the pixels that `plan`
 * bins further. The products run in the WebAssembly kernel on this thread, block by block, so
 * the feature matrix is never built whole.
 */
export async function previewPca(cube: PreviewCube, plan: FeaturePlan, options: PcaOptions): Promise<{ pca: PcaResult; zeroPatterns: number }> {
  const n = cube.qY * cube.qX;
  const dim = plan.nFeatures;
  const binsPerRow = cube.pY * cube.pX;
  const data = cube.imager ? cube.imager.cube() : cube.data;
  const sk = createWasmSketchKernel(loadFastestWasmModule('sketch'));
  const BLOCK = 256;
  let zeroPatterns = 0;
  let first = true;
  const pass = async (z: Float64Array, centre: Float64Array | null, coRange?: { s: number; seed: number }): Promise<PassSums> => {
    const l = z.length / dim;
    const wl = coRange ? coRange.s : l;
    const y = new Float64Array(n * l), w = new Float64Array(dim * wl), colSum = new Float64Array(dim), part = new Float64Array(dim * wl);
    let sumSq = 0;
    for (let i0 = 0; i0 < n; i0 += BLOCK) {
      const m = Math.min(BLOCK, n - i0);
      const rows = sk.rows(m, dim, l, coRange?.s ?? 0);
      const f = patternFeatures(data.subarray(i0 * binsPerRow, (i0 + m) * binsPerRow), m, plan, rows);
      if (first) zeroPatterns += f.zeroPatterns;
      const psi = coRange ? { rows: coRangeRows(i0, i0 + m, coRange.s, coRange.seed), s: coRange.s } : undefined;
      const b = sk.run(m, dim, z, l, centre, { y: y.subarray(i0 * l, (i0 + m) * l), w: part }, psi);
      for (let x = 0; x < w.length; x++) w[x] += part[x];
      for (let j = 0; j < dim; j++) colSum[j] += b.colSum[j];
      sumSq += b.sumSq;
      // Let other requests (a hover, a drag) in between blocks.
      await new Promise((resolve) => setImmediate(resolve));
    }
    first = false;
    return { y, w, colSum, sumSq };
  };
  const provisionalCentre = options.centre === false ? null
    : meanOfRows(sampleGrid(cube.qY, cube.qX), dim, (i, out) => { patternFeatures(data.subarray(i * binsPerRow, (i + 1) * binsPerRow), 1, plan, out); });
  return { pca: await randomizedPca(pass, n, dim, { ...options, provisionalCentre }), zeroPatterns };
}

export interface StreamedKmeansResult {
  descriptor: DatasetDescriptor;
  labels: Int32Array;
  /** k × D */
  centers: Float64Array;
  sizes: Int32Array;
  inertia: number;
  /** Passes over the data: the sample, then one per Lloyd iteration. */
  passes: number;
  iterations: number;
  seconds: number;
}

/**
 * k-means on the feature vectors themselves, streamed: k-means++ (with restarts, the lowest
 * inertia kept) on the patterns of a few evenly spaced scan rows read first, then Lloyd
 * iterations, each a pass that assigns every pattern to its nearest centre and sums the
 * clusters' vectors tile by tile (added in scan order), until no pattern changes cluster or
 * `maxIterations` passes.
 */
export function startStreamedKmeans(pool: WorkerPool, spec: SourceSpec, plan: FeaturePlan, k: number,
  o: { restarts: number; seed: number; maxIterations: number; sampleRows: number }, limits: EngineLimits, kernel: KernelKind): Job<StreamedKmeansResult> {
  const job = new Job<StreamedKmeansResult>('kmeans', `k-means of the patterns of ${spec.path}`, 0);
  (async () => {
    const t0 = performance.now();
    const { descriptor: d, rowAlignment, memory } = await pool.run((w) => w.open(spec));
    if (job.cancelled) return;
    const { scanY, scanX, detY, detX } = d.shape;
    const n = scanY * scanX, dim = plan.nFeatures;
    const patternBytes = detY * detX * DTYPE_BYTES[d.dtype];
    const reserved = n * 4 * 2 + k * dim * 8 * (limits.workers + 3);
    const tp = planTiles(d, { rowAlignment, memory: { ...memory, tileCopies: memory.tileCopies + 1.5 + (dim * 8) / patternBytes } }, limits, reserved);
    const dataBytes = tp.tiles.reduce((s, t) => s + t.bytes, 0);
    // The sample: evenly spaced scan rows, one tile each.
    const rows = Math.min(scanY, o.sampleRows);
    const sampleTiles = Array.from({ length: rows }, (_, i) => Math.floor(((i + 0.5) * scanY) / rows)).map((r) => ({ row0: r, nRows: 1, bytes: rowBytes(d) }));
    job.bytesTotal = sampleTiles.length * rowBytes(d) + dataBytes * o.maxIterations;
    const sample = new Float64Array(rows * scanX * dim);
    let nonFinite = 0;
    await runTiles({
      pool, job, spec: d.spec, tiles: sampleTiles,
      compute: (w, tile) => w.featureRowsTile(d.spec, tile.row0, 1, plan, kernel),
      merge: (r, tile) => { sample.set(r.features, sampleTiles.findIndex((t) => t.row0 === tile.row0) * scanX * dim); nonFinite += r.nonFinite; },
    });
    if (job.cancelled) return;
    if (nonFinite > 0) throw new InputError(`${d.path}: the data hold NaN or ±Inf values inside the features; expected finite data for k-means`, 'bad-input');
    const start = kmeans(sample, rows * scanX, dim, k, { restarts: o.restarts, seed: o.seed, maxIterations: 100, tol: 1e-4 });
    let centers = start.centers;
    const labels = new Int32Array(new SharedArrayBuffer(n * 4)).fill(-1);
    let inertia = 0, iterations = 0, sizes = new Int32Array(k);
    for (; iterations < o.maxIterations; iterations++) {
      const sums = new Float64Array(k * dim), counts = new Float64Array(k);
      let changed = 0;
      inertia = 0;
      const addTile = inScanOrder<{ sums: Float64Array; counts: Float64Array; inertia: number }>(tp.tiles.map((t) => t.row0), (q) => {
        for (let i = 0; i < sums.length; i++) sums[i] += q.sums[i];
        for (let c = 0; c < k; c++) counts[c] += q.counts[c];
        inertia += q.inertia;
      });
      const current = centers;
      await runTiles({
        pool, job, spec: d.spec, tiles: tp.tiles,
        compute: (w, tile) => w.kmeansTile(d.spec, tile.row0, tile.nRows, plan, kernel, current, k, labels),
        merge: (r, tile) => {
          changed += r.changed;
          addTile(tile.row0, r);
        },
      });
      if (job.cancelled) return;
      sizes = Int32Array.from(counts);
      // New centres; an empty cluster keeps its centre.
      centers = Float64Array.from(sums, (v, i) => (counts[Math.floor(i / dim)] > 0 ? v / counts[Math.floor(i / dim)] : current[i]));
      if (changed === 0) { iterations++; break; }
    }
    // The reported progress total assumed every iteration; finish it honestly.
    job.bytesTotal = sampleTiles.length * rowBytes(d) + dataBytes * Math.max(1, iterations);
    job.succeed({ descriptor: d, labels: Int32Array.from(labels), centers, sizes, inertia, passes: iterations + 1, iterations, seconds: (performance.now() - t0) / 1000 });
  })().catch((e) => job.fail(e));
  return job;
}

function rowBytes(d: DatasetDescriptor): number {
  return d.shape.scanX * d.shape.detY * d.shape.detX * DTYPE_BYTES[d.dtype];
}
