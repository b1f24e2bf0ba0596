import fs from 'node:fs';
import path from 'node:path';
import type { DatasetDescriptor, Hdf5DatasetInfo, SourceFormat, SourceSpec } from '../../src-shared/model/dataset';
import { InputError } from '../../src-shared/model/errors';
import type { TileSource } from './tile-source';
import { openNpy } from './npy';
import { openRaw } from './raw';
import { listHdf5Datasets, openHdf5 } from './hdf5';

export type { TileSource } from './tile-source';

const HDF5_MAGIC = Buffer.from([0x89, 0x48, 0x44, 0x46, 0x0d, 0x0a, 0x1a, 0x0a]);
const NPY_MAGIC = Buffer.from([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59]);

/** Decide the format from the spec or, failing that, from the file's first bytes. */
export function detectFormat(spec: SourceSpec): SourceFormat {
  if (spec.format) return spec.format;
  if (spec.raw) return 'raw';
  const file = path.resolve(spec.path);
  let fd: number;
  try {
    fd = fs.openSync(file, 'r');
  } catch {
    throw new InputError(`${file}: file not found or not readable`, 'missing-file');
  }
  try {
    if (!fs.fstatSync(fd).isFile()) throw new InputError(`${file}: not a regular file (a folder?); expected an HDF5, .npy or raw data file`, 'bad-input');
    const head = Buffer.alloc(8);
    const n = fs.readSync(fd, head, 0, 8, 0);
    if (n >= 6 && head.subarray(0, 6).equals(NPY_MAGIC)) return 'npy';
    // The HDF5 superblock may sit after a user block, at 512, 1024, 2048, … bytes.
    const size = fs.fstatSync(fd).size;
    for (let off = 0; off + 8 <= size; off = off === 0 ? 512 : off * 2) {
      if (fs.readSync(fd, head, 0, 8, off) === 8 && head.equals(HDF5_MAGIC)) return 'hdf5';
      if (off > 1 << 24) break;
    }
  } finally {
    fs.closeSync(fd);
  }
  throw new InputError(
    `${file}: not an HDF5 or NumPy .npy file; for a raw binary stack describe it (shape, dtype, byte order, header offset)`,
    'unsupported');
}

/** Open any supported source as a TileSource. */
export async function openTileSource(spec: SourceSpec): Promise<TileSource> {
  const resolved: SourceSpec = { ...spec, path: path.resolve(spec.path) };
  const format = detectFormat(resolved);
  resolved.format = format;
  switch (format) {
    case 'npy': return openNpy(resolved);
    case 'raw': return openRaw(resolved);
    case 'hdf5': return openHdf5(resolved);
  }
}

export type Inspection =
  | { kind: 'dataset'; descriptor: DatasetDescriptor }
  | { kind: 'hdf5-listing'; path: string; datasets: Hdf5DatasetInfo[] };

/**
 * What `scanfold info` shows: the descriptor, or, for an HDF5 file opened without a
 * dataset path, the list of datasets the user may pick from.
 */
export async function inspectSource(spec: SourceSpec): Promise<Inspection> {
  const resolved: SourceSpec = { ...spec, path: path.resolve(spec.path) };
  const format = detectFormat(resolved);
  if (format === 'hdf5' && !resolved.datasetPath) {
    return { kind: 'hdf5-listing', path: resolved.path, datasets: await listHdf5Datasets(resolved.path) };
  }
  const src = await openTileSource({ ...resolved, format });
  try {
    return { kind: 'dataset', descriptor: src.descriptor };
  } finally {
    src.close();
  }
}
