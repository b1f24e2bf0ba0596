// For requests that follow the pointer (the pattern under it, a dragged detector's preview):
// at most one in flight; while it runs, newer asks replace each other, and only the latest is
// sent when it returns. The pointer never queues up stale work.
export function latestWins<T>(): (ask: T, send: (ask: T) => Promise<void>) => void {
  let busy = false;
  let next: { ask: T; send: (ask: T) => Promise<void> } | null = null;
  return (ask, send) => {
    next = { ask, send };
    if (busy) return;
    busy = true;
    void (async () => {
      while (next) {
        const job: { ask: T; send: (ask: T) => Promise<void> } = next;
        next = null;
        try { await job.send(job.ask); } catch { /* the sender reports its own failures */ }
      }
      busy = false;
    })();
  };
}
