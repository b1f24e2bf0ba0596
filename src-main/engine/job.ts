import type { JobInfo, JobProgress, JobState } from '../../src-shared/contract/jobs';
import { CancelledError } from '../../src-shared/model/errors';

let nextJobId = 1;

/**
 * A long computation with progress and cancel. `result` settles once: with the value,
 * with the failure, or with a CancelledError the moment cancel() is called (work already
 * in flight finishes in the background and is discarded).
 */
export class Job<T> {
  readonly id = nextJobId++;
  state: JobState = 'running';
  message?: string;
  readonly result: Promise<T>;
  private readonly controller = new AbortController();
  private readonly started = performance.now();
  private bytesDone = 0;
  private listeners = new Set<(p: JobProgress) => void>();
  private settle!: { resolve: (v: T) => void; reject: (e: unknown) => void };

  constructor(readonly kind: string, readonly label: string, public bytesTotal: number) {
    this.result = new Promise<T>((resolve, reject) => { this.settle = { resolve, reject }; });
    // A job nobody awaits must not crash the process with an unhandled rejection.
    this.result.catch(() => undefined);
  }

  get signal(): AbortSignal { return this.controller.signal; }
  get cancelled(): boolean { return this.controller.signal.aborted; }

  get progress(): JobProgress {
    const elapsedSeconds = (performance.now() - this.started) / 1000;
    const rate = elapsedSeconds > 0 ? this.bytesDone / elapsedSeconds : 0;
    const left = Math.max(0, this.bytesTotal - this.bytesDone);
    return {
      fraction: this.bytesTotal > 0 ? Math.min(1, this.bytesDone / this.bytesTotal) : (this.state === 'done' ? 1 : 0),
      bytesDone: this.bytesDone,
      bytesTotal: this.bytesTotal,
      elapsedSeconds,
      etaSeconds: rate > 0 && this.bytesDone > 0 ? left / rate : null,
      bytesPerSecond: rate,
    };
  }

  info(): JobInfo {
    return { id: this.id, kind: this.kind, label: this.label, state: this.state, progress: this.progress, message: this.message };
  }

  onProgress(cb: (p: JobProgress) => void): () => void {
    this.listeners.add(cb);
    return () => this.listeners.delete(cb);
  }

  /** Called by the job's runner. */
  addBytes(n: number): void {
    if (this.state !== 'running') return;
    this.bytesDone += n;
    const p = this.progress;
    for (const cb of this.listeners) cb(p);
  }

  cancel(reason = 'cancelled by the user'): void {
    if (this.state !== 'running') return;
    this.state = 'cancelled';
    this.message = reason;
    this.controller.abort(new CancelledError(reason));
    this.settle.reject(new CancelledError(`${this.label}: ${reason}`));
  }

  succeed(value: T): void {
    if (this.state !== 'running') return;
    this.state = 'done';
    this.settle.resolve(value);
  }

  fail(error: unknown): void {
    if (this.state !== 'running') return;
    this.state = 'failed';
    this.message = error instanceof Error ? error.message : String(error);
    this.settle.reject(error);
  }
}
