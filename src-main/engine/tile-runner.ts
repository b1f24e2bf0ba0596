import type { DatasetDescriptor, SourceSpec } from '../../src-shared/model/dataset';
import { Job } from './job';
import type { ReaderFacts, TilePlan } from './budget';
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

/**
 * The one skeleton of a streaming job: open the source on a worker → plan (memory reserved,
 * tiles chosen) → check the request against the dataset → allocate the accumulators → tiles
 * through the pool, partials merged here → finish. Cancellation is a value: once the job is
 * cancelled nothing more is started and the result is never delivered. Failures fail the job.
 */
export function streamingJob<T, Plan extends { tiles: TilePlan[] }, State, P extends TimedPartial>(opts: {
  pool: WorkerPool;
  spec: SourceSpec;
  kind: string;
  label: string;
  /** Tiles and memory: e.g. planTiles with the bytes results need, or planFirstPass. */
  plan: (d: DatasetDescriptor, reader: ReaderFacts) => Plan;
  /** Refuse a request that does not fit this dataset (before anything is allocated). */
  check?: (d: DatasetDescriptor) => void;
  /** Which of the plan's tiles to read (default all). */
  tiles?: (plan: Plan, d: DatasetDescriptor) => TilePlan[];
  begin: (d: DatasetDescriptor, plan: Plan) => State;
  compute: (worker: TileWorker, tile: TilePlan, d: DatasetDescriptor, plan: Plan, state: State) => Promise<P>;
  merge: (partial: P, tile: TilePlan, state: State) => void;
  finish: (state: State, done: { descriptor: DatasetDescriptor; plan: Plan; totals: TileTotals; seconds: number }) => T;
}): Job<T> {
  const job = new Job<T>(opts.kind, opts.label, 0);
  (async () => {
    const t0 = performance.now();
    const { descriptor: d, rowAlignment, memory } = await opts.pool.run((w) => w.open(opts.spec));
    if (job.cancelled) return;
    const plan = opts.plan(d, { rowAlignment, memory });
    opts.check?.(d);
    const tiles = opts.tiles ? opts.tiles(plan, d) : plan.tiles;
    job.bytesTotal = tiles.reduce((s, t) => s + t.bytes, 0);
    const state = opts.begin(d, plan);
    const totals = await runTiles<P>({
      pool: opts.pool, job, spec: d.spec, tiles,
      compute: (w, tile) => opts.compute(w, tile, d, plan, state),
      merge: (r, tile) => opts.merge(r, tile, state),
    });
    if (job.cancelled) return;
    job.succeed(opts.finish(state, { descriptor: d, plan, totals, seconds: (performance.now() - t0) / 1000 }));
  })().catch((e) => job.fail(e));
  return job;
}
