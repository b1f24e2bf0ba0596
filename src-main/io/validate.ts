import { InputError } from '../../src-shared/model/errors';
import { MAX_SAFE_BYTES, type Shape4D } from '../../src-shared/model/dataset';

/** Check a 4-D shape for zero, negative, fractional or absurd sizes; `what` names the file for the message. */
export function validateShape(shape: Shape4D, elementBytes: number, what: string): void {
  const dims: [string, number][] = [['scan_y', shape.scanY], ['scan_x', shape.scanX], ['det_y', shape.detY], ['det_x', shape.detX]];
  for (const [name, v] of dims) {
    if (!Number.isFinite(v) || !Number.isInteger(v) || v <= 0) {
      throw new InputError(`${what}: ${name} must be a positive whole number, got ${v}`, 'bad-shape');
    }
  }
  const bytes = shape.scanY * shape.scanX * shape.detY * shape.detX * elementBytes;
  if (!Number.isSafeInteger(bytes) || bytes >= MAX_SAFE_BYTES) {
    throw new InputError(
      `${what}: shape ${shape.scanY}×${shape.scanX}×${shape.detY}×${shape.detX} × ${elementBytes} bytes overflows 2^53 bytes; expected a real dataset size`,
      'bad-shape');
  }
}

/** Resolve a 3-D (positions, det_y, det_x) dataset to 4-D with the user's scan shape. */
export function scanShapeFor3D(positions: number, scanShape: [number, number] | undefined, what: string): [number, number] {
  if (!scanShape) {
    throw new InputError(`${what}: the dataset is 3-D (${positions} positions × det_y × det_x); give the scan shape (scan_y, scan_x) whose product is ${positions}`, 'bad-shape');
  }
  const [sy, sx] = scanShape;
  if (!Number.isInteger(sy) || !Number.isInteger(sx) || sy <= 0 || sx <= 0) {
    throw new InputError(`${what}: scan shape must be two positive whole numbers, got ${sy},${sx}`, 'bad-shape');
  }
  if (sy * sx !== positions) {
    throw new InputError(`${what}: scan shape ${sy}×${sx} = ${sy * sx} positions, but the dataset has ${positions}; expected scan_y × scan_x = ${positions}`, 'bad-shape');
  }
  return [sy, sx];
}
