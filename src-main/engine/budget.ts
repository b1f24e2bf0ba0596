import type { DatasetDescriptor } from '../../src-shared/model/dataset';
import { DTYPE_BYTES } from '../../src-shared/model/dtype';
import { InputError } from '../../src-shared/model/errors';

export const MiB = 1024 * 1024;
export const GiB = 1024 * MiB;

export interface EngineLimits {
  /** Upper bound for everything the engine holds for one job: tiles in all workers, accumulators, preview cube. */
  budgetBytes: number;
  /** Upper bound for the preview cube (it is also kept under a quarter of the budget). */
  previewBudgetBytes: number;
  workers: number;
}

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
export function planTiles(d: DatasetDescriptor, rowAlignment: number, limits: EngineLimits, reservedBytes: number, rowMultiple = 1): TilesPlan {
  const { scanY, scanX, detY, detX } = d.shape;
  const rowBytes = scanX * detY * detX * DTYPE_BYTES[d.dtype];
  // HDF5 tiles exist twice in a worker: h5wasm's heap copy and the kernel's memory.
  const copies = d.format === 'hdf5' ? 2 : 1;
  const perWorker = Math.floor((limits.budgetBytes - reservedBytes) / (limits.workers * copies));
  const unit = lcm(Math.max(1, rowAlignment), rowMultiple);
  if (perWorker < unit * rowBytes) {
    const need = unit * rowBytes * copies * limits.workers + reservedBytes;
    throw new InputError(
      `${d.path}: a memory budget of ${fmtBytes(limits.budgetBytes)} is too small for this dataset ` +
      `(one tile of ${unit} scan row(s) is ${fmtBytes(unit * rowBytes)} per worker, ${limits.workers} worker(s)); ` +
      `expected a budget of at least ${fmtBytes(need)}`, 'bad-input');
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
  return { tileRows, tileBytes: tileRows * rowBytes, tiles, plannedBytes: tileRows * rowBytes * copies * limits.workers + reservedBytes };
}

/** The first pass: the preview cube and sum/max accumulators are reserved before the tiles. */
export function planFirstPass(d: DatasetDescriptor, rowAlignment: number, limits: EngineLimits): FirstPassPlan {
  const { scanY, scanX, detY, detX } = d.shape;
  const pixels = detY * detX;
  const previewBudget = Math.min(limits.previewBudgetBytes, Math.floor(limits.budgetBytes / 4));
  const { detBin, scanBin } = choosePreviewBinning(d, previewBudget);
  const pv = { qY: Math.ceil(scanY / scanBin), qX: Math.ceil(scanX / scanBin), pY: Math.ceil(detY / detBin), pX: Math.ceil(detX / detBin), bytes: 0 };
  pv.bytes = previewBytes(d, detBin, scanBin);
  // Accumulators: sum+max (float64) on the main thread and in each worker's reply, totals image.
  const accumulators = 16 * pixels * (limits.workers + 1) + 8 * scanY * scanX;
  return { detBin, scanBin, preview: pv, ...planTiles(d, rowAlignment, limits, pv.bytes + accumulators, scanBin) };
}

export function fmtBytes(n: number): string {
  if (n >= GiB) return `${(n / GiB).toFixed(2)} GiB`;
  if (n >= MiB) return `${(n / MiB).toFixed(1)} MiB`;
  if (n >= 1024) return `${(n / 1024).toFixed(1)} KiB`;
  return `${n} B`;
}

/** Parse "1GiB", "512MiB", "64M", "1073741824" into bytes. */
export function parseBytes(s: string): number {
  const m = /^\s*(\d+(?:\.\d+)?)\s*(b|k|kb|kib|m|mb|mib|g|gb|gib|t|tb|tib)?\s*$/i.exec(s);
  if (!m) throw new InputError(`cannot read "${s}" as a size; expected e.g. 1GiB, 512MiB or a number of bytes`);
  const v = parseFloat(m[1]);
  const unit = (m[2] ?? 'b').toLowerCase()[0];
  const mult = unit === 'k' ? 1024 : unit === 'm' ? MiB : unit === 'g' ? GiB : unit === 't' ? 1024 * GiB : 1;
  return Math.floor(v * mult);
}
