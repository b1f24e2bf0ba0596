import * as fs from 'node:fs';
import type { DatasetDescriptor, Shape4D, SourceSpec } from '../../src-shared/model/dataset';
import { DTYPE_BYTES, type ByteOrder, type DType } from '../../src-shared/model/dtype';
import { InputError } from '../../src-shared/model/errors';
import { ContiguousTileSource, contiguousFingerprint } from './contiguous';
import { openInputFile, physicalPath, readFullyAt } from './input-file';
import type { TileSource } from './tile-source';
import { scanShapeFor3D, validateShape } from './validate';

const MAGIC = [0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59]; // \x93NUMPY
/** NumPy itself refuses headers over 10 000 bytes by default; a far larger one is not an array we can use. */
const MAX_HEADER_BYTES = 1 << 20;
/**
 * Deepest nesting of dicts, tuples and lists the header parser follows. NumPy's headers nest
 * two levels (the dict, its shape tuple; a structured descr a few more); the bound keeps a
 * hostile header from overflowing the parser's stack.
 */
export const MAX_HEADER_NESTING = 32;

const KIND_TO_DTYPE: Record<string, DType> = {
  u1: 'uint8', u2: 'uint16', u4: 'uint32',
  i1: 'int8', i2: 'int16', i4: 'int32',
  f4: 'float32', f8: 'float64',
};
const SUPPORTED_DESCRS = 'u1 u2 u4 i1 i2 i4 f4 f8 (uint8, uint16, uint32, int8, int16, int32, float32, float64), little- or big-endian';

export interface NpyHeader {
  version: [number, number];
  /** Byte offset of the first data byte: magic + version + length field + header text. */
  dataOffset: number;
  descr: unknown;
  fortranOrder: unknown;
  shape: unknown;
}

/** Open a NumPy .npy file as a TileSource; its descriptor says what was found. */
export async function openNpy(spec: SourceSpec): Promise<TileSource> {
  return openNpySync(spec);
}

/** Validate a .npy file and describe it without keeping it open. */
export async function describeNpy(spec: SourceSpec): Promise<DatasetDescriptor> {
  const source = openNpySync(spec);
  source.close();
  return source.descriptor;
}

function openNpySync(spec: SourceSpec): TileSource {
  if (spec.datasetPath !== undefined) throw new InputError(`${physicalPath(spec.path)}: a .npy file holds one array; --dataset (${spec.datasetPath}) applies to HDF5 files only`, 'bad-input');
  const file = openInputFile(spec.path, 'a NumPy .npy file');
  const path = file.path;
  try {
    const header = readNpyHeader(file.fd, file.size, path);
    const { dtype, byteOrder } = npyDType(header.descr, path);
    if (header.fortranOrder !== false) {
      if (header.fortranOrder === true) {
        throw new InputError(
          `${path}: Fortran-ordered arrays are not supported; save with np.ascontiguousarray (expected fortran_order False)`,
          'unsupported');
      }
      throw new InputError(`${path}: the .npy header's fortran_order is ${JSON.stringify(header.fortranOrder)}; expected True or False`, 'bad-input');
    }
    const storedShape = npyShape(header.shape, path);
    const shape = shapeTo4D(storedShape, spec.scanShape, path);
    const elementBytes = DTYPE_BYTES[dtype];
    validateShape(shape, elementBytes, path);
    const byteSize = shape.scanY * shape.scanX * shape.detY * shape.detX * elementBytes;
    const needed = header.dataOffset + byteSize;
    if (file.size < needed) {
      throw new InputError(
        `${path}: file is ${file.size} bytes; expected at least ${needed} bytes ` +
        `(${header.dataOffset}-byte header + shape (${storedShape.join(', ')}) of ${dtype} = ${byteSize} bytes of data), ` +
        `so ${needed - file.size} bytes are missing — was it truncated?`,
        'short-file');
    }
    const fp = contiguousFingerprint(file.fd, { format: 'npy', shape, dtype, byteOrder, dataOffset: header.dataOffset, byteSize }, path);
    const descriptor: DatasetDescriptor = {
      format: 'npy',
      path,
      datasetPath: null,
      shape,
      storedShape,
      dtype,
      byteSize,
      fingerprint: fp,
      layout: { kind: 'contiguous', dataOffset: header.dataOffset, byteOrder },
      spec: { ...spec, format: 'npy', path },
      sourceFiles: [path],
    };
    return new ContiguousTileSource(descriptor, file.fd);
  } catch (e) {
    fs.closeSync(file.fd);
    throw e;
  }
}

/** Read and parse the magic, version and header dict of a .npy file. */
export function readNpyHeader(fd: number, fileSize: number, path: string): NpyHeader {
  const notNpy = (why: string) =>
    new InputError(`${path}: not a NumPy .npy file (${why}); expected one written by numpy.save`, 'bad-input');
  if (fileSize < 10) throw notNpy(`only ${fileSize} bytes, shorter than the 10-byte .npy preamble`);
  const preamble = new Uint8Array(12);
  readFullyAt(fd, preamble.subarray(0, Math.min(12, fileSize)), 0, path);
  if (!MAGIC.every((b, i) => preamble[i] === b)) throw notNpy('it does not start with \\x93NUMPY');
  const major = preamble[6], minor = preamble[7];
  if (!((major === 1 || major === 2 || major === 3) && minor === 0)) {
    throw new InputError(`${path}: .npy format version ${major}.${minor} is not supported; expected 1.0, 2.0 or 3.0`, 'unsupported');
  }
  const view = new DataView(preamble.buffer);
  let headerLength: number, headerStart: number;
  if (major === 1) {
    headerLength = view.getUint16(8, true);
    headerStart = 10;
  } else {
    if (fileSize < 12) throw notNpy(`only ${fileSize} bytes, shorter than the 12-byte version ${major}.0 preamble`);
    headerLength = view.getUint32(8, true);
    headerStart = 12;
  }
  if (headerLength > MAX_HEADER_BYTES) {
    throw new InputError(`${path}: the .npy header claims ${headerLength} bytes; expected at most ${MAX_HEADER_BYTES} (is the file damaged?)`, 'bad-input');
  }
  if (fileSize < headerStart + headerLength) {
    throw new InputError(
      `${path}: file is ${fileSize} bytes but its .npy header ends at byte ${headerStart + headerLength}; expected the whole header to be present`,
      'short-file');
  }
  const raw = Buffer.alloc(headerLength);
  readFullyAt(fd, raw, headerStart, path);
  // Versions 1 and 2 store the header as latin-1; version 3 was added for utf-8 headers.
  const text = raw.toString(major === 3 ? 'utf8' : 'latin1');
  const dict = parsePythonLiteral(text, path);
  if (dict === null || typeof dict !== 'object' || Array.isArray(dict) || dict instanceof PyFloat) {
    throw new InputError(`${path}: the .npy header is not a Python dict; expected {'descr': ..., 'fortran_order': ..., 'shape': ...}`, 'bad-input');
  }
  for (const key of ['descr', 'fortran_order', 'shape']) {
    if (!(key in dict)) {
      throw new InputError(`${path}: the .npy header lacks '${key}'; expected the keys 'descr', 'fortran_order' and 'shape'`, 'bad-input');
    }
  }
  return {
    version: [major, minor],
    dataOffset: headerStart + headerLength,
    descr: dict.descr,
    fortranOrder: dict.fortran_order,
    shape: dict.shape,
  };
}

/** Map a NumPy dtype string such as '<u2' or '>f8' to our DType and byte order. */
export function npyDType(descr: unknown, path: string): { dtype: DType; byteOrder: ByteOrder } {
  if (typeof descr !== 'string') {
    throw new InputError(
      `${path}: structured dtype ${pythonRepr(descr)} is not supported; expected a plain numeric dtype: ${SUPPORTED_DESCRS}`,
      'bad-dtype');
  }
  const m = /^([<>|=]?)([a-zA-Z])(\d+)$/.exec(descr);
  const dtype = m ? KIND_TO_DTYPE[m[2] + m[3]] : undefined;
  if (!m || !dtype) {
    throw new InputError(`${path}: dtype '${descr}'${npyDTypeHint(descr)} is not supported; expected one of ${SUPPORTED_DESCRS}`, 'bad-dtype');
  }
  const order = m[1];
  const elementBytes = DTYPE_BYTES[dtype];
  if (order === '|' && elementBytes > 1) {
    throw new InputError(`${path}: dtype '${descr}' has no byte order ('|') but is ${elementBytes} bytes wide; expected '<' or '>'`, 'bad-dtype');
  }
  // '=' is the writer's native order; every machine that writes these files today is little-endian.
  return { dtype, byteOrder: order === '>' && elementBytes > 1 ? 'big' : 'little' };
}

function npyDTypeHint(descr: string): string {
  const kind = descr.replace(/^[<>|=]/, '');
  const names: Record<string, string> = {
    f2: 'float16', c8: 'complex64', c16: 'complex128', u8: 'uint64', i8: 'int64', b1: 'bool', O: 'Python objects', f16: 'long double',
  };
  if (names[kind]) return ` (${names[kind]})`;
  if (kind.startsWith('U') || kind.startsWith('S')) return ' (text)';
  return '';
}

/**
 * The header's shape as whole numbers. NumPy writes it as a tuple of Python ints; a float
 * literal such as 4.0 or 8e0 is refused even when its value is whole (NumPy refuses it too).
 */
export function npyShape(shape: unknown, path: string): number[] {
  const float = Array.isArray(shape) ? shape.find((d): d is PyFloat => d instanceof PyFloat) : undefined;
  if (float) {
    throw new InputError(
      `${path}: the .npy header's shape ${pythonRepr(shape)} holds a non-integer ${float.text}; expected whole numbers (Python ints) as NumPy writes them`,
      'bad-shape');
  }
  if (!Array.isArray(shape) || !shape.every((d) => typeof d === 'number')) {
    throw new InputError(`${path}: the .npy header's shape is ${pythonRepr(shape)}; expected a tuple of whole numbers`, 'bad-input');
  }
  for (const d of shape as number[]) {
    if (!Number.isInteger(d)) {
      throw new InputError(`${path}: the .npy header's shape ${pythonRepr(shape)} has a non-integer size; expected whole numbers`, 'bad-shape');
    }
  }
  return shape as number[];
}

function shapeTo4D(stored: number[], scanShape: [number, number] | undefined, path: string): Shape4D {
  if (stored.length === 4) {
    const [scanY, scanX, detY, detX] = stored;
    if (scanShape && (scanShape[0] !== scanY || scanShape[1] !== scanX)) {
      throw new InputError(
        `${path}: the array is 4-D with scan shape ${scanY}×${scanX}, but scan shape ${scanShape[0]}×${scanShape[1]} was asked for; expected them to agree (or give none)`,
        'bad-shape');
    }
    return { scanY, scanX, detY, detX };
  }
  if (stored.length === 3) {
    const [positions, detY, detX] = stored;
    const [scanY, scanX] = scanShapeFor3D(positions, scanShape, path);
    return { scanY, scanX, detY, detX };
  }
  throw new InputError(
    `${path}: the array is ${stored.length}-D with shape (${stored.join(', ')}); expected 4-D (scan_y, scan_x, det_y, det_x) or 3-D (positions, det_y, det_x) with a scan shape`,
    'bad-rank');
}

/** A Python float literal (4.0, 8e0): kept apart from ints, which parse to plain numbers. */
export class PyFloat {
  constructor(readonly value: number, readonly text: string) {}
}

export type PyValue = string | number | PyFloat | boolean | null | PyValue[] | { [key: string]: PyValue };

/**
 * Parse the Python literal NumPy writes as the header (a dict of strings, booleans,
 * integers, tuples and lists). Written by hand because the format is Python syntax, not
 * JSON: single or double quotes, tuples, True/False/None, trailing commas. Ints (also
 * Python 2's 4L) become numbers, floats become PyFloat; nesting deeper than
 * MAX_HEADER_NESTING is refused.
 */
export function parsePythonLiteral(text: string, path: string): PyValue {
  let i = 0;
  let depth = 0;
  const fail = (why: string): never => {
    throw new InputError(
      `${path}: the .npy header is not a valid Python literal (${why} at character ${i}: ${JSON.stringify(text.slice(Math.max(0, i - 20), i + 20))}); expected a dict like {'descr': '<u2', 'fortran_order': False, 'shape': (4, 4, 8, 8), }`,
      'bad-input');
  };
  const skipSpace = () => {
    while (i < text.length && /\s/.test(text[i])) i++;
  };
  const enter = () => {
    if (++depth > MAX_HEADER_NESTING) {
      throw new InputError(
        `${path}: the .npy header nests too deeply (more than ${MAX_HEADER_NESTING} levels of brackets at character ${i}); ` +
        `expected a flat dict like {'descr': '<u2', 'fortran_order': False, 'shape': (4, 4, 8, 8), }`,
        'bad-input');
    }
  };
  const sequence = (close: string): PyValue[] => {
    const items: PyValue[] = [];
    for (;;) {
      skipSpace();
      if (text[i] === close) { i++; return items; }
      items.push(value());
      skipSpace();
      if (text[i] === ',') { i++; continue; }
      if (text[i] === close) { i++; return items; }
      fail(`expected ',' or '${close}'`);
    }
  };
  const dict = (): { [key: string]: PyValue } => {
    const out: { [key: string]: PyValue } = {};
    for (;;) {
      skipSpace();
      if (text[i] === '}') { i++; return out; }
      const key = value();
      if (typeof key !== 'string') fail('dict key is not a string');
      skipSpace();
      if (text[i] !== ':') fail("expected ':'");
      i++;
      out[key as string] = value();
      skipSpace();
      if (text[i] === ',') { i++; continue; }
      if (text[i] === '}') { i++; return out; }
      fail("expected ',' or '}'");
    }
  };
  const string = (): string => {
    const quote = text[i++];
    let out = '';
    while (i < text.length && text[i] !== quote) {
      const c = text[i++];
      if (c !== '\\') { out += c; continue; }
      const e = text[i++];
      if (e === undefined) break;
      const simple: Record<string, string> = { n: '\n', t: '\t', r: '\r', '0': '\0', '\\': '\\', "'": "'", '"': '"' };
      if (simple[e] !== undefined) { out += simple[e]; continue; }
      const hexLength = e === 'x' ? 2 : e === 'u' ? 4 : e === 'U' ? 8 : 0;
      if (hexLength) {
        const hex = text.slice(i, i + hexLength);
        if (!/^[0-9a-fA-F]+$/.test(hex) || hex.length !== hexLength) fail('bad escape in string');
        out += String.fromCodePoint(parseInt(hex, 16));
        i += hexLength;
        continue;
      }
      out += '\\' + e;
    }
    if (text[i] !== quote) fail('unterminated string');
    i++;
    return out;
  };
  const value = (): PyValue => {
    skipSpace();
    const c = text[i];
    if (c === '{' || c === '(' || c === '[') {
      enter();
      i++;
      const v = c === '{' ? dict() : sequence(c === '(' ? ')' : ']');
      depth--;
      return v;
    }
    if (c === "'" || c === '"') return string();
    // Python 2 era writers may prefix strings with u or b.
    if ((c === 'u' || c === 'b' || c === 'U' || c === 'B') && (text[i + 1] === "'" || text[i + 1] === '"')) { i++; return string(); }
    const num = /^[-+]?\d+(\.\d*)?([eE][-+]?\d+)?[lL]?/.exec(text.slice(i, i + 64));
    if (num) {
      i += num[0].length;
      const n = Number(num[0].replace(/[lL]$/, ''));
      // A fraction or an exponent makes a Python float, whatever its value.
      return num[1] !== undefined || num[2] !== undefined ? new PyFloat(n, num[0]) : n;
    }
    const word = /^[A-Za-z_]\w*/.exec(text.slice(i, i + 64));
    if (word) {
      i += word[0].length;
      if (word[0] === 'True') return true;
      if (word[0] === 'False') return false;
      if (word[0] === 'None') return null;
      i -= word[0].length;
      fail(`unknown name '${word[0]}'`);
    }
    return fail(i >= text.length ? 'unexpected end' : `unexpected '${c}'`);
  };
  const result = value();
  skipSpace();
  if (i < text.length) fail('text after the literal');
  return result;
}

function pythonRepr(v: unknown): string {
  if (v instanceof PyFloat) return v.text;
  if (Array.isArray(v)) return '(' + v.map(pythonRepr).join(', ') + ')';
  if (typeof v === 'string') return `'${v}'`;
  if (v === true) return 'True';
  if (v === false) return 'False';
  if (v === null || v === undefined) return 'None';
  if (typeof v === 'object') return '{' + Object.entries(v).map(([k, x]) => `'${k}': ${pythonRepr(x)}`).join(', ') + '}';
  return String(v);
}
