import * as fs from 'node:fs';
import type { DatasetDescriptor, Shape4D, SourceSpec } from '../../src-shared/model/dataset';
import { DTYPE_BYTES, DTYPES, isDType, type ByteOrder, type DType } from '../../src-shared/model/dtype';
import { InputError } from '../../src-shared/model/errors';
import { ContiguousTileSource, contiguousFingerprint, shapeText } from './contiguous';
import { openInputFile, physicalPath } from './input-file';
import type { TileSource } from './tile-source';
import { validateShape } from './validate';

/**
 * Open a raw binary stack the user described (shape, dtype, byte order, header offset).
 * The file may be longer than offset + data: trailing bytes (footers, padding) are common
 * in instrument output and are ignored.
 */
export async function openRaw(spec: SourceSpec): Promise<TileSource> {
  return openRawSync(spec);
}

/** Validate a raw binary file against its described layout without keeping it open. */
export async function describeRaw(spec: SourceSpec): Promise<DatasetDescriptor> {
  const source = openRawSync(spec);
  source.close();
  return source.descriptor;
}

function openRawSync(spec: SourceSpec): TileSource {
  let path = physicalPath(spec.path);
  const { shape, dtype, byteOrder, offset, trailer } = checkRawLayout(spec.raw, path);
  const elementBytes = DTYPE_BYTES[dtype];
  validateShape(shape, elementBytes, path);
  const byteSize = shape.scanY * shape.scanX * shape.detY * shape.detX * elementBytes;
  const needed = offset + byteSize;
  if (!Number.isSafeInteger(needed)) {
    throw new InputError(`${path}: offset ${offset} + ${byteSize} data bytes overflows 2^53 bytes; expected a real file size`, 'bad-shape');
  }
  const file = openInputFile(spec.path, 'a raw binary file');
  path = file.path;
  try {
    // A file that describes itself, read as raw from byte 0, would give its header as counts.
    if (offset === 0) {
      const head = Buffer.alloc(8);
      fs.readSync(file.fd, head, 0, 8, 0);
      const kind = head.subarray(0, 6).equals(NPY_MAGIC) ? 'a NumPy .npy file' : head.equals(HDF5_MAGIC) ? 'an HDF5 file' : null;
      if (kind) {
        throw new InputError(`${path}: is ${kind}, which describes its own shape and type; expected it opened as such, without a raw layout (no --raw-shape, --dtype, --byte-order, --offset or --trailer in the command line)`, 'bad-input');
      }
    }
    if (file.size < needed + trailer) {
      throw new InputError(
        `${path}: file is ${file.size} bytes; expected ${needed + trailer} bytes ` +
        `(offset ${offset} + shape ${shapeText(shape)} of ${dtype} = ${byteSize} bytes of data${trailer ? ` + a trailer of ${trailer}` : ''}), ` +
        `so ${needed + trailer - file.size} bytes are missing — check the shape, dtype and offset`,
        'short-file');
    }
    if (file.size > needed + trailer) {
      throw new InputError(
        `${path}: file is ${file.size} bytes, ${file.size - needed - trailer} more than offset ${offset} + shape ${shapeText(shape)} of ${dtype} ` +
        `(${byteSize} bytes of data)${trailer ? ` + a trailer of ${trailer}` : ''}; expected the description to cover the file — check the shape, dtype and offset ` +
        `(a wrong detector width or a header left out reads every pattern out of step), or give the bytes after the data as --trailer`,
        'bad-shape');
    }
    const fp = contiguousFingerprint(file.fd, { format: 'raw', shape, dtype, byteOrder, dataOffset: offset, byteSize }, path);
    const descriptor: DatasetDescriptor = {
      format: 'raw',
      path,
      datasetPath: null,
      shape,
      storedShape: [shape.scanY, shape.scanX, shape.detY, shape.detX],
      dtype,
      byteSize,
      fingerprint: fp,
      layout: { kind: 'contiguous', dataOffset: offset, byteOrder },
      spec: { ...spec, format: 'raw', path, raw: { shape, dtype, byteOrder, offset, ...(trailer ? { trailer } : {}) } },
      sourceFiles: [path],
    };
    return new ContiguousTileSource(descriptor, file.fd);
  } catch (e) {
    fs.closeSync(file.fd);
    throw e;
  }
}

interface CheckedRawLayout {
  shape: Shape4D;
  dtype: DType;
  byteOrder: ByteOrder;
  offset: number;
  trailer: number;
}

const NPY_MAGIC = Buffer.from([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59]);
const HDF5_MAGIC = Buffer.from([0x89, 0x48, 0x44, 0x46, 0x0d, 0x0a, 0x1a, 0x0a]);

/** The raw layout arrives from the CLI, IPC or a session file, so every field is checked here. */
function checkRawLayout(raw: unknown, path: string): CheckedRawLayout {
  const layoutHelp = 'shape (scan_y, scan_x, det_y, det_x), dtype, byte order (little|big) and header offset in bytes';
  if (raw === null || typeof raw !== 'object') {
    throw new InputError(`${path}: a raw binary file needs its layout described; expected ${layoutHelp}`, 'bad-input');
  }
  const r = raw as Record<string, unknown>;
  const s = r.shape as Record<string, unknown> | null | undefined;
  if (s === null || typeof s !== 'object') {
    throw new InputError(`${path}: raw layout has no shape; expected ${layoutHelp}`, 'bad-shape');
  }
  const shape: Shape4D = { scanY: s.scanY as number, scanX: s.scanX as number, detY: s.detY as number, detX: s.detX as number };
  const dtype = r.dtype;
  if (typeof dtype !== 'string' || !isDType(dtype)) {
    throw new InputError(`${path}: dtype ${JSON.stringify(dtype)} is not supported; expected one of ${DTYPES.join(', ')}`, 'bad-dtype');
  }
  const byteOrder = r.byteOrder;
  if (byteOrder !== 'little' && byteOrder !== 'big') {
    throw new InputError(`${path}: byte order ${JSON.stringify(byteOrder)} is not one we know; expected "little" or "big"`, 'bad-input');
  }
  const offset = r.offset;
  if (typeof offset !== 'number' || !Number.isSafeInteger(offset) || offset < 0) {
    throw new InputError(`${path}: header offset ${JSON.stringify(offset)} is not usable; expected a whole number of bytes ≥ 0`, 'bad-input');
  }
  const trailer = r.trailer ?? 0;
  if (typeof trailer !== 'number' || !Number.isSafeInteger(trailer) || trailer < 0) {
    throw new InputError(`${path}: trailer ${JSON.stringify(trailer)} is not usable; expected a whole number of bytes ≥ 0`, 'bad-input');
  }
  return { shape, dtype, byteOrder, offset, trailer };
}
