// Streaming analyses after the first pass: virtual images of several detectors at once,
// centre-of-mass sums, and virtual diffraction over a real-space region. Each is one job:
// tiles of whole scan rows through the worker pool, partials merged here in float64.
import type { DatasetDescriptor, SourceSpec } from '../../src-shared/model/dataset';
import type { CompiledDetector } from '../../src-shared/model/detectors';
import type { ComOptions } from '../../src-shared/compute/tile-kernels-types';
import { InputError } from '../../src-shared/model/errors';
import { planTiles, type EngineLimits, type TilesPlan } from './budget';
import { Job } from './job';
import { runTiles } from './tile-runner';
import { foldSumMax } from '../../src-shared/compute/region-pattern';
import type { WorkerPool } from './worker-pool';
import type { ComTileReply, KernelKind, RegionTileReply, VirtualImagesTileReply } from '../workers/tile-worker';

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

/** Open the source on a worker, then plan tiles with `reserved` bytes set aside for results. */
async function prepare(pool: WorkerPool, spec: SourceSpec, limits: EngineLimits, reserved: (d: DatasetDescriptor) => number) {
  const { descriptor: d, rowAlignment, memory } = await pool.run((w) => w.open(spec));
  return { d, plan: planTiles(d, { rowAlignment, memory }, limits, reserved(d)) };
}

function checkDetectorGeometry(d: DatasetDescriptor, detectors: { detY: number; detX: number; label: string }[]) {
  for (const det of detectors) {
    if (det.detY !== d.shape.detY || det.detX !== d.shape.detX) {
      throw new InputError(`detector "${det.label}" was made for a ${det.detY}×${det.detX} pattern, but ${d.path} has ${d.shape.detY}×${d.shape.detX} patterns`);
    }
  }
}

/** Several virtual detectors in one streaming pass. */
export function startVirtualImages(pool: WorkerPool, spec: SourceSpec, detectors: CompiledDetector[], limits: EngineLimits, kernel: KernelKind): Job<VirtualImagesResult> {
  const job = new Job<VirtualImagesResult>('virtual-images', `${detectors.length} virtual image(s) of ${spec.path}`, 0);
  (async () => {
    if (detectors.length === 0) throw new InputError('no detector given: draw or describe at least one');
    const t0 = performance.now();
    const { d, plan } = await prepare(pool, spec, limits, (d) =>
      8 * d.shape.scanY * d.shape.scanX * detectors.length * 2 + detectorBytes(detectors) * (limits.workers + 1));
    checkDetectorGeometry(d, detectors);
    if (job.cancelled) return;
    job.bytesTotal = d.byteSize;
    const n = d.shape.scanY * d.shape.scanX;
    const images = detectors.map(() => new Float64Array(n));
    const options = { kernel, maxTileBytes: plan.tileBytes };
    const totals = await runTiles<VirtualImagesTileReply>({
      pool, job, spec: d.spec, tiles: plan.tiles,
      compute: (w, tile) => w.virtualImagesTile(d.spec, tile.row0, tile.nRows, detectors, options),
      merge: (r, tile) => {
        const m = tile.nRows * d.shape.scanX;
        const at = tile.row0 * d.shape.scanX;
        for (let k = 0; k < detectors.length; k++) images[k].set(r.images.subarray(k * m, (k + 1) * m), at);
      },
    });
    job.succeed({ descriptor: d, images, plan, seconds: (performance.now() - t0) / 1000, ...totals });
  })().catch((e) => job.fail(e));
  return job;
}

/** Centre-of-mass sums for every probe position in one streaming pass. */
export function startComSums(pool: WorkerPool, spec: SourceSpec, com: ComOptions, limits: EngineLimits, kernel: KernelKind): Job<ComSumsResult> {
  const job = new Job<ComSumsResult>('com', `centre of mass of ${spec.path}`, 0);
  (async () => {
    const t0 = performance.now();
    const { d, plan } = await prepare(pool, spec, limits, (d) => 8 * d.shape.scanY * d.shape.scanX * 3 * 2);
    if (com.mask) checkDetectorGeometry(d, [com.mask]);
    if (job.cancelled) return;
    job.bytesTotal = d.byteSize;
    const n = d.shape.scanY * d.shape.scanX;
    const total = new Float64Array(n), sumX = new Float64Array(n), sumY = new Float64Array(n);
    const options = { kernel, maxTileBytes: plan.tileBytes };
    const totals = await runTiles<ComTileReply>({
      pool, job, spec: d.spec, tiles: plan.tiles,
      compute: (w, tile) => w.comTile(d.spec, tile.row0, tile.nRows, com, options),
      merge: (r, tile) => {
        const at = tile.row0 * d.shape.scanX;
        total.set(r.total, at); sumX.set(r.sumX, at); sumY.set(r.sumY, at);
      },
    });
    job.succeed({ descriptor: d, total, sumX, sumY, plan, seconds: (performance.now() - t0) / 1000, ...totals });
  })().catch((e) => job.fail(e));
  return job;
}

/** Mean and max pattern over a real-space region (a boolean mask of the scan's shape). */
export function startRegionPattern(pool: WorkerPool, spec: SourceSpec, region: Uint8Array, limits: EngineLimits): Job<RegionPatternResult> {
  const job = new Job<RegionPatternResult>('region-pattern', `mean pattern over a region of ${spec.path}`, 0);
  (async () => {
    const t0 = performance.now();
    const { d, plan } = await prepare(pool, spec, limits, (d) => 16 * d.shape.detY * d.shape.detX * (limits.workers + 1));
    const { scanY, scanX, detY, detX } = d.shape;
    if (region.length !== scanY * scanX) {
      throw new InputError(`the region mask has ${region.length} positions, but ${d.path} has a ${scanY}×${scanX} scan; expected ${scanY * scanX}`);
    }
    if (job.cancelled) return;
    // Only tiles that hold selected positions are read.
    const tiles = plan.tiles.filter((t) => region.subarray(t.row0 * scanX, (t.row0 + t.nRows) * scanX).some((v) => v !== 0));
    if (tiles.length === 0) throw new InputError('the region holds no probe position');
    job.bytesTotal = tiles.reduce((s, t) => s + t.bytes, 0);
    const sum = new Float64Array(detY * detX);
    const max = new Float64Array(detY * detX).fill(-Infinity);
    let count = 0;
    const { nonFinite } = await runTiles<RegionTileReply>({
      pool, job, spec: d.spec, tiles,
      compute: (w, tile) => w.regionPatternTile(d.spec, tile.row0, tile.nRows, region.slice(tile.row0 * scanX, (tile.row0 + tile.nRows) * scanX)),
      merge: (r) => { foldSumMax(sum, max, r.sum, r.max); count += r.count; },
    });
    const mean = sum.map((v) => v / count);
    job.succeed({ descriptor: d, mean, max, count, nonFinite, seconds: (performance.now() - t0) / 1000 });
  })().catch((e) => job.fail(e));
  return job;
}
