import type { DatasetDescriptor, SourceSpec } from '../../src-shared/model/dataset';
import type { JobInfo } from '../../src-shared/contract/jobs';
import { memoryPerWorker, resolveEngineLimits, type EngineLimits } from './budget';
import { PreviewPool, startFirstPass, type FirstPassSummary, type ImageRowsListener } from './first-pass';
import { startClusterPatterns, startComSums, startRegionPattern, startVirtualImages, type ClusterPatternsResult, type ComSumsResult, type RegionPatternResult, type VirtualImagesResult } from './analyses';
import type { CompiledDetector } from '../../src-shared/model/detectors';
import type { ComOptions } from '../../src-shared/compute/tile-kernels-types';
import type { Job } from './job';
import { WorkerPool, type TileWorker } from './worker-pool';
import type { FirstPassComPlan, KernelKind } from '../workers/tile-worker';
import { inspectSource, type Inspection } from '../io/index';
import { startPca, startReferenceFit, startStreamedKmeans, type FitJobResult, type PcaJobResult, type StreamedKmeansResult } from './statistics';
import type { FeaturePlan } from '../../src-shared/compute/pattern-features';
import type { PcaOptions } from '../../src-shared/compute/pca';

export interface EngineOptions {
  /** Worker threads; default: available cores. */
  workers?: number;
  /** Memory budget in bytes for a job (default 1 GiB). */
  budgetBytes?: number;
  /** Preview cube budget in bytes (default 256 MiB, and at most a quarter of the budget). */
  previewBudgetBytes?: number;
  /** 'wasm' (default) or the plain TypeScript reference kernels. */
  kernel?: KernelKind;
}

/** The engine: one worker pool, the Activity list of jobs, and the operations on datasets. */
export class Engine {
  readonly pool: WorkerPool;
  readonly limits: EngineLimits;
  readonly kernel: KernelKind;
  /** What the engine changed from what was asked (e.g. workers capped), for the user to see. */
  readonly notes: string[];
  /** Running jobs; finished ones are kept only as their final JobInfo, not with their results. */
  // eslint-disable-next-line @typescript-eslint/no-explicit-any
  private readonly running = new Set<Job<any>>();
  private readonly finished: JobInfo[] = [];
  private readonly previews = new PreviewPool();
  /** One more worker for the pointer's requests (the pattern under it), so they never queue behind a job's tiles; started on first use. */
  private quickPool: WorkerPool | null = null;

  constructor(options: EngineOptions = {}) {
    const { limits, notes } = resolveEngineLimits(options);
    this.limits = limits;
    this.notes = notes;
    this.kernel = options.kernel ?? 'wasm';
    this.pool = new WorkerPool({ size: limits.workers, memoryPerWorkerBytes: memoryPerWorker(limits) });
  }

  /** Describe a source (or list an HDF5 file's datasets) without reading its data. */
  inspect(spec: SourceSpec): Promise<Inspection> {
    return inspectSource(spec);
  }

  /**
   * Open a source on a worker and return its descriptor; the workers keep it open for the jobs
   * that follow (the main thread never loads a reader). Where other workers can read it only
   * through the HDF5 library (compressed data), they start opening it now, unawaited: starting
   * that library costs a worker ~0.2 s, which a job's first tiles would otherwise wait for in turn.
   * Data read straight from the file (SourceSpec.hdf5Direct, raw, .npy) opens in no time anywhere.
   */
  async describe(spec: SourceSpec): Promise<DatasetDescriptor> {
    const { descriptor } = await this.pool.run((w) => w.open(spec));
    if (descriptor.format === 'hdf5' && !descriptor.spec.hdf5Direct) {
      void this.pool.each((w) => w.open(descriptor.spec)).catch(() => undefined);
    }
    return descriptor;
  }

  /** The first streaming pass: mean/max pattern, total intensity, preview cube. */
  firstPass(spec: SourceSpec, com?: FirstPassComPlan, onImageRows?: ImageRowsListener): Job<FirstPassSummary> {
    return this.track(startFirstPass(this.pool, spec, this.limits, this.kernel, this.previews, com, onImageRows));
  }

  /** Give back a first-pass result that is no longer shown; its preview cube's memory is reused. */
  release(summary: FirstPassSummary): void {
    this.previews.release(summary.preview.imager);
    summary.preview.imager = null;
    summary.preview.data = new Float32Array(0);
  }

  /** Virtual images of several detectors in one streaming pass. */
  virtualImages(spec: SourceSpec, detectors: CompiledDetector[]): Job<VirtualImagesResult> {
    return this.track(startVirtualImages(this.pool, spec, detectors, this.limits, this.kernel));
  }

  /** Per-position centre-of-mass sums (Σ I, Σ I·x, Σ I·y). */
  comSums(spec: SourceSpec, options: ComOptions): Job<ComSumsResult> {
    return this.track(startComSums(this.pool, spec, options, this.limits, this.kernel));
  }

  /** PCA of every pattern's feature vector by randomized SVD (q + 1 passes). */
  pca(spec: SourceSpec, plan: FeaturePlan, options: PcaOptions): Job<PcaJobResult> {
    return this.track(startPca(this.pool, spec, plan, options, this.limits, this.kernel));
  }

  /** Reference fit of every pattern to the mean feature vectors of the given regions (two passes). */
  referenceFit(spec: SourceSpec, plan: FeaturePlan, regions: Uint8Array[], nonnegative: boolean): Job<FitJobResult> {
    return this.track(startReferenceFit(this.pool, spec, plan, regions, nonnegative, this.limits, this.kernel));
  }

  /** k-means on the feature vectors themselves, streamed (a sample pass, then one pass per iteration). */
  streamedKmeans(spec: SourceSpec, plan: FeaturePlan, k: number, o: { restarts: number; seed: number; maxIterations: number; sampleRows: number }): Job<StreamedKmeansResult> {
    return this.track(startStreamedKmeans(this.pool, spec, plan, k, o, this.limits, this.kernel));
  }

  /** The mean pattern of every cluster (labels: one per scan position, 0 … k − 1). */
  clusterPatterns(spec: SourceSpec, labels: Int32Array, k: number): Job<ClusterPatternsResult> {
    return this.track(startClusterPatterns(this.pool, spec, labels, k, this.limits, this.kernel));
  }

  /** Mean and max pattern over a real-space region (mask of the scan's shape). */
  regionPattern(spec: SourceSpec, region: Uint8Array): Job<RegionPatternResult> {
    return this.track(startRegionPattern(this.pool, spec, region, this.limits));
  }

  private track<T>(job: Job<T>): Job<T> {
    this.running.add(job);
    const done = () => { this.running.delete(job); this.finished.push(job.info()); };
    job.result.then(done, done);
    return job;
  }

  /** The Activity list. */
  activity(): JobInfo[] {
    return [...this.finished, ...[...this.running].map((j) => j.info())].sort((a, b) => a.id - b.id);
  }

  cancel(jobId: number): boolean {
    const j = [...this.running].find((x) => x.id === jobId);
    if (!j) return false;
    j.cancel();
    return true;
  }

  /** The worker that answers the pointer (see quickPool). */
  get quick(): WorkerPool {
    this.quickPool ??= new WorkerPool({ size: 1, memoryPerWorkerBytes: memoryPerWorker(this.limits) });
    return this.quickPool;
  }

  /** Run `task` on every worker, the quick one included once started (e.g. the files they read). */
  async eachWorker<T>(task: (worker: TileWorker, index: number) => Promise<T>): Promise<T[]> {
    const [main, quick] = await Promise.all([this.pool.each(task), this.quickPool ? this.quickPool.each(task) : Promise.resolve([] as T[])]);
    return [...main, ...quick];
  }

  async close(): Promise<void> {
    for (const j of this.running) j.cancel('engine closing');
    this.previews.clear();
    await Promise.all([this.pool.close(), this.quickPool?.close()]);
  }
}
