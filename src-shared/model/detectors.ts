/**
 * Virtual detector shapes, drawn on the Pattern view, in detector-pixel coordinates:
 * x is the column and y the row of a detector pixel, and pixel (row y, column x) has its
 * centre at the integer point (x, y), 0-based. Sub-pixel centres and radii are allowed.
 */
export type DetectorShape =
  | { kind: 'disk'; cx: number; cy: number; r: number }
  | { kind: 'annulus'; cx: number; cy: number; rInner: number; rOuter: number }
  /** Axis-aligned, corners inclusive: pixel centres with x0 ≤ x ≤ x1 and y0 ≤ y ≤ y1. */
  | { kind: 'rectangle'; x0: number; y0: number; x1: number; y1: number }
  /** A simple polygon (≥ 3 vertices), [x, y] pairs; even–odd rule. */
  | { kind: 'polygon'; points: [number, number][] }
  /** A painted mask of the detector's shape, row-major (detY × detX): 0/1 or weights in [0, 1]. */
  | { kind: 'mask'; width: number; height: number; values: ArrayLike<number> };

export interface DetectorSpec {
  shape: DetectorShape;
  /**
   * Area-weighted: each pixel counts with the fraction of its area inside the shape, so an
   * image changes smoothly while a shape is dragged. Default: binary (centre inside).
   */
  weighted?: boolean;
  label?: string;
}

/** A detector ready for a kernel: which pixels count, and how much. */
export type CompiledDetector =
  /** Binary: sorted flat pixel indices (y × detX + x) whose centre lies inside. */
  | { mode: 'indices'; indices: Uint32Array; detY: number; detX: number; label: string }
  /** Weighted: dense detY × detX weights in [0, 1] (float64). */
  | { mode: 'weights'; weights: Float64Array; detY: number; detX: number; label: string };

/** Regions drawn on the Scan view, in scan-position coordinates (x = scan column, y = scan row). */
export type RegionShape =
  | { kind: 'rectangle'; x0: number; y0: number; x1: number; y1: number }
  | { kind: 'polygon'; points: [number, number][] }
  /** A boolean mask of the scan's shape (scanY × scanX), row-major; e.g. one cluster of a cluster map. */
  | { kind: 'mask'; width: number; height: number; values: ArrayLike<number> };
