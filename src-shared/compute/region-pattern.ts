import type { NumericArray } from '../model/dtype';

/**
 * Virtual diffraction over a real-space region: fold the patterns of a tile whose positions
 * are selected into running float64 sum and max patterns. Non-finite values are left out
 * and counted, in total and per pixel in `lacking` (so each pixel's mean divides by its own
 * finite values). `select[i]` is 1 when pattern i of the tile is in the region.
 */
export function accumulateRegionPatterns(
  tile: NumericArray, nPatterns: number, pixels: number, select: Uint8Array,
  sum: Float64Array, max: Float64Array, lacking?: Float64Array,
): { count: number; nonFinite: number } {
  if (tile.length !== nPatterns * pixels) throw new Error(`accumulateRegionPatterns: tile holds ${tile.length} values, expected ${nPatterns} × ${pixels}`);
  if (select.length !== nPatterns) throw new Error(`accumulateRegionPatterns: select has ${select.length} entries, expected ${nPatterns}`);
  let count = 0;
  let nonFinite = 0;
  const float = tile instanceof Float32Array || tile instanceof Float64Array;
  for (let p = 0; p < nPatterns; p++) {
    if (!select[p]) continue;
    count++;
    const base = p * pixels;
    if (float) {
      for (let i = 0; i < pixels; i++) {
        const v = tile[base + i];
        if (!Number.isFinite(v)) { nonFinite++; if (lacking) lacking[i]++; continue; }
        sum[i] += v;
        if (v > max[i]) max[i] = v;
      }
    } else {
      for (let i = 0; i < pixels; i++) {
        const v = tile[base + i];
        sum[i] += v;
        if (v > max[i]) max[i] = v;
      }
    }
  }
  return { count, nonFinite };
}

/** Fold a partial sum and max pattern into running ones (merging tiles' results). */
export function foldSumMax(sum: Float64Array, max: Float64Array, partSum: Float64Array, partMax: Float64Array): void {
  for (let i = 0; i < sum.length; i++) {
    sum[i] += partSum[i];
    if (partMax[i] > max[i]) max[i] = partMax[i];
  }
}

/**
 * Sums of the patterns of each cluster: sums (k × pixels) and counts (k) gain every pattern of
 * the tile (nPatterns × pixels) under its label (0 … k − 1). Non-finite values are left out and
 * counted, in total and per cluster and pixel in `lacking` (k × pixels).
 */
export function accumulateClusterSums(tile: NumericArray, nPatterns: number, pixels: number, labels: Int32Array, k: number,
  sums: Float64Array, counts: Float64Array, lacking?: Float64Array): { nonFinite: number } {
  if (labels.length !== nPatterns) throw new Error(`accumulateClusterSums: ${labels.length} labels, expected ${nPatterns}`);
  const float = tile instanceof Float32Array || tile instanceof Float64Array;
  let nonFinite = 0;
  for (let p = 0; p < nPatterns; p++) {
    const c = labels[p];
    if (c < 0 || c >= k) throw new Error(`accumulateClusterSums: label ${c} outside 0 … ${k - 1}`);
    counts[c]++;
    const base = p * pixels, to = c * pixels;
    if (float) {
      for (let i = 0; i < pixels; i++) { const v = tile[base + i]; if (v - v !== 0) { nonFinite++; if (lacking) lacking[to + i]++; continue; } sums[to + i] += v; }
    } else {
      for (let i = 0; i < pixels; i++) sums[to + i] += tile[base + i];
    }
  }
  return { nonFinite };
}

/**
 * Add a tile's per-pixel counts of values left out (`part`, absent when it had none) into the
 * running ones, made on first need: returns the running counts (null while no tile had any).
 */
export function addLacking(running: Float64Array | null, part: Float64Array | undefined): Float64Array | null {
  if (!part) return running;
  const into = running ?? new Float64Array(part.length);
  for (let i = 0; i < into.length; i++) into[i] += part[i];
  return into;
}

/** Each pixel's mean over `count` patterns less those it `lacking` a finite value in (0 where none). */
export function meanOfFinite(sum: Float64Array, count: number, lacking: Float64Array | null): Float64Array {
  if (!lacking) return sum.map((v) => v / count);
  return sum.map((v, i) => (count - lacking[i] > 0 ? v / (count - lacking[i]) : 0));
}
