import path from 'node:path';
import type { SourceSpec } from '../../src-shared/model/dataset';
import { isDType, DTYPES } from '../../src-shared/model/dtype';
import { InputError } from '../../src-shared/model/errors';

/** Flags every command that reads a dataset accepts. */
export const SOURCE_OPTIONS = {
  dataset: { type: 'string' },
  'scan-shape': { type: 'string' },
  'raw-shape': { type: 'string' },
  dtype: { type: 'string' },
  'byte-order': { type: 'string' },
  offset: { type: 'string' },
  format: { type: 'string' },
} as const;

export const SOURCE_HELP = `source flags:
  --dataset PATH          HDF5: the dataset inside the file (without it, info lists the candidates)
  --scan-shape SY,SX      scan shape for 3-D data (positions, det_y, det_x)
  --raw-shape SY,SX,KY,KX raw binary: the 4-D shape (scan_y, scan_x, det_y, det_x)
  --dtype NAME            raw binary: ${DTYPES.join(', ')}
  --byte-order little|big raw binary: byte order (default little)
  --offset BYTES          raw binary: header bytes to skip (default 0)`;

function ints(flag: string, s: string, count: number): number[] {
  const parts = s.split(',').map((p) => p.trim());
  const nums = parts.map((p) => Number(p));
  if (parts.length !== count || nums.some((n) => !Number.isInteger(n) || n <= 0)) {
    throw new InputError(`--${flag} ${s}: expected ${count} positive whole numbers separated by commas`);
  }
  return nums;
}

export function sourceSpecFromFlags(file: string | undefined, v: Record<string, unknown>): SourceSpec {
  if (!file) throw new InputError('no input file given');
  const spec: SourceSpec = { path: path.resolve(file) };
  if (typeof v.dataset === 'string') spec.datasetPath = v.dataset;
  if (typeof v['scan-shape'] === 'string') {
    const [sy, sx] = ints('scan-shape', v['scan-shape'], 2);
    spec.scanShape = [sy, sx];
  }
  if (typeof v.format === 'string') {
    if (!['hdf5', 'npy', 'raw'].includes(v.format)) throw new InputError(`--format ${v.format}: expected hdf5, npy or raw`);
    spec.format = v.format as SourceSpec['format'];
  }
  const rawShape = v['raw-shape'];
  if (typeof rawShape === 'string' || spec.format === 'raw') {
    if (typeof rawShape !== 'string') throw new InputError(`${spec.path}: raw binary needs --raw-shape SY,SX,KY,KX and --dtype`);
    const [scanY, scanX, detY, detX] = ints('raw-shape', rawShape, 4);
    const dtype = typeof v.dtype === 'string' ? v.dtype : undefined;
    if (!dtype) throw new InputError(`${spec.path}: raw binary needs --dtype (one of ${DTYPES.join(', ')})`);
    if (!isDType(dtype)) throw new InputError(`--dtype ${dtype}: unknown dtype; expected one of ${DTYPES.join(', ')}`, 'bad-dtype');
    const byteOrder = typeof v['byte-order'] === 'string' ? v['byte-order'] : 'little';
    if (byteOrder !== 'little' && byteOrder !== 'big') throw new InputError(`--byte-order ${byteOrder}: expected little or big`);
    const offStr = typeof v.offset === 'string' ? v.offset : '0';
    const offset = Number(offStr);
    if (!Number.isSafeInteger(offset) || offset < 0) throw new InputError(`--offset ${offStr}: expected a whole number of bytes ≥ 0`);
    spec.format = 'raw';
    spec.raw = { shape: { scanY, scanX, detY, detX }, dtype, byteOrder, offset };
  } else if (v.dtype !== undefined || v['byte-order'] !== undefined || v.offset !== undefined) {
    throw new InputError('--dtype, --byte-order and --offset describe a raw binary file and need --raw-shape');
  }
  return spec;
}
