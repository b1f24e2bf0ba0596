import type { JobProgress } from '../../src-shared/contract/jobs';
import type { Job } from '../engine/job';
import { fmtBytes } from '../engine/budget';

/** A progress bar on stderr: redrawn in place on a terminal, a line per 10 % otherwise. */
export function progressPrinter(label: string, enabled: boolean) {
  const tty = process.stderr.isTTY;
  let lastDecile = -1;
  let lastDraw = 0;
  const line = (p: JobProgress) => {
    const width = 30;
    const filled = Math.round(p.fraction * width);
    const eta = p.etaSeconds === null ? '…' : `${p.etaSeconds.toFixed(1)} s`;
    return `${label} [${'#'.repeat(filled)}${'.'.repeat(width - filled)}] ${(p.fraction * 100).toFixed(0).padStart(3)}% ` +
      `${fmtBytes(p.bytesDone)}/${fmtBytes(p.bytesTotal)} ${(p.bytesPerSecond / 1e9).toFixed(2)} GB/s ETA ${eta}`;
  };
  return {
    update(p: JobProgress) {
      if (!enabled) return;
      if (tty) {
        const now = Date.now();
        if (now - lastDraw < 100 && p.fraction < 1) return;
        lastDraw = now;
        process.stderr.write('\r' + line(p));
      } else {
        const d = Math.floor(p.fraction * 10);
        if (d !== lastDecile) { lastDecile = d; process.stderr.write(line(p) + '\n'); }
      }
    },
    done() { if (enabled && tty) process.stderr.write('\n'); },
  };
}

let cancelRunning: (() => void) | null = null;

/**
 * Ctrl-C: cancel the running job (it ends with exit 130 and cleans up), or, between jobs,
 * return false so the caller ends the process at once.
 */
export function interruptRunningJob(): boolean {
  if (!cancelRunning) return false;
  cancelRunning();
  return true;
}

/** Wait for a job with a progress bar on stderr; Ctrl-C cancels the job. */
export async function runJobWithProgress<T>(job: Job<T>, label: string, quiet: boolean): Promise<T> {
  const bar = progressPrinter(label, !quiet);
  job.onProgress((p) => bar.update(p));
  cancelRunning = () => job.cancel('interrupted');
  try {
    const r = await job.result;
    bar.update(job.progress);
    return r;
  } finally {
    bar.done();
    cancelRunning = null;
  }
}
