import type { RegionShape } from '../model/detectors';
import { checkGrid, describeShape, emptyError, rasterizeCentres, validateShape, type ShapeContext } from './detector-masks';

/*
 * Regions on the Scan view select scan positions by the same centre-inside rules as binary
 * detectors (see detector-masks.ts), in scan coordinates: position (row y, column x) sits at the
 * point (x, y). Rectangles are inclusive; polygons are closed (even–odd interior plus on-edge
 * positions); masks select values > 0.
 */

const REGION_CONTEXT: ShapeContext = { noun: 'region', grid: 'scan', cell: 'scan position' };

/** scanY × scanX, 1 where the scan position lies inside the region. */
export function compileRegion(shape: RegionShape, scanY: number, scanX: number): Uint8Array {
  checkGrid(scanY, scanX, REGION_CONTEXT);
  validateShape(shape, scanY, scanX, REGION_CONTEXT, false);
  const inside = new Uint8Array(scanY * scanX);
  rasterizeCentres(shape, scanY, scanX, inside);
  if (inside.indexOf(1) < 0) throw emptyError(shape, scanY, scanX, REGION_CONTEXT, 0, false);
  return inside;
}

/** One line for humans and for the session file, e.g. "rectangle x=2..10 y=0..5". */
export function describeRegion(shape: RegionShape): string {
  return describeShape(shape);
}
