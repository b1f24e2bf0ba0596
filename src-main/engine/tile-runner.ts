import type { SourceSpec } from '../../src-shared/model/dataset';
import type { Job } from './job';
import type { TilePlan } from './budget';
import type { TileWorker, WorkerPool } from './worker-pool';

/**
 * Stream `tiles` through the pool: each free worker takes the next tile, reads it itself
 * and returns a small partial, which `merge` folds in on this thread. Stops taking tiles
 * as soon as the job is cancelled or one tile fails; the first failure fails the job.
 */
export async function runTiles<P>(opts: {
  pool: WorkerPool;
  // eslint-disable-next-line @typescript-eslint/no-explicit-any
  job: Job<any>;
  tiles: TilePlan[];
  compute: (worker: TileWorker, tile: TilePlan) => Promise<P>;
  merge: (partial: P, tile: TilePlan) => void;
}): Promise<void> {
  const { pool, job, tiles, compute, merge } = opts;
  let next = 0;
  let failure: unknown = null;
  const lane = async () => {
    while (failure === null && !job.cancelled && next < tiles.length) {
      const tile = tiles[next++];
      try {
        const partial = await pool.run((w) => compute(w, tile));
        if (job.cancelled) return;
        merge(partial, tile);
        job.addBytes(tile.bytes);
      } catch (e) {
        if (failure === null) failure = e;
        return;
      }
    }
  };
  await Promise.all(Array.from({ length: Math.min(pool.size, tiles.length) }, lane));
  if (failure !== null) throw failure;
}

/** Make sure the worker has `spec` open (a no-op after the first call on that worker). */
export async function ensureOpen(worker: TileWorker, spec: SourceSpec) {
  return worker.open(spec);
}
