import type { DatasetDescriptor } from '../../src-shared/model/dataset';
import type { DType, NumericArray } from '../../src-shared/model/dtype';

/**
 * One interface over every reader. A tile is a block of whole scan rows.
 * Reads are synchronous: they run inside worker threads, one tile at a time.
 */
/** What reading costs a worker beyond the kernel's tile, so the planner needs no format checks. */
export interface ReaderMemory {
  /** Copies of a tile the reader holds while reading (HDF5: its own heap copy and ours). */
  tileCopies: number;
  /** Fixed bytes per worker whatever the tile (a library's heap, a chunk being inflated). */
  fixedBytes: number;
}

export interface TileSource {
  readonly descriptor: DatasetDescriptor;
  readonly memory: ReaderMemory;
  /**
   * Scan rows that storage groups together (HDF5 chunk extent along scan_y, or along the
   * position axis expressed in rows when whole rows fit in a chunk); 1 for raw and .npy.
   * Tiles whose height is a multiple of this are read along chunk boundaries.
   */
  readonly rowAlignment: number;
  /**
   * Read scan rows [row0, row0 + nRows) into `dest`, which holds exactly
   * nRows × scanX × detY × detX elements of descriptor.dtype. Values arrive in native
   * (little-endian) order. `dest` may be a view on WebAssembly memory.
   */
  readRows(row0: number, nRows: number, dest: NumericArray): void;
  /** Read the one pattern at scan row y, column x into `dest` (detY × detX elements, native order). */
  readPattern(y: number, x: number, dest: NumericArray): void;
  close(): void;
}

const TYPED_ARRAY_TAG: Record<DType, string> = {
  uint8: 'Uint8Array', uint16: 'Uint16Array', uint32: 'Uint32Array',
  int8: 'Int8Array', int16: 'Int16Array', int32: 'Int32Array',
  float32: 'Float32Array', float64: 'Float64Array',
};

/** Every reader's readPattern checks its request with this: a position inside the scan, a destination of one pattern. */
export function checkPatternRequest(file: string, shape: { scanY: number; scanX: number; detY: number; detX: number }, dtype: DType, y: number, x: number, dest: NumericArray): void {
  if (!Number.isInteger(y) || !Number.isInteger(x) || y < 0 || x < 0 || y >= shape.scanY || x >= shape.scanX) {
    throw new Error(`readPattern on ${file}: position (${y}, ${x}) is outside the ${shape.scanY}×${shape.scanX} scan`);
  }
  const tag = Object.prototype.toString.call(dest).slice(8, -1);
  if (tag !== TYPED_ARRAY_TAG[dtype] || dest.length !== shape.detY * shape.detX) {
    throw new Error(`readPattern on ${file}: dest is a ${tag} of ${dest.length}, expected a ${TYPED_ARRAY_TAG[dtype]} of ${shape.detY * shape.detX}`);
  }
}

/**
 * Every reader's readRows checks its request with this before touching the file: rows inside
 * the scan, a destination of the right type and length. A plain Error: this is a caller bug.
 */
export function checkRowRequest(file: string, scanY: number, rowElements: number, dtype: DType,
  row0: number, nRows: number, dest: NumericArray): void {
  if (!Number.isInteger(row0) || row0 < 0) {
    throw new Error(`readRows on ${file}: row0 must be a whole number ≥ 0, got ${row0}`);
  }
  if (!Number.isInteger(nRows) || nRows < 1) {
    throw new Error(`readRows on ${file}: nRows must be a whole number ≥ 1, got ${nRows}`);
  }
  if (row0 + nRows > scanY) {
    throw new Error(`readRows on ${file}: rows [${row0}, ${row0 + nRows}) run past scan_y = ${scanY}`);
  }
  const tag = Object.prototype.toString.call(dest).slice(8, -1);
  if (tag !== TYPED_ARRAY_TAG[dtype]) {
    throw new Error(`readRows on ${file}: dest is a ${tag}, expected a ${TYPED_ARRAY_TAG[dtype]} for ${dtype} data`);
  }
  const expected = nRows * rowElements;
  if (dest.length !== expected) {
    throw new Error(`readRows on ${file}: dest holds ${dest.length} elements, expected ${nRows} rows × ${rowElements} = ${expected}`);
  }
}
