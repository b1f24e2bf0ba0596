import fs from 'node:fs';
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

/** `count` comma-separated numbers of a flag: any finite numbers, or positive whole ones. */
export function numberList(flag: string, s: string, count: number, kind: 'finite' | 'positive-integer' = 'finite'): number[] {
  const parts = s.split(',').map((p) => p.trim());
  const nums = parts.map(Number);
  const ok = kind === 'finite' ? Number.isFinite : (n: number) => Number.isInteger(n) && n > 0;
  if (parts.length !== count || !nums.every(ok)) {
    throw new InputError(`--${flag} ${s}: expected ${count} ${kind === 'finite' ? 'numbers' : 'positive whole numbers'} separated by commas`);
  }
  return nums;
}

const ints = (flag: string, s: string, count: number) => numberList(flag, s, count, 'positive-integer');

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
  if (typeof rawShape === 'string' && spec.format !== undefined && spec.format !== 'raw') {
    throw new InputError(`--format ${spec.format} and --raw-shape contradict each other: --raw-shape describes a raw binary file`);
  }
  if (typeof rawShape === 'string' && spec.datasetPath !== undefined) throw new InputError('--dataset names a dataset inside an HDF5 file; a raw binary file has none');
  if (typeof rawShape === 'string' && spec.scanShape !== undefined) throw new InputError('--scan-shape is for 3-D datasets; a raw binary file takes its whole shape from --raw-shape');
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

/**
 * The --out file of a command: its folder must exist, it must not be a folder, and it must not
 * be the input itself (writing the results would destroy the dataset).
 */
export function resolveOut(out: unknown, input: string, usage: string): string {
  if (typeof out !== 'string') throw new InputError(`${usage} needs --out OUT.h5`);
  const file = path.resolve(out);
  const dir = path.dirname(file);
  if (!fs.existsSync(dir) || !fs.statSync(dir).isDirectory()) throw new InputError(`--out ${file}: the folder ${dir} does not exist`);
  if (fs.existsSync(file)) {
    const st = fs.statSync(file);
    if (st.isDirectory()) throw new InputError(`--out ${file}: is a folder; expected a file name such as results.h5`);
    if (fs.existsSync(input)) {
      const inp = fs.statSync(input);
      if (inp.dev === st.dev && inp.ino === st.ino) throw new InputError(`--out ${file}: is the input file itself; writing results there would destroy the dataset`);
    }
  }
  return file;
}

/** Refuse what the command would otherwise ignore. */
export function rejectExtraPositionals(positionals: string[], command: string): void {
  if (positionals.length > 1) throw new InputError(`${command} takes one input file, got ${positionals.length}: ${positionals.join(' ')}`);
}
