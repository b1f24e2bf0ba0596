import { checkInputFile } from './input-file';
import { getH5 } from './h5wasm-module';
import fs from 'node:fs';
import { DTYPE_BYTES, typedView } from '../../src-shared/model/dtype';
import { InputError } from '../../src-shared/model/errors';
import { swapBytesInPlace } from './contiguous';
import { openInputFile, readFullyAt } from './input-file';
import { npyDType, npyShape, readNpyHeader } from './npy';

/** A small 2-D array read whole from a .npy file (masks, not datasets). */
export interface SmallArray2D {
  height: number;
  width: number;
  values: Float64Array;
}

const MAX_SMALL_BYTES = 256 * 1024 * 1024;

/**
 * Read a 2-D .npy array (e.g. a painted detector mask or a scan region) as float64. Accepts
 * NumPy's boolean dtype '|b1' besides the numeric ones; C order only.
 */
export function readNpy2D(file: string, what: string): SmallArray2D {
  const f = openInputFile(file, `a .npy ${what}`);
  const abs = f.path;
  try {
    const h = readNpyHeader(f.fd, f.size, abs);
    if (h.fortranOrder !== false) throw new InputError(`${abs}: Fortran-ordered arrays are not supported; save the ${what} with np.ascontiguousarray`, 'unsupported');
    // Whole numbers only, as for datasets: a float such as 8.0 in the shape is refused.
    const shape = npyShape(h.shape, abs);
    if (shape.length !== 2) {
      throw new InputError(`${abs}: the ${what} has shape (${shape.join(', ')}); expected a 2-D array`, 'bad-shape');
    }
    const [height, width] = shape;
    // NumPy's default integer (int64): what np.save(mask.astype(int)) writes, the commonest mask.
    const wide = /^([<>=|])([iu])8$/.exec(String(h.descr));
    if (wide) return readWideIntegers(f.fd, f.size, abs, h.dataOffset, height, width, wide[1] === '>', wide[2] === 'i', what);
    const isBool = h.descr === '|b1';
    const { dtype, byteOrder } = isBool ? { dtype: 'uint8' as const, byteOrder: 'little' as const } : npyDType(h.descr, abs);
    const bytes = height * width * DTYPE_BYTES[dtype];
    if (bytes > MAX_SMALL_BYTES) throw new InputError(`${abs}: the ${what} is ${bytes} bytes; expected a small 2-D array`, 'bad-shape');
    if (f.size < h.dataOffset + bytes) {
      throw new InputError(`${abs}: file is ${f.size} bytes, expected ${h.dataOffset + bytes} for a ${height}×${width} ${String(h.descr)} array`, 'short-file');
    }
    const raw = new Uint8Array(bytes);
    readFullyAt(f.fd, raw, h.dataOffset, abs);
    if (byteOrder === 'big') swapBytesInPlace(raw, DTYPE_BYTES[dtype]);
    const typed = typedView(dtype, raw.buffer, 0, height * width);
    return { height, width, values: Float64Array.from(typed) };
  } finally {
    fs.closeSync(f.fd);
  }
}

/** A 2-D array of 64-bit integers, each converted exactly to a number (refused beyond 2^53). */
function readWideIntegers(fd: number, size: number, abs: string, dataOffset: number, height: number, width: number, big: boolean, signed: boolean, what: string): SmallArray2D {
  const bytes = height * width * 8;
  if (bytes > MAX_SMALL_BYTES) throw new InputError(`${abs}: the ${what} is ${bytes} bytes; expected a small 2-D array`, 'bad-shape');
  if (size < dataOffset + bytes) throw new InputError(`${abs}: file is ${size} bytes, expected ${dataOffset + bytes} for a ${height}×${width} 64-bit integer array`, 'short-file');
  const raw = new Uint8Array(bytes);
  readFullyAt(fd, raw, dataOffset, abs);
  const view = new DataView(raw.buffer);
  const values = new Float64Array(height * width);
  for (let i = 0; i < values.length; i++) {
    const v = signed ? view.getBigInt64(i * 8, !big) : view.getBigUint64(i * 8, !big);
    const n = Number(v);
    if (!Number.isSafeInteger(n)) throw new InputError(`${abs}: the ${what} holds ${v}, beyond what a number holds exactly; expected small integers (0/1) or weights`, 'bad-input');
    values[i] = n;
  }
  return { height, width, values };
}

/**
 * The /labels dataset of a `scanfold kmeans` output (int32, scan_y × scan_x), read whole: it is
 * scan-sized. Refused with a message when the file has none or it is not 2-D integers.
 */
export async function readClusterLabels(file: string): Promise<{ labels: Int32Array; height: number; width: number; clusters: number }> {
  const abs = checkInputFile(file, 'an HDF5 file written by scanfold kmeans').path;
  const { h5wasm } = await getH5();
  let f: InstanceType<typeof h5wasm.File>;
  try {
    f = new h5wasm.File(abs, 'r');
  } catch {
    throw new InputError(`${abs}: not an HDF5 file (or a damaged one); expected the output of scanfold kmeans`, 'bad-input');
  }
  try {
    const d = f.get('labels') as { shape?: number[]; dtype?: string; value?: unknown } | null;
    if (!d || !Array.isArray(d.shape) || d.shape.length !== 2) {
      throw new InputError(`${abs}: no 2-D /labels dataset; expected the output of scanfold kmeans`, 'bad-input');
    }
    const raw = d.value as ArrayLike<number | bigint>;
    const values = new Int32Array(raw.length);
    let clusters = 0;
    for (let i = 0; i < raw.length; i++) {
      const v = Number(raw[i]);
      // Checked before the conversion to 32-bit integers, which would turn 0.5 into 0 unseen.
      if (!Number.isInteger(v) || v < 0 || v > 2 ** 31 - 2) throw new InputError(`${abs}: /labels holds ${raw[i]}; expected cluster indices 0, 1, 2, …`, 'bad-input');
      values[i] = v;
      clusters = Math.max(clusters, v + 1);
    }
    return { labels: values, height: d.shape[0], width: d.shape[1], clusters };
  } finally {
    f.close();
  }
}
