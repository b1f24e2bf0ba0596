import type { DatasetDescriptor } from '../../src-shared/model/dataset';
import { DTYPE_BYTES } from '../../src-shared/model/dtype';
import { InputError } from '../../src-shared/model/errors';

import os from 'node:os';
import { fmtBytes, GiB, MiB } from '../../src-shared/model/bytes';
import type { ReaderMemory } from '../io/tile-source';

export { fmtBytes, parseBytes, GiB, MiB } from '../../src-shared/model/bytes';

export interface EngineLimits {
  /** Upper bound for everything the engine holds for one job: tiles in all workers, accumulators, preview cube. */
  budgetBytes: number;
  /** Upper bound for the preview cube (it is also kept under a quarter of the budget). */
  previewBudgetBytes: number;
  workers: number;
}

/** Where a source's bytes sit in storage and what reading them costs a worker (from the worker that opened it). */
export interface ReaderFacts {
  rowAlignment: number;
  memory: ReaderMemory;
}

/**
 * A worker thread's own cost before any tile or reader: its V8 isolate, the bundled code and
 * kernel memory. Measured here: peak RSS grows by about 9 MiB per idle worker (raw and .npy
 * data, 8 to 64 workers).
 */
export const WORKER_THREAD_BYTES = 10 * MiB;

/** More workers than this many per core only add memory and contention. */
export const MAX_WORKERS_PER_CORE = 2;

/**
 * The preview cube lives in one shared WebAssembly memory, which a 32-bit module addresses up
 * to 4 GiB; the rest of that memory holds the detector tables and images.
 */
export const MAX_PREVIEW_BYTES = 3 * GiB;

export const DEFAULT_BUDGET = 1 * GiB;
export const DEFAULT_PREVIEW_BUDGET = 256 * MiB;
/** Larger tiles gain nothing in read speed and make progress and cancel coarse. */
export const MAX_TILE_BYTES = 32 * MiB;

export interface TilePlan {
  row0: number;
  nRows: number;
  bytes: number;
}

export interface FirstPassPlan {
  detBin: number;
  scanBin: number;
  preview: { qY: number; qX: number; pY: number; pX: number; bytes: number };
  tileRows: number;
  tileBytes: number;
  tiles: TilePlan[];
  /** Memory the plan accounts for, at most the budget. */
  plannedBytes: number;
}

function gcd(a: number, b: number): number { return b === 0 ? a : gcd(b, a % b); }
function lcm(a: number, b: number): number { return (a / gcd(a, b)) * b; }

export function previewBytes(d: DatasetDescriptor, detBin: number, scanBin: number): number {
  const s = d.shape;
  return Math.ceil(s.scanY / scanBin) * Math.ceil(s.scanX / scanBin) * Math.ceil(s.detY / detBin) * Math.ceil(s.detX / detBin) * 4;
}

/**
 * Choose detector binning first (down to 16 px across), then scan binning, both in powers
 * of two, until the preview cube fits its budget.
 */
export function choosePreviewBinning(d: DatasetDescriptor, budget: number): { detBin: number; scanBin: number } {
  let detBin = 1;
  let scanBin = 1;
  const minDet = Math.min(d.shape.detY, d.shape.detX);
  while (previewBytes(d, detBin, scanBin) > budget && minDet / (detBin * 2) >= 16) detBin *= 2;
  while (previewBytes(d, detBin, scanBin) > budget && scanBin < Math.max(d.shape.scanY, d.shape.scanX)) scanBin *= 2;
  while (previewBytes(d, detBin, scanBin) > budget && detBin < minDet) detBin *= 2;
  return { detBin, scanBin };
}

export interface TilesPlan {
  tileRows: number;
  tileBytes: number;
  tiles: TilePlan[];
  plannedBytes: number;
}

/**
 * Split the scan into tiles of whole rows so that every worker's tile plus `reservedBytes`
 * (accumulators, results, preview cube) stay inside the budget. Tile height is a multiple of
 * the reader's row alignment (HDF5 chunks) and of `rowMultiple` (e.g. the preview scan bin).
 */
export function planTiles(d: DatasetDescriptor, reader: ReaderFacts, limits: EngineLimits, reservedBytes: number, rowMultiple = 1): TilesPlan {
  const { scanY, scanX, detY, detX } = d.shape;
  const rowBytes = scanX * detY * detX * DTYPE_BYTES[d.dtype];
  const copies = reader.memory.tileCopies;
  // Every worker costs its thread and its reader's fixed memory before any tile.
  const workerBytes = limits.workers * (WORKER_THREAD_BYTES + reader.memory.fixedBytes);
  const perWorker = Math.floor((limits.budgetBytes - reservedBytes - workerBytes) / (limits.workers * copies));
  const unit = lcm(Math.max(1, reader.rowAlignment), rowMultiple);
  if (perWorker < unit * rowBytes) {
    const need = unit * rowBytes * copies * limits.workers + reservedBytes + workerBytes;
    const fixed = reader.memory.fixedBytes > 0 ? ` and ${fmtBytes(reader.memory.fixedBytes)} for the reader (HDF5 library, chunk decompression)` : '';
    throw new InputError(
      `${d.path}: a memory budget of ${fmtBytes(limits.budgetBytes)} is too small for this dataset with ${limits.workers} worker(s): ` +
      `each worker needs ${fmtBytes(WORKER_THREAD_BYTES)} for itself${fixed} and ${copies > 1 ? `${copies} copies of ` : ''}a tile of ${unit} scan row(s) (${fmtBytes(unit * rowBytes)}); ` +
      `expected a budget of at least ${fmtBytes(need)}${limits.workers > 1 ? ' (or fewer workers)' : ''}`, 'too-large');
  }
  let tileRows = Math.floor(Math.min(perWorker, Math.max(MAX_TILE_BYTES, unit * rowBytes)) / (rowBytes * unit)) * unit;
  // Keep at least two tiles per worker when the dataset allows it, for balance and progress.
  const balanced = Math.ceil(Math.ceil(scanY / (2 * limits.workers)) / unit) * unit;
  tileRows = Math.max(unit, Math.min(tileRows, balanced, Math.ceil(scanY / unit) * unit));
  const tiles: TilePlan[] = [];
  for (let r = 0; r < scanY; r += tileRows) {
    const n = Math.min(tileRows, scanY - r);
    tiles.push({ row0: r, nRows: n, bytes: n * rowBytes });
  }
  return { tileRows, tileBytes: tileRows * rowBytes, tiles, plannedBytes: tileRows * rowBytes * copies * limits.workers + reservedBytes + workerBytes };
}

/** The first pass: the preview cube and sum/max accumulators are reserved before the tiles. */
/** `comWatched`: with COM sums in the pass, how many pixels are watched (null: no COM sums). */
export function planFirstPass(d: DatasetDescriptor, reader: ReaderFacts, limits: EngineLimits, comWatched: number | null = null): FirstPassPlan {
  const { scanY, scanX, detY, detX } = d.shape;
  const pixels = detY * detX;
  const previewBudget = Math.min(limits.previewBudgetBytes, Math.floor(limits.budgetBytes / 4));
  const { detBin, scanBin } = choosePreviewBinning(d, previewBudget);
  const pv = { qY: Math.ceil(scanY / scanBin), qX: Math.ceil(scanX / scanBin), pY: Math.ceil(detY / detBin), pX: Math.ceil(detX / detBin), bytes: 0 };
  pv.bytes = previewBytes(d, detBin, scanBin);
  // Accumulators: sum+max (float64) on the main thread and in each worker's reply, totals image.
  // With COM sums: Σ I, Σ I·x, Σ I·y and the watched pixels' values per position, and the mask.
  const com = comWatched === null ? 0 : 8 * scanY * scanX * (3 + 2 + comWatched) + 8 * pixels * 3;
  const accumulators = 16 * pixels * (limits.workers + 1) + 8 * scanY * scanX + com;
  return { detBin, scanBin, preview: pv, ...planTiles(d, reader, limits, pv.bytes + accumulators, scanBin) };
}

/**
 * The most one worker could hold for its reader and tiles: its even share of the budget. Readers
 * use it at open to refuse, before reading anything, a source that cannot fit however the job
 * is planned (the planner then checks the exact plan).
 */
export function memoryPerWorker(limits: EngineLimits): number {
  return Math.floor(limits.budgetBytes / limits.workers);
}

export interface LimitOptions {
  workers?: number;
  budgetBytes?: number;
  previewBudgetBytes?: number;
}

/**
 * The engine's limits from what the user asked for, checked against this machine: a budget
 * above its memory or a preview cube above what WebAssembly can address is refused; workers
 * beyond MAX_WORKERS_PER_CORE per core are capped, with a note saying so.
 */
export function resolveEngineLimits(o: LimitOptions, machine = { cores: os.availableParallelism(), memoryBytes: os.totalmem() }): { limits: EngineLimits; notes: string[] } {
  const notes: string[] = [];
  const maxWorkers = Math.max(2, MAX_WORKERS_PER_CORE * machine.cores);
  let workers = o.workers ?? machine.cores;
  if (!Number.isInteger(workers) || workers < 1) throw new InputError(`workers: expected a whole number ≥ 1, got ${workers}`);
  if (workers > maxWorkers) {
    notes.push(`${workers} workers asked for, but this machine has ${machine.cores} core(s); using ${maxWorkers} (more only add memory and contention)`);
    workers = maxWorkers;
  }
  const budgetBytes = o.budgetBytes ?? DEFAULT_BUDGET;
  const previewBudgetBytes = o.previewBudgetBytes ?? DEFAULT_PREVIEW_BUDGET;
  for (const [name, v] of [['memory budget', budgetBytes], ['preview budget', previewBudgetBytes]] as const) {
    if (!Number.isSafeInteger(v) || v < 1) throw new InputError(`${name}: expected a positive number of bytes, got ${v}`);
  }
  if (budgetBytes > machine.memoryBytes) {
    throw new InputError(`a memory budget of ${fmtBytes(budgetBytes)} is more than this machine's ${fmtBytes(machine.memoryBytes)} of memory; expected at most ${fmtBytes(machine.memoryBytes)}`, 'too-large');
  }
  if (previewBudgetBytes > MAX_PREVIEW_BYTES) {
    throw new InputError(`a preview budget of ${fmtBytes(previewBudgetBytes)} is more than the ${fmtBytes(MAX_PREVIEW_BYTES)} a preview cube can use (it lives in WebAssembly memory, which addresses 4 GiB); expected at most ${fmtBytes(MAX_PREVIEW_BYTES)}`, 'too-large');
  }
  return { limits: { workers, budgetBytes, previewBudgetBytes }, notes };
}

/**
 * The application's preview cube (served mode and the desktop app): detector drags are answered
 * from it, so it must be fine enough to follow a detector and small enough to answer within a
 * frame; 128 MiB answers a weighted annulus on the 2 GiB sample in ~5 ms (512 MiB: ~40 ms).
 */
export const APP_PREVIEW_BUDGET_BYTES = 128 * 2 ** 20;
