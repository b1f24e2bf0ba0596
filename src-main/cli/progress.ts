import type { JobProgress } from '../../src-shared/contract/jobs';
import type { ScanfoldService } from '../../src-shared/contract/service';
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
 * Ctrl-C: cancel the running jobs (they end with exit 130 and clean up), or, with none
 * running, return false so the caller ends the process at once.
 */
export function interruptRunningJob(): boolean {
  if (!cancelRunning) return false;
  cancelRunning();
  return true;
}

/**
 * Progress bars on stderr for every job of the service, one per job, until the returned
 * function is called; meanwhile Ctrl-C cancels whatever runs.
 */
export function followJobs(service: Pick<ScanfoldService, 'onEvent' | 'cancel'> & { cancelAll(reason?: string): number }, quiet: boolean): () => void {
  const bars = new Map<string, ReturnType<typeof progressPrinter>>();
  const off = service.onEvent((e) => {
    if (e.kind !== 'job') return;
    const { jobId, label, state, progress } = e.job;
    // A job's first event comes before it knows its size; its first tile says more.
    if (state === 'running' && progress.bytesTotal === 0) return;
    let bar = bars.get(jobId);
    if (!bar) { bar = progressPrinter(label, !quiet); bars.set(jobId, bar); }
    bar.update(progress);
    if (state !== 'running') { bar.done(); bars.delete(jobId); }
  });
  cancelRunning = () => { if (service.cancelAll('interrupted') === 0) process.exit(130); };
  return () => {
    off();
    for (const b of bars.values()) b.done();
    cancelRunning = null;
  };
}
