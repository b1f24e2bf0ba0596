import type { SourceSpec } from '../../src-shared/model/dataset';
import type { Job } from './job';
import type { TilePlan } from './budget';
import type { TileWorker, WorkerPool } from './worker-pool';

/** What every tile reply carries, for the job's time split. */
export interface TimedPartial {
  nonFinite: number;
  readMs: number;
  computeMs: number;
}

export interface TileTotals {
  nonFinite: number;
  /** Time the workers spent reading and computing, summed over tiles (ms). */
  readMs: number;
  computeMs: number;
}

/**
 * Stream `tiles` through the pool: each free worker takes the next tile, reads it itself (every
 * tile request names its source; a worker keeps recent sources open) and returns a small
 * partial, which `merge` folds in on this thread. Stops taking tiles as soon as the
 * job is cancelled or one tile fails; the first failure fails the job. Returns the non-finite
 * count and time split summed over the tiles.
 */
export async function runTiles<P extends TimedPartial>(opts: {
  pool: WorkerPool;
  // eslint-disable-next-line @typescript-eslint/no-explicit-any
  job: Job<any>;
  spec: SourceSpec;
  tiles: TilePlan[];
  compute: (worker: TileWorker, tile: TilePlan) => Promise<P>;
  merge: (partial: P, tile: TilePlan) => void;
}): Promise<TileTotals> {
  const { pool, job, tiles, compute, merge } = opts;
  const totals: TileTotals = { nonFinite: 0, readMs: 0, computeMs: 0 };
  let next = 0;
  let failure: unknown = null;
  const lane = async () => {
    while (failure === null && !job.cancelled && next < tiles.length) {
      const tile = tiles[next++];
      try {
        const partial = await pool.run((w) => compute(w, tile));
        if (job.cancelled) return;
        merge(partial, tile);
        totals.nonFinite += partial.nonFinite;
        totals.readMs += partial.readMs;
        totals.computeMs += partial.computeMs;
        job.addBytes(tile.bytes);
      } catch (e) {
        if (failure === null) failure = e;
        return;
      }
    }
  };
  await Promise.all(Array.from({ length: Math.min(pool.size, tiles.length) }, lane));
  if (failure !== null) throw failure;
  return totals;
}
