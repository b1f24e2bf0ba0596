import os from 'node:os';
import type { SourceSpec } from '../../src-shared/model/dataset';
import type { JobInfo } from '../../src-shared/contract/jobs';
import { DEFAULT_BUDGET, DEFAULT_PREVIEW_BUDGET, type EngineLimits } from './budget';
import { startFirstPass, type FirstPassSummary } from './first-pass';
import type { Job } from './job';
import { WorkerPool } from './worker-pool';
import type { KernelKind } from '../workers/tile-worker';
import { inspectSource, type Inspection } from '../io/index';

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
  /** Running jobs; finished ones are kept only as their final JobInfo, not with their results. */
  // eslint-disable-next-line @typescript-eslint/no-explicit-any
  private readonly running = new Set<Job<any>>();
  private readonly finished: JobInfo[] = [];

  constructor(options: EngineOptions = {}) {
    const workers = options.workers ?? os.availableParallelism();
    this.limits = {
      workers,
      budgetBytes: options.budgetBytes ?? DEFAULT_BUDGET,
      previewBudgetBytes: options.previewBudgetBytes ?? DEFAULT_PREVIEW_BUDGET,
    };
    this.kernel = options.kernel ?? 'wasm';
    this.pool = new WorkerPool({ size: workers });
  }

  /** Describe a source (or list an HDF5 file's datasets) without reading its data. */
  inspect(spec: SourceSpec): Promise<Inspection> {
    return inspectSource(spec);
  }

  /** The first streaming pass: mean/max pattern, total intensity, preview cube. */
  firstPass(spec: SourceSpec): Job<FirstPassSummary> {
    return this.track(startFirstPass(this.pool, spec, this.limits, this.kernel));
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

  async close(): Promise<void> {
    for (const j of this.running) j.cancel('engine closing');
    await this.pool.close();
  }
}
