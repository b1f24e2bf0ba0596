import type { DatasetDescriptor, SourceSpec } from '../../src-shared/model/dataset';
import type { FirstPassGeometry } from '../../src-shared/compute/first-pass-types';
import { planFirstPass, type EngineLimits, type FirstPassPlan } from './budget';
import type { Job } from './job';
import { streamingJob } from './tile-runner';
import { addLacking, foldSumMax, meanOfFinite } from '../../src-shared/compute/region-pattern';
import { createWasmPreviewImager, type PreviewImager } from '../../src-shared/compute/preview-image-wasm';
import { loadWasmModule } from '../workers/wasm-loader';
import type { WorkerPool } from './worker-pool';
import type { KernelKind, FirstPassComPlan, FirstPassShared, FirstPassTileReply } from '../workers/tile-worker';

/** The binned in-memory copy used for instant previews. */
export interface PreviewCube {
  /** (qY, qX, pY, pX) float32: detector-bin sums, averaged over each scan bin. */
  data: Float32Array;
  qY: number;
  qX: number;
  pY: number;
  pX: number;
  detBin: number;
  scanBin: number;
  /** The WebAssembly kernel holding `data` in its memory, for fast detector images; null with the reference kernels. */
  imager: PreviewImager | null;
}

export interface FirstPassSummary {
  descriptor: DatasetDescriptor;
  /** Mean pattern over all probe positions (detY × detX), float64. */
  meanPattern: Float64Array;
  /** Max pattern over all probe positions (detY × detX). */
  maxPattern: Float64Array;
  /** Sum of each pattern (scanY × scanX), float64. */
  totalIntensity: Float64Array;
  preview: PreviewCube;
  /** NaN/±Inf values met in float data; they were left out of every sum and max. */
  nonFinite: number;
  plan: FirstPassPlan;
  /** Centre-of-mass sums taken in the same pass (when planned): see FirstPassComPlan. */
  com: FirstPassComSums | null;
  seconds: number;
  /** Time the workers spent reading vs computing, summed over tiles (ms). */
  readMs: number;
  computeMs: number;
}

/** Per-position sums over the planned mask (no threshold), and the watched pixels' values, position-major. */
export interface FirstPassComSums {
  total: Float64Array;
  sumX: Float64Array;
  sumY: Float64Array;
  watch: Uint32Array;
  watchValues: Float64Array;
  /** Non-finite values met inside the mask. */
  nonFinite: number;
  /** The default images (one per planned detector, scanY × scanX each), taken along. */
  images: Float64Array[];
}

/**
 * The single streaming pass run on every open: mean and max pattern, total-intensity
 * image and preview cube, accumulated in float64 (preview in float32).
 */
/**
 * Preview cubes of finished analyses that were released (a dataset closed, a pass repeated).
 * Fresh memory costs page faults that are slow on some machines (≈2.5 GB/s per thread here),
 * so the engine keeps at most one released cube and reuses it for a cube of the same shape.
 */
export class PreviewPool {
  private spare: PreviewImager | null = null;

  take(qY: number, qX: number, pY: number, pX: number): PreviewImager {
    const s = this.spare;
    if (s && s.qY === qY && s.qX === qX && s.pY === pY && s.pX === pX) {
      this.spare = null;
      return s;
    }
    return createWasmPreviewImager(loadWasmModule('preview-image'), qY, qX, pY, pX);
  }

  /** Hand back a cube nobody uses any more (its contents will be overwritten). */
  release(imager: PreviewImager | null): void {
    if (imager) this.spare = imager;
  }

  clear(): void { this.spare = null; }
}

/** Rows of the default images as tiles finish (views: copy what you keep). */
export type ImageRowsListener = (row0: number, nRows: number, rows: Float64Array[]) => void;

export function startFirstPass(pool: WorkerPool, spec: SourceSpec, limits: EngineLimits, kernel: KernelKind, previews = new PreviewPool(), com?: FirstPassComPlan,
  onImageRows?: ImageRowsListener): Job<FirstPassSummary> {
  interface State {
    com: FirstPassComSums | null;
    geometry: FirstPassGeometry;
    sum: Float64Array;
    max: Float64Array;
    /** Per pixel, how many patterns gave no finite value (null while every one did). */
    lacking: Float64Array | null;
    shared: FirstPassShared;
    preview: Float32Array;
    total: Float64Array;
    imager: PreviewImager | null;
  }
  return streamingJob<FirstPassSummary, FirstPassPlan, State, FirstPassTileReply>({
    pool, spec, kind: 'first-pass', label: `first pass over ${spec.path}`,
    plan: (d, reader) => planFirstPass(d, reader, limits, com ? com.watch.length : null),
    begin: (d, plan) => {
      const { scanY, scanX, detY, detX } = d.shape;
      const pixels = detY * detX;
      const pv = plan.preview;
      // The cube lives in the shared memory of the kernel that answers detector drags from it;
      // workers write preview rows and totals straight into shared memory. A cancelled pass's
      // cube is dropped, not pooled: tiles still in flight may write into it.
      const imager = kernel === 'wasm' ? previews.take(pv.qY, pv.qX, pv.pY, pv.pX) : null;
      const shared: FirstPassShared = {
        preview: imager ? imager.sharedBuffer : new SharedArrayBuffer(pv.qY * pv.qX * pv.pY * pv.pX * 4),
        previewByteOffset: imager ? imager.cubeByteOffset : 0,
        total: new SharedArrayBuffer(scanY * scanX * 8),
        previewRowValues: pv.qX * pv.pY * pv.pX,
      };
      return {
        geometry: { scanX, detY, detX, detBin: plan.detBin, scanBin: plan.scanBin },
        sum: new Float64Array(pixels),
        max: new Float64Array(pixels).fill(-Infinity),
        lacking: null,
        shared,
        preview: imager ? imager.cube() : new Float32Array(shared.preview),
        total: new Float64Array(shared.total),
        imager,
        com: com ? {
          total: new Float64Array(scanY * scanX), sumX: new Float64Array(scanY * scanX), sumY: new Float64Array(scanY * scanX),
          watch: com.watch, watchValues: new Float64Array(scanY * scanX * com.watch.length), nonFinite: 0,
          images: com.images.map(() => new Float64Array(scanY * scanX)),
        } : null,
      };
    },
    compute: (w, tile, d, plan, s) => w.firstPassTile(d.spec, tile.row0, tile.nRows, s.geometry, { kernel, maxTileBytes: plan.tileBytes }, s.shared, com),
    merge: (r, tile, s) => {
      foldSumMax(s.sum, s.max, r.sum, r.max);
      s.lacking = addLacking(s.lacking, r.nonFinitePerPixel);
      if (s.com && r.com) {
        const at = tile.row0 * s.geometry.scanX;
        s.com.total.set(r.com.total, at);
        s.com.sumX.set(r.com.sumX, at);
        s.com.sumY.set(r.com.sumY, at);
        s.com.watchValues.set(r.com.watchValues, at * s.com.watch.length);
        s.com.nonFinite += r.com.nonFinite;
        const m = tile.nRows * s.geometry.scanX;
        if (r.com.images) {
          s.com.images.forEach((img, k) => img.set(r.com!.images!.subarray(k * m, (k + 1) * m), at));
          onImageRows?.(tile.row0, tile.nRows, s.com.images.map((img) => img.subarray(at, at + m)));
        }
      }
    },
    finish: (s, { descriptor: d, plan, totals, seconds }) => {
      const n = d.shape.scanY * d.shape.scanX;
      const pv = plan.preview;
      return {
        descriptor: d, meanPattern: meanOfFinite(s.sum, n, s.lacking), maxPattern: s.max, totalIntensity: s.total,
        preview: { data: s.preview, qY: pv.qY, qX: pv.qX, pY: pv.pY, pX: pv.pX, detBin: plan.detBin, scanBin: plan.scanBin, imager: s.imager },
        plan, com: s.com, seconds, ...totals,
      };
    },
  });
}
