// Streaming analyses after the first pass: virtual images of several detectors at once,
// centre-of-mass sums, and virtual diffraction over a real-space region. Each is one job:
// tiles of whole scan rows through the worker pool, partials merged here in float64.
import type { DatasetDescriptor, SourceSpec } from '../../src-shared/model/dataset';
import type { CompiledDetector } from '../../src-shared/model/detectors';
import type { ComOptions } from '../../src-shared/compute/tile-kernels-types';
import { InputError } from '../../src-shared/model/errors';
import { planTiles, type EngineLimits, type ReaderFacts, type TilesPlan } from './budget';
import type { Job } from './job';
import { streamingJob } from './tile-runner';
import { addLacking, foldSumMax, meanOfFinite } from '../../src-shared/compute/region-pattern';
import type { WorkerPool } from './worker-pool';
import type { ClusterTileReply, ComTileReply, KernelKind, RegionTileReply, VirtualImagesTileReply } from '../workers/tile-worker';

export interface VirtualImagesResult {
  descriptor: DatasetDescriptor;
  /** One image (scanY × scanX, float64) per detector, in the order given. */
  images: Float64Array[];
  nonFinite: number;
  plan: TilesPlan;
  seconds: number;
  readMs: number;
  computeMs: number;
}

export interface ComSumsResult {
  descriptor: DatasetDescriptor;
  /** Per position (scanY × scanX): Σ I, Σ I·x, Σ I·y (x column, y row of the detector pixel). */
  total: Float64Array;
  sumX: Float64Array;
  sumY: Float64Array;
  nonFinite: number;
  plan: TilesPlan;
  seconds: number;
  readMs: number;
  computeMs: number;
}

export interface RegionPatternResult {
  descriptor: DatasetDescriptor;
  /** Mean and max pattern over the region (detY × detX, float64). */
  mean: Float64Array;
  max: Float64Array;
  /** Number of probe positions in the region. */
  count: number;
  nonFinite: number;
  seconds: number;
}

function detectorBytes(detectors: CompiledDetector[]): number {
  return detectors.reduce((s, d) => s + (d.mode === 'indices' ? d.indices.byteLength : d.weights.byteLength), 0);
}

function checkDetectorGeometry(d: DatasetDescriptor, detectors: { detY: number; detX: number; label: string }[]) {
  for (const det of detectors) {
    if (det.detY !== d.shape.detY || det.detX !== d.shape.detX) {
      throw new InputError(`detector "${det.label}" was made for a ${det.detY}×${det.detX} pattern, but ${d.path} has ${d.shape.detY}×${d.shape.detX} patterns`);
    }
  }
}

/** Plan tiles with `reserved` bytes set aside for results. */
const tilesWith = (limits: EngineLimits, reserved: (d: DatasetDescriptor) => number) =>
  (d: DatasetDescriptor, reader: ReaderFacts) => planTiles(d, reader, limits, reserved(d));

/** Several virtual detectors in one streaming pass. */
export function startVirtualImages(pool: WorkerPool, spec: SourceSpec, detectors: CompiledDetector[], limits: EngineLimits, kernel: KernelKind): Job<VirtualImagesResult> {
  type Images = { images: Float64Array[]; scanX: number };
  return streamingJob<VirtualImagesResult, TilesPlan, Images, VirtualImagesTileReply>({
    pool, spec, kind: 'virtual-images', label: `${detectors.length} virtual image(s) of ${spec.path}`,
    plan: tilesWith(limits, (d) => 8 * d.shape.scanY * d.shape.scanX * detectors.length * 2 + detectorBytes(detectors) * (limits.workers + 1)),
    check: (d) => {
      if (detectors.length === 0) throw new InputError('no detector given: draw or describe at least one');
      checkDetectorGeometry(d, detectors);
    },
    begin: (d) => ({ images: detectors.map(() => new Float64Array(d.shape.scanY * d.shape.scanX)), scanX: d.shape.scanX }),
    compute: (w, tile, d, plan) => w.virtualImagesTile(d.spec, tile.row0, tile.nRows, detectors, { kernel, maxTileBytes: plan.tileBytes }),
    merge: (r, tile, s) => {
      const m = tile.nRows * s.scanX;
      const at = tile.row0 * s.scanX;
      for (let k = 0; k < detectors.length; k++) s.images[k].set(r.images.subarray(k * m, (k + 1) * m), at);
    },
    finish: (s, { descriptor, plan, totals, seconds }) => ({ descriptor, images: s.images, plan, seconds, ...totals }),
  });
}

/** Centre-of-mass sums for every probe position in one streaming pass. */
export function startComSums(pool: WorkerPool, spec: SourceSpec, com: ComOptions, limits: EngineLimits, kernel: KernelKind): Job<ComSumsResult> {
  type Sums = { total: Float64Array; sumX: Float64Array; sumY: Float64Array; scanX: number };
  return streamingJob<ComSumsResult, TilesPlan, Sums, ComTileReply>({
    pool, spec, kind: 'com', label: `centre of mass of ${spec.path}`,
    plan: tilesWith(limits, (d) => 8 * d.shape.scanY * d.shape.scanX * 3 * 2),
    check: (d) => { if (com.mask) checkDetectorGeometry(d, [com.mask]); },
    begin: (d) => {
      const n = d.shape.scanY * d.shape.scanX;
      return { total: new Float64Array(n), sumX: new Float64Array(n), sumY: new Float64Array(n), scanX: d.shape.scanX };
    },
    compute: (w, tile, d, plan) => w.comTile(d.spec, tile.row0, tile.nRows, com, { kernel, maxTileBytes: plan.tileBytes }),
    merge: (r, tile, s) => {
      const at = tile.row0 * s.scanX;
      s.total.set(r.total, at); s.sumX.set(r.sumX, at); s.sumY.set(r.sumY, at);
    },
    finish: (s, { descriptor, plan, totals, seconds }) => ({ descriptor, total: s.total, sumX: s.sumX, sumY: s.sumY, plan, seconds, ...totals }),
  });
}

/** Mean and max pattern over a real-space region (a boolean mask of the scan's shape). */
export function startRegionPattern(pool: WorkerPool, spec: SourceSpec, region: Uint8Array, limits: EngineLimits): Job<RegionPatternResult> {
  type Acc = { sum: Float64Array; max: Float64Array; count: number; lacking: Float64Array | null };
  return streamingJob<RegionPatternResult, TilesPlan, Acc, RegionTileReply>({
    pool, spec, kind: 'region-pattern', label: `mean pattern over a region of ${spec.path}`,
    plan: tilesWith(limits, (d) => 16 * d.shape.detY * d.shape.detX * (limits.workers + 1)),
    check: (d) => {
      const { scanY, scanX } = d.shape;
      if (region.length !== scanY * scanX) {
        throw new InputError(`the region mask has ${region.length} positions, but ${d.path} has a ${scanY}×${scanX} scan; expected ${scanY * scanX}`);
      }
    },
    // Only tiles that hold selected positions are read.
    tiles: (plan, d) => {
      const tiles = plan.tiles.filter((t) => region.subarray(t.row0 * d.shape.scanX, (t.row0 + t.nRows) * d.shape.scanX).some((v) => v !== 0));
      if (tiles.length === 0) throw new InputError('the region holds no probe position');
      return tiles;
    },
    begin: (d) => ({ sum: new Float64Array(d.shape.detY * d.shape.detX), max: new Float64Array(d.shape.detY * d.shape.detX).fill(-Infinity), count: 0, lacking: null }),
    compute: (w, tile, d) => w.regionPatternTile(d.spec, tile.row0, tile.nRows, region.slice(tile.row0 * d.shape.scanX, (tile.row0 + tile.nRows) * d.shape.scanX)),
    merge: (r, _tile, a) => {
      foldSumMax(a.sum, a.max, r.sum, r.max);
      a.count += r.count;
      a.lacking = addLacking(a.lacking, r.lacking);
    },
    finish: (a, { descriptor, totals, seconds }) => ({ descriptor, mean: meanOfFinite(a.sum, a.count, a.lacking), max: a.max, count: a.count, nonFinite: totals.nonFinite, seconds }),
  });
}

export interface ClusterPatternsResult {
  descriptor: DatasetDescriptor;
  /** k × detY × detX: the mean pattern of each cluster (NaN for an empty one). */
  means: Float64Array;
  counts: Float64Array;
  nonFinite: number;
  seconds: number;
}

/** The mean pattern of every cluster, full resolution, in one streamed pass (labels: one per scan position). */
export function startClusterPatterns(pool: WorkerPool, spec: SourceSpec, labels: Int32Array, k: number, limits: EngineLimits, kernel: KernelKind = 'wasm'): Job<ClusterPatternsResult> {
  type Acc = { sums: Float64Array; counts: Float64Array; lacking: Float64Array | null };
  return streamingJob<ClusterPatternsResult, TilesPlan, Acc, ClusterTileReply>({
    pool, spec, kind: 'cluster-patterns', label: `mean pattern of each cluster of ${spec.path}`,
    plan: tilesWith(limits, (d) => 8 * k * d.shape.detY * d.shape.detX * (limits.workers + 2)),
    check: (d) => {
      if (labels.length !== d.shape.scanY * d.shape.scanX) throw new InputError(`cluster labels: ${labels.length} values, but ${d.path} has ${d.shape.scanY * d.shape.scanX} positions`);
    },
    begin: (d) => ({ sums: new Float64Array(k * d.shape.detY * d.shape.detX), counts: new Float64Array(k), lacking: null }),
    compute: (w, tile, d) => w.clusterSumsTile(d.spec, tile.row0, tile.nRows, labels.slice(tile.row0 * d.shape.scanX, (tile.row0 + tile.nRows) * d.shape.scanX), k, kernel),
    merge: (r, _tile, a) => {
      for (let i = 0; i < a.sums.length; i++) a.sums[i] += r.sums[i];
      for (let c = 0; c < k; c++) a.counts[c] += r.counts[c];
      a.lacking = addLacking(a.lacking, r.lacking);
    },
    finish: (a, { descriptor, totals, seconds }) => {
      const pixels = descriptor.shape.detY * descriptor.shape.detX;
      // Each pixel over the cluster's patterns where it is finite; NaN throughout for an empty cluster.
      const means = new Float64Array(a.sums.length);
      for (let c = 0; c < k; c++) {
        const part = (x: Float64Array) => x.subarray(c * pixels, (c + 1) * pixels);
        means.set(a.counts[c] === 0 ? part(means).fill(Number.NaN) : meanOfFinite(part(a.sums), a.counts[c], a.lacking && part(a.lacking)), c * pixels);
      }
      return { descriptor, means, counts: a.counts, nonFinite: totals.nonFinite, seconds };
    },
  });
}
