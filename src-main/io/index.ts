import fs from 'node:fs';
import { canonicalPath, openInputFile, physicalPath } from './input-file';
import { hdf5SignatureOffset } from './hdf5-signature';
import { userSpec, type SourceFormat, type SourceSpec } from '../../src-shared/model/dataset';
import { InputError } from '../../src-shared/model/errors';
import type { Inspection } from '../../src-shared/contract/service';

export type { Inspection };
import type { TileSource } from './tile-source';
import { openNpy } from './npy';
import { openRaw } from './raw';
import { listHdf5Datasets, openHdf5, type Hdf5ReadOptions } from './hdf5';
import { openHdf5Direct } from './hdf5-direct';

export type { TileSource } from './tile-source';

const NPY_MAGIC = Buffer.from([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59]);

/** Decide the format from the spec or, failing that, from the file's first bytes. */
export function detectFormat(spec: SourceSpec): SourceFormat {
  if (spec.format) return spec.format;
  if (spec.raw) return 'raw';
  const f = openInputFile(spec.path, 'an HDF5, NumPy .npy or described raw data file');
  try {
    const head = Buffer.alloc(6);
    const n = fs.readSync(f.fd, head, 0, 6, 0);
    if (n === 6 && head.equals(NPY_MAGIC)) return 'npy';
    if (hdf5SignatureOffset(f.fd, f.size) !== null) return 'hdf5';
  } finally {
    fs.closeSync(f.fd);
  }
  throw new InputError(
    `${f.path}: not an HDF5 or NumPy .npy file; for a raw binary stack describe it (shape, dtype, byte order, header offset)`,
    'unsupported');
}

/** Open any supported source as a TileSource. */
export async function openTileSource(spec: SourceSpec, options: Hdf5ReadOptions = {}): Promise<TileSource> {
  const resolved: SourceSpec = { ...spec, path: physicalPath(spec.path) };
  const format = detectFormat(resolved);
  resolved.format = format;
  switch (format) {
    case 'npy': return openNpy(resolved);
    case 'raw': return openRaw(resolved);
    case 'hdf5': return resolved.hdf5Direct ? openHdf5Direct(resolved as SourceSpec & { hdf5Direct: NonNullable<SourceSpec['hdf5Direct']> }) : openHdf5(resolved, options);
  }
}


/**
 * What `scanfold info` shows: the descriptor, or, for an HDF5 file opened without a
 * dataset path, the list of datasets the user may pick from.
 */
export async function inspectSource(spec: SourceSpec): Promise<Inspection> {
  const resolved: SourceSpec = { ...spec, path: physicalPath(spec.path) };
  const format = detectFormat(resolved);
  if (format === 'hdf5' && !resolved.datasetPath) {
    return { kind: 'hdf5-listing', path: canonicalPath(resolved.path), datasets: await listHdf5Datasets(resolved.path) };
  }
  const src = await openTileSource({ ...resolved, format });
  try {
    // The engine's internal hint (chunk addresses) is no part of what a user is shown.
    return { kind: 'dataset', descriptor: { ...src.descriptor, spec: userSpec(src.descriptor.spec) } };
  } finally {
    src.close();
  }
}
