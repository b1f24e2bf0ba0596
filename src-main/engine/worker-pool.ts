import os from 'node:os';
import { Worker } from 'node:worker_threads';
import * as Comlink from 'comlink';
import nodeEndpoint from 'comlink/dist/esm/node-adapter.mjs';
import type { TileWorkerApi } from '../workers/tile-worker';
import { distFile } from './paths';
import { enableRelaxedSimd } from '../workers/wasm-loader';
import { adoptPrestarted, dropPrestarted } from './prestart';

export type TileWorker = Comlink.Remote<TileWorkerApi>;

/** Raised when a worker thread ends while it was running a task. */
export class WorkerDiedError extends Error {
  override readonly name = 'WorkerDiedError';
}

interface Slot {
  index: number;
  generation: number;
  worker: Worker;
  remote: TileWorker;
  busy: boolean;
  /** Rejects when this worker dies; a running task races against it. */
  death: Promise<never>;
  closing: boolean;
}

export interface PoolOptions {
  /** Number of worker threads; defaults to the available cores. */
  size?: number;
  /** Bundled worker entry; defaults to dist/tile-worker.mjs. */
  workerFile?: string;
  /** What one worker may hold for a reader and its tiles; readers refuse sources that need more. */
  memoryPerWorkerBytes?: number;
}

/**
 * A fixed set of worker threads driven through comlink. A worker that throws fails only
 * its task; a worker that dies fails its task with a WorkerDiedError and is replaced at
 * once, so the pool stays usable.
 */
export class WorkerPool {
  readonly size: number;
  private readonly workerFile: string;
  private readonly memoryPerWorkerBytes: number | undefined;
  private readonly slots: Slot[] = [];
  private waiters: ((slot: Slot) => void)[] = [];
  private closed = false;
  replacements = 0;

  constructor(options: PoolOptions = {}) {
    const size = options.size ?? os.availableParallelism();
    if (!Number.isInteger(size) || size < 1) throw new RangeError(`worker pool: size must be a whole number ≥ 1, got ${size}`);
    this.size = size;
    this.workerFile = options.workerFile ?? distFile('tile-worker.mjs');
    this.memoryPerWorkerBytes = options.memoryPerWorkerBytes;
    // Before any worker starts: V8 flags are process-wide (see enableRelaxedSimd).
    enableRelaxedSimd();
    for (let i = 0; i < this.size; i++) this.slots.push(this.spawn(i, 0));
    dropPrestarted();
  }

  private spawn(index: number, generation: number): Slot {
    const worker = adoptPrestarted(this.workerFile) ?? new Worker(this.workerFile);
    const remote = Comlink.wrap<TileWorkerApi>(nodeEndpoint(worker as never));
    // Before any task (messages arrive in order): its index and memory allowance.
    void remote.configure({ index, ...(this.memoryPerWorkerBytes !== undefined ? { memoryPerWorkerBytes: this.memoryPerWorkerBytes } : {}) }).catch(() => undefined);
    let rejectDeath!: (e: Error) => void;
    const death = new Promise<never>((_, reject) => { rejectDeath = reject; });
    death.catch(() => undefined);
    const slot: Slot = { index, generation, worker, remote, busy: false, death, closing: false };
    let lastError: Error | null = null;
    worker.on('error', (e) => { lastError = e; });
    worker.on('exit', (code) => {
      const why = lastError ? `: ${lastError.message}` : ` (exit code ${code})`;
      rejectDeath(new WorkerDiedError(`worker ${index} stopped unexpectedly${why}`));
      if (slot.closing || this.closed) return;
      // Replace it; a task that was running on it has already been failed through `death`.
      this.replacements++;
      const fresh = this.spawn(index, generation + 1);
      this.slots[index] = fresh;
      if (!slot.busy) this.release(fresh);
      else fresh.busy = true; // released when the failed task's finally runs
    });
    return slot;
  }

  private acquire(): Promise<Slot> {
    if (this.closed) return Promise.reject(new Error('worker pool is closed'));
    const free = this.slots.find((s) => !s.busy);
    if (free) { free.busy = true; return Promise.resolve(free); }
    return new Promise((resolve) => this.waiters.push(resolve));
  }

  private release(slot: Slot): void {
    const current = this.slots[slot.index];
    const next = this.waiters.shift();
    if (next) { current.busy = true; next(current); } else current.busy = false;
  }

  /** Run `task` on the next free worker. Rejects with the worker's error, or WorkerDiedError. */
  async run<T>(task: (worker: TileWorker, index: number) => Promise<T>): Promise<T> {
    const slot = await this.acquire();
    try {
      return await Promise.race([task(slot.remote, slot.index), slot.death]);
    } finally {
      this.release(slot);
    }
  }

  /** Run `task` on every worker now, busy or not (for small queries such as the files they read). */
  async each<T>(task: (worker: TileWorker, index: number) => Promise<T>): Promise<T[]> {
    return Promise.all(this.slots.map((s) => Promise.race([task(s.remote, s.index), s.death])));
  }

  /** For tests: end one worker thread abruptly, as a crash would. */
  async kill(index: number): Promise<void> {
    await this.slots[index].worker.terminate();
  }

  async close(): Promise<void> {
    this.closed = true;
    await Promise.all(this.slots.map(async (s) => {
      s.closing = true;
      s.remote[Comlink.releaseProxy]();
      await s.worker.terminate();
    }));
  }
}
