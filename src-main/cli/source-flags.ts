import { parseArgs } from 'node:util';
import { OutputFile } from '../io/output-file';
import { physicalPath } from '../io/input-file';
import { closestFlag } from './help';
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
  trailer: { type: 'string' },
  format: { type: 'string' },
} as const;

const DECIMAL = /^[-+]?(\d+(\.\d*)?|\.\d+)([eE][-+]?\d+)?$/;
const WHOLE = /^\d+$/;

/** A number as people write one in decimal ("-1", "2.5", "1e-3"); hex, blanks and "Infinity" are refused. */
export function decimalNumber(flag: string, s: string, what = 'a number'): number {
  const t = s.trim();
  const v = Number(t);
  if (!DECIMAL.test(t) || !Number.isFinite(v)) throw new InputError(`--${flag} ${JSON.stringify(s)}: expected ${what}`);
  return v;
}

/** A whole number written in plain digits, at least `min`. */
export function wholeNumber(flag: string, s: string, min = 0, what = `a whole number ≥ ${min}`): number {
  const t = s.trim();
  const v = Number(t);
  if (!WHOLE.test(t) || !Number.isSafeInteger(v) || v < min) throw new InputError(`--${flag} ${JSON.stringify(s)}: expected ${what}`);
  return v;
}

/** `count` comma-separated numbers of a flag: any finite decimal numbers, or positive whole ones in plain digits. */
export function numberList(flag: string, s: string, count: number, kind: 'finite' | 'positive-integer' = 'finite'): number[] {
  const parts = s.split(',').map((p) => p.trim());
  const ok = kind === 'finite'
    ? (p: string) => DECIMAL.test(p) && Number.isFinite(Number(p))
    : (p: string) => WHOLE.test(p) && Number(p) > 0 && Number.isSafeInteger(Number(p));
  if (parts.length !== count || !parts.every(ok)) {
    throw new InputError(`--${flag} ${s}: expected ${count} ${kind === 'finite' ? 'decimal numbers' : 'positive whole numbers (plain digits)'} separated by commas`);
  }
  return parts.map(Number);
}

/**
 * A rectangle flag X0,Y0,X1,Y1: the corner with the smaller coordinates first, so a typing
 * slip (swapped corners) is caught rather than silently reordered.
 */
export function rectangleFlag(flag: string, s: string): { x0: number; y0: number; x1: number; y1: number } {
  const [x0, y0, x1, y1] = numberList(flag, s, 4);
  if (x1 < x0 || y1 < y0) {
    throw new InputError(`--${flag} ${s}: the corners are swapped (${x1 < x0 ? `X1 ${x1} < X0 ${x0}` : `Y1 ${y1} < Y0 ${y0}`}); expected X0,Y0,X1,Y1 with X0 ≤ X1 and Y0 ≤ Y1`);
  }
  return { x0, y0, x1, y1 };
}

const ints = (flag: string, s: string, count: number) => numberList(flag, s, count, 'positive-integer');

type OptionSpec = Record<string, { type: 'string' | 'boolean'; multiple?: boolean }>;

/**
 * Node's parseArgs with our rules: a value that starts with '-' followed by a digit or a point
 * ("--threshold -1", "--rotation -90") is the flag's value, not a flag; malformed flags are
 * bad input with a pointer to --help.
 */
export function parseFlags<O extends OptionSpec>(args: string[], options: O) {
  const joined: string[] = [];
  for (let i = 0; i < args.length; i++) {
    const a = args[i];
    const name = a.startsWith('--') && !a.includes('=') ? a.slice(2) : null;
    const next = args[i + 1];
    if (name !== null && options[name]?.type === 'string' && next !== undefined && /^-[\d.]/.test(next)) {
      joined.push(`${a}=${next}`);
      i++;
    } else joined.push(a);
  }
  let parsed;
  try {
    parsed = parseArgs({ args: joined, options: { ...options, help: { type: 'boolean', short: 'h' } }, allowPositionals: true, strict: true, tokens: true });
  } catch (e) {
    const err = e as Error & { code?: string };
    const ambiguous = /Option '(--[^' ]+)' argument is ambiguous/.exec(err.message);
    if (ambiguous) throw new InputError(`${ambiguous[1]} needs a value, but a flag follows it; expected ${ambiguous[1]} VALUE (a value that starts with "-" is written ${ambiguous[1]}=VALUE)`);
    const missing = /Option '(--[^' ]+) <value>' argument missing/.exec(err.message);
    if (missing) throw new InputError(`${missing[1]} needs a value; expected ${missing[1]} VALUE`);
    const unknown = /Unknown option '(-{1,2}[^']+)'/.exec(err.message);
    if (err.code === 'ERR_PARSE_ARGS_UNKNOWN_OPTION' && unknown) {
      const near = closestFlag(unknown[1].replace(/^-+/, ''), Object.keys(options));
      throw new InputError(`unknown flag ${unknown[1]}${near ? `; did you mean --${near}?` : ''} (scanfold COMMAND --help lists every flag)`);
    }
    throw new InputError(`${err.message.split('\n')[0]} (scanfold COMMAND --help lists every flag)`);
  }
  // A flag given twice would silently take its last value: refused, unless it may repeat.
  const seen = new Set<string>();
  for (const t of parsed.tokens) {
    if (t.kind !== 'option') continue;
    const spec = options[t.name] as { type: string; multiple?: boolean } | undefined;
    // A switch said twice says the same thing twice.
    if (spec?.multiple || spec?.type === 'boolean' || t.name === 'help') continue;
    if (seen.has(t.name)) throw new InputError(`--${t.name} is given twice; expected it once (the second would silently replace the first)`);
    seen.add(t.name);
  }
  return parsed;
}

export function sourceSpecFromFlags(file: string | undefined, v: Record<string, unknown>): SourceSpec {
  if (!file) throw new InputError('no input file given');
  const spec: SourceSpec = { path: physicalPath(file) };
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
    const offset = typeof v.offset === 'string' ? wholeNumber('offset', v.offset, 0, 'a whole number of bytes ≥ 0 (plain digits)') : 0;
    const trailer = typeof v.trailer === 'string' ? wholeNumber('trailer', v.trailer, 0, 'a whole number of bytes ≥ 0 (plain digits)') : 0;
    spec.format = 'raw';
    spec.raw = { shape: { scanY, scanX, detY, detX }, dtype, byteOrder, offset, ...(trailer ? { trailer } : {}) };
  } else if (v.dtype !== undefined || v['byte-order'] !== undefined || v.offset !== undefined || v.trailer !== undefined) {
    throw new InputError('--dtype, --byte-order, --offset and --trailer describe a raw binary file and need --raw-shape');
  }
  return spec;
}

/** The --out file of a command, checked and with its temporary file created before any work. */
export function outputFlag(out: unknown, usage: string, protect: readonly string[]): OutputFile {
  if (typeof out !== 'string') throw new InputError(`${usage} needs --out OUT.h5`);
  return OutputFile.create(out, { flag: '--out', protect });
}

/** Refuse what the command would otherwise ignore. */
export function rejectExtraPositionals(positionals: string[], command: string): void {
  if (positionals.length > 1) throw new InputError(`${command} takes one input file, got ${positionals.length}: ${positionals.join(' ')}`);
}
