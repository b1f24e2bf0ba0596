import type { DType, NumericArray } from '../model/dtype';
import type { CompiledDetector } from '../model/detectors';

/**
 * Virtual images of several detectors in one pass over a tile of patterns (C-order
 * nPatterns × detY × detX, native little-endian). The fast kernel (WebAssembly SIMD) and its
 * plain TypeScript twin share this shape; the twin is the reference the tests hold it to.
 */
export interface VirtualImageKernel {
  /** A writable view of `nElements` elements of `dtype` that the next run() reads; read the tile straight into it. */
  tileBuffer(dtype: DType, nElements: number): NumericArray;
  /** Detectors for the following runs (all of one detector geometry detY × detX). */
  setDetectors(detectors: CompiledDetector[]): void;
  /**
   * Σ over each detector's pixels (binary) or Σ w·I (weighted) for each pattern in the tile
   * buffer: Float64Array(nDetectors × nPatterns), detector-major. Binary detectors over
   * integer data are exact (integer accumulation, flushed to float64 before overflow).
   * Non-finite values are left out and counted.
   */
  run(dtype: DType, nPatterns: number): { images: Float64Array; nonFinite: number };
}

export interface ComOptions {
  /** Only these pixels count (binary or weighted); null: the whole pattern. */
  mask: CompiledDetector | null;
  /** Pixels with a value below this count as zero (0: no threshold). */
  threshold: number;
}

/**
 * Per-pattern sums for the centre of mass: total I, Σ I·x, Σ I·y, with x the column and y the
 * row index of a detector pixel. COM_x = sumX / total, COM_y = sumY / total.
 */
export interface ComKernel {
  tileBuffer(dtype: DType, nElements: number): NumericArray;
  setOptions(options: ComOptions, detY: number, detX: number): void;
  run(dtype: DType, nPatterns: number): { total: Float64Array; sumX: Float64Array; sumY: Float64Array; nonFinite: number };
}
