import type { DType, NumericArray } from '../model/dtype';

/**
 * Geometry of the first streaming pass over one tile of whole scan rows.
 * The preview cube bins the detector by `detBin` and the scan by `scanBin`
 * (edge bins may be partial). A preview value is the detector-bin SUM averaged over
 * the scan bin, so a detector summed over the preview cube approximates the same
 * detector summed over the full pattern (same units).
 */
export interface FirstPassGeometry {
  scanX: number;
  detY: number;
  detX: number;
  detBin: number;
  scanBin: number;
}

export interface FirstPassTileResult {
  /** Σ over the tile's patterns, per detector pixel (detY × detX), float64. */
  sum: Float64Array;
  /** max over the tile's patterns, per detector pixel; -Infinity where every value was non-finite. */
  max: Float64Array;
  /** Σ of each pattern (nRows × scanX). */
  total: Float64Array;
  /** Preview rows for this tile: ceil(nRows/scanBin) × ceil(scanX/scanBin) × ceil(detY/detBin) × ceil(detX/detBin). */
  preview: Float32Array;
  /** NaN / ±Inf values met (float data only); they are left out of every sum and max. */
  nonFinite: number;
}

export interface FirstPassOutputs {
  preview?: Float32Array;
  total?: Float64Array;
}

/** The fast kernel (WebAssembly SIMD) and its plain TypeScript twin share this shape. */
export interface FirstPassKernel {
  /** A writable view of `nElements` elements of `dtype` that the next `run` reads: read the tile straight into it. */
  tileBuffer(dtype: DType, nElements: number): NumericArray;
  /**
   * Process `nRows` scan rows held in the tile buffer. Tiles must start on a multiple of scanBin.
   * With `out`, the preview and totals are written into the given arrays (e.g. views on a
   * SharedArrayBuffer that holds the whole preview cube) and returned as those same arrays,
   * instead of fresh ones: fresh memory costs page faults, which are slow on some machines.
   */
  run(dtype: DType, nRows: number, geometry: FirstPassGeometry, out?: FirstPassOutputs): FirstPassTileResult;
  /**
   * For each of nPix pixels, how many of the first nPatterns patterns in the tile buffer hold NaN
   * or ±Infinity there (all zero for integer data): so a mean can divide by each pixel's own
   * finite values. Call after `run`, on the same tile.
   */
  nonFiniteCounts(dtype: DType, nPatterns: number, nPix: number): Float64Array;
}

export function previewDims(scanY: number, g: FirstPassGeometry) {
  return {
    qY: Math.ceil(scanY / g.scanBin),
    qX: Math.ceil(g.scanX / g.scanBin),
    pY: Math.ceil(g.detY / g.detBin),
    pX: Math.ceil(g.detX / g.detBin),
  };
}
