import fs from 'node:fs';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { allocTyped, type NumericArray } from '../../src-shared/model/dtype';
import { isInputError, type InputErrorCode } from '../../src-shared/model/errors';
import { openTileSource } from '../../src-main/io/index';
import { MAX_HEADER_NESTING, parsePythonLiteral, PyFloat } from '../../src-main/io/npy';
import { readNpy2D } from '../../src-main/io/npy-array';
import { makeFixtures } from '../helpers/fixtures';

// Reference files: test/fixtures/make_strictness_fixtures.py, run with Debian's /usr/bin/python3
// (NumPy 1.24, h5py 3.7 / HDF5 1.10). Headers NumPy never writes are bytes written by hand to
// the .npy format spec (numpy/lib/format.py); the rest are written by numpy.save or h5py.

let dir: string;
const inDir = (name: string) => path.join(dir, name);

beforeAll(() => {
  dir = makeFixtures('make_strictness_fixtures.py');
});

afterAll(() => {
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

async function caughtFrom(run: () => unknown): Promise<unknown> {
  try {
    await run();
  } catch (e) {
    return e;
  }
  return undefined;
}

/** Expect an InputError with this code whose message contains every fragment; returns the message. */
async function expectInputError(run: () => unknown, code: InputErrorCode, ...fragments: string[]): Promise<string> {
  const caught = await caughtFrom(run);
  expect(isInputError(caught), `expected an InputError, got ${String(caught)}`).toBe(true);
  const err = caught as Error & { code: InputErrorCode };
  expect(err.code).toBe(code);
  for (const f of fragments) expect(err.message).toContain(f);
  return err.message;
}

/** The whole dataset, read in one tile. */
function readAll(src: Awaited<ReturnType<typeof openTileSource>>): NumericArray {
  const { scanY, scanX, detY, detX } = src.descriptor.shape;
  const all = allocTyped(src.descriptor.dtype, scanY * scanX * detY * detX);
  src.readRows(0, scanY, all);
  return all;
}

describe('.npy header nesting', () => {
  it.each(['deep_nesting.npy', 'deep_nesting_v2.npy'])('%s: 5000-deep brackets are refused, not a stack overflow', async (name) => {
    // reference: bytes written by hand to the .npy format spec (a 1.0 and a 2.0 header whose
    // shape is 5000 nested tuples / lists); NumPy never writes more than a few levels.
    const file = inDir(name);
    const message = await expectInputError(() => openTileSource({ path: file }), 'bad-input',
      file, 'nests too deeply', `more than ${MAX_HEADER_NESTING} levels`, 'expected');
    expect(message).toMatch(/^.+: the \.npy header nests too deeply .*; expected a flat dict like \{'descr'/);
  });

  it('a mask with a 5000-deep header is refused too', async () => {
    // reference: bytes written by hand to the .npy format spec (same file, read as a mask).
    const file = inDir('deep_nesting.npy');
    await expectInputError(() => readNpy2D(file, 'detector mask'), 'bad-input', file, 'nests too deeply');
  });

  it('nesting up to the bound still parses, one more level is refused', () => {
    // reference: Python syntax — nested tuples are valid literals at any depth; the bound is ours.
    // The outer dict is one level, so the shape may nest MAX_HEADER_NESTING - 1 deep.
    const nested = (n: number) => "{'shape': " + '('.repeat(n) + '4,' + ')'.repeat(n) + '}';
    expect(() => parsePythonLiteral(nested(MAX_HEADER_NESTING - 1), 'ok.npy')).not.toThrow();
    expect(() => parsePythonLiteral(nested(MAX_HEADER_NESTING), '/data/deep.npy')).toThrow(/^\/data\/deep\.npy: the \.npy header nests too deeply/);
  });
});

describe('.npy float shapes', () => {
  it.each([
    ['float_shape_point.npy', '4.0', '(4.0, 4, 8, 8)'],
    ['float_shape_exp.npy', '8e0', '(4, 4, 8e0, 8)'],
  ])('%s: a shape holding %s is refused', async (name, literal, shapeText) => {
    // reference: bytes written by hand to the .npy format spec; NumPy 1.24's np.load refuses
    // the same file ("shape is not valid"), since numpy.save writes shapes as Python ints.
    const file = inDir(name);
    const message = await expectInputError(() => openTileSource({ path: file }), 'bad-shape',
      file, `holds a non-integer ${literal}`, 'expected whole numbers');
    expect(message).toContain(shapeText);
  });

  it('a 2-D mask with a float dimension is refused', async () => {
    // reference: bytes written by hand to the .npy format spec (shape (8, 8.0), dtype |b1);
    // NumPy 1.24's np.load refuses it ("shape is not valid").
    const file = inDir('mask_float_dim.npy');
    await expectInputError(() => readNpy2D(file, 'detector mask'), 'bad-shape', file, 'holds a non-integer 8.0', 'expected whole numbers');
  });

  it('Python 2 long ints (4L) are still ints', async () => {
    // reference: bytes written by hand to the .npy format spec, in Python 2's repr (4L);
    // NumPy 1.24's np.load reads it as shape (4, 4, 8, 8).
    const src = await openTileSource({ path: inDir('long_int_shape.npy') });
    try {
      expect(src.descriptor.storedShape).toEqual([4, 4, 8, 8]);
    } finally {
      src.close();
    }
  });

  it('the literal parser keeps floats apart from ints', () => {
    // reference: Python's grammar — 4 and 4L are ints; 4.0, 4., 8e0 and 1.5e-3 are floats.
    const parsed = parsePythonLiteral("{'a': (4, 4L, 4.0, 4., 8e0, 1.5e-3)}", 'x.npy') as { a: unknown[] };
    expect(parsed.a.slice(0, 2)).toEqual([4, 4]);
    for (const [k, text, value] of [[2, '4.0', 4], [3, '4.', 4], [4, '8e0', 8], [5, '1.5e-3', 0.0015]] as const) {
      expect(parsed.a[k]).toBeInstanceOf(PyFloat);
      expect(parsed.a[k]).toMatchObject({ text, value });
    }
  });
});

describe('HDF5 types h5py writes that are not supported', () => {
  it.each([
    ['/complex64', 'complex64'],
    ['/complex128', 'complex128'],
    ['/bool', 'bool'],
  ])('%s is refused as %s', async (datasetPath, typeName) => {
    // reference: h5py 3.7 writes np.complex64 / np.complex128 as an HDF5 compound {r, i} of two
    // float32 / float64, and np.bool_ as an HDF5 enum of int8 {FALSE: 0, TRUE: 1}; the names are
    // NumPy's for the dtype h5py reads back (manifest.json records it).
    const file = inDir('h5py_types.h5');
    const manifest = JSON.parse(fs.readFileSync(inDir('manifest.json'), 'utf8')) as { files: Record<string, Record<string, { numpy_dtype: string }>> };
    expect(manifest.files['h5py_types.h5'][datasetPath.slice(1)].numpy_dtype).toBe(typeName);
    const message = await expectInputError(() => openTileSource({ path: file, datasetPath }), 'bad-dtype',
      `${file}:${datasetPath}`, `data type ${typeName} is not supported; expected one of uint8, `);
    expect(message).not.toMatch(/compound|enum/);
  });

  it('other compounds list their fields and other enums stay "enum"', async () => {
    // reference: h5py 3.7 — a NumPy structured dtype [('x', f4), ('y', f4), ('z', f4)] becomes an
    // HDF5 compound with fields x, y, z; h5py.enum_dtype({RED, GREEN, BLUE}) an HDF5 enum of uint8.
    const file = inDir('h5py_types.h5');
    await expectInputError(() => openTileSource({ path: file, datasetPath: '/xyz' }), 'bad-dtype',
      `${file}:/xyz`, 'data type compound (fields x, y, z) is not supported; expected one of');
    await expectInputError(() => openTileSource({ path: file, datasetPath: '/colour' }), 'bad-dtype',
      `${file}:/colour`, 'data type enum is not supported; expected one of');
  });
});

describe('normal files still open', () => {
  it('a 4-D uint16 array written by numpy.save', async () => {
    // reference: NumPy 1.24 numpy.save of np.arange(1024, dtype='<u2').reshape(4, 4, 8, 8).
    const src = await openTileSource({ path: inDir('normal_numpy.npy') });
    try {
      expect(src.descriptor.storedShape).toEqual([4, 4, 8, 8]);
      expect(src.descriptor.dtype).toBe('uint16');
      expect(Array.from(readAll(src))).toEqual(Array.from({ length: 1024 }, (_, k) => k));
    } finally {
      src.close();
    }
  });

  it('a 2-D bool mask written by numpy.save', () => {
    // reference: NumPy 1.24 numpy.save of an 8×8 bool mask; the values as NumPy wrote them with tofile.
    const m = readNpy2D(inDir('mask_numpy.npy'), 'detector mask');
    expect([m.height, m.width]).toEqual([8, 8]);
    expect(Array.from(m.values)).toEqual(Array.from(fs.readFileSync(inDir('mask_numpy.data.bin'))));
  });

  it('a 4-D uint16 dataset written by h5py, beside the unsupported ones', async () => {
    // reference: h5py 3.7 — the dataset as h5py reads it back (counts.data.bin, little-endian).
    const src = await openTileSource({ path: inDir('h5py_types.h5'), datasetPath: '/counts' });
    try {
      expect(src.descriptor.storedShape).toEqual([4, 4, 8, 8]);
      expect(src.descriptor.dtype).toBe('uint16');
      const ref = fs.readFileSync(inDir('counts.data.bin'));
      expect(Array.from(readAll(src))).toEqual(Array.from(new Uint16Array(ref.buffer, ref.byteOffset, ref.byteLength / 2)));
    } finally {
      src.close();
    }
  });
});
