import { spawnSync } from 'node:child_process';
import * as fs from 'node:fs';
import * as os from 'node:os';
import * as nodePath from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { RawLayoutSpec, SourceSpec } from '../../src-shared/model/dataset';
import { allocTyped, type DType, type NumericArray } from '../../src-shared/model/dtype';
import { isInputError, type InputErrorCode } from '../../src-shared/model/errors';
import { swapBytesInPlace } from '../../src-main/io/contiguous';
import { readFullyAt } from '../../src-main/io/input-file';
import { sampleOffsets } from '../../src-main/io/fingerprint';
import { describeNpy, openNpy, parsePythonLiteral } from '../../src-main/io/npy';
import { describeRaw, openRaw } from '../../src-main/io/raw';
import type { TileSource } from '../../src-main/io/tile-source';

// Reference values come from NumPy (Debian's python3-numpy, 1.24 at the time of writing; the
// exact version is recorded in manifest.numpy) run by test/fixtures/make_npy_fixtures.py.
const SCRIPT = fileURLToPath(new URL('../fixtures/make_npy_fixtures.py', import.meta.url));

interface Fixture {
  name: string;
  file: string;
  format: 'npy' | 'raw';
  dtype: DType;
  byteOrder: 'little' | 'big';
  storedShape: number[];
  shape: [number, number, number, number];
  byteSize: number;
  ref: string;
  dataOffset: number;
  scanShape?: [number, number];
  raw?: RawLayoutSpec;
  sumOverScan: number[];
  maxPattern: number[];
  patternSums: number[];
  samples: [[number, number, number, number], number][];
}

interface Manifest {
  numpy: string;
  fixtures: Fixture[];
  bad: Record<string, string>;
  truncatedSize: number;
  truncatedNeeded: number;
  shortRawSize: number;
  shortRawNeeded: number;
}

const READABLE = [
  'le_u1', 'le_u2', 'le_u4', 'le_i1', 'le_i2', 'le_i4', 'le_f4', 'le_f8',
  'be_u2', 'be_i2', 'be_u4', 'be_i4', 'be_f4', 'be_f8',
  'pos3d_u2', 'v2_i2', 'v3_f4', 'odd_header', 'odd_header_3d',
  'raw_u2', 'raw_f4_offset', 'raw_be_i4_offset', 'raw_u1_trailing', 'raw_u2_big', 'raw_far',
];

let dir = '';
let manifest: Manifest;

beforeAll(() => {
  dir = fs.mkdtempSync(nodePath.join(os.tmpdir(), 'scanfold-npy-raw-'));
  const run = spawnSync('/usr/bin/python3', [SCRIPT, dir], { encoding: 'utf8' });
  if (run.status !== 0) throw new Error(`fixture script failed (${run.status}): ${run.stderr}`);
  manifest = JSON.parse(fs.readFileSync(nodePath.join(dir, 'manifest.json'), 'utf8'));
});

afterAll(() => {
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

const fixture = (name: string): Fixture => {
  const f = manifest.fixtures.find((x) => x.name === name);
  if (!f) throw new Error(`fixture ${name} missing from the manifest`);
  return f;
};
const inDir = (file: string) => nodePath.join(dir, file);

function specOf(f: Fixture): SourceSpec {
  return f.format === 'npy'
    ? { path: inDir(f.file), scanShape: f.scanShape }
    : { path: inDir(f.file), raw: f.raw };
}

function open(f: Fixture): Promise<TileSource> {
  return f.format === 'npy' ? openNpy(specOf(f)) : openRaw(specOf(f));
}

function bytesOf(a: NumericArray): Buffer {
  return Buffer.from(a.buffer, a.byteOffset, a.byteLength);
}

function firstByteMismatch(got: Uint8Array, want: Uint8Array): number {
  if (got.length !== want.length) return Math.min(got.length, want.length);
  for (let i = 0; i < got.length; i++) if (got[i] !== want[i]) return i;
  return -1;
}

/** Read the whole (small) dataset in tiles of `height` rows; `viaViews` reads straight into views of one array. */
function readAll(src: TileSource, height: number, viaViews: boolean): NumericArray {
  const { shape, dtype } = src.descriptor;
  const rowElements = shape.scanX * shape.detY * shape.detX;
  const all = allocTyped(dtype, shape.scanY * rowElements);
  for (let row0 = 0; row0 < shape.scanY; row0 += height) {
    const n = Math.min(height, shape.scanY - row0);
    if (viaViews) {
      src.readRows(row0, n, all.subarray(row0 * rowElements, (row0 + n) * rowElements));
    } else {
      const tile = allocTyped(dtype, n * rowElements);
      src.readRows(row0, n, tile);
      all.set(tile as never, row0 * rowElements);
    }
  }
  return all;
}

function expectClose(got: number, want: number, scale: number, what: string): void {
  const tolerance = 1e-9 * Math.max(Math.abs(want), scale);
  expect(Math.abs(got - want) <= tolerance, `${what}: got ${got}, NumPy ${want}`).toBe(true);
}

describe('npy and raw readers against NumPy', () => {
  it('the fixture script wrote every fixture this test expects', () => {
    expect(manifest.fixtures.map((f) => f.name).sort()).toEqual([...READABLE].sort());
  });

  for (const name of READABLE) {
    it(`${name}: descriptor and every element match NumPy`, async () => {
      const f = fixture(name);
      const src = await open(f);
      try {
        const d = src.descriptor;
        // reference: NumPy's dtype, shape and nbytes of the array it wrote.
        expect(d.format).toBe(f.format);
        expect(d.dtype).toBe(f.dtype);
        expect([d.shape.scanY, d.shape.scanX, d.shape.detY, d.shape.detX]).toEqual(f.shape);
        expect(d.storedShape).toEqual(f.storedShape);
        expect(d.byteSize).toBe(f.byteSize);
        // reference: file position after np.lib.format's own header reader (or the script's write offset).
        expect(d.layout).toEqual({ kind: 'contiguous', dataOffset: f.dataOffset, byteOrder: f.byteOrder });
        expect(d.path).toBe(nodePath.resolve(inDir(f.file)));
        expect(nodePath.isAbsolute(d.spec.path)).toBe(true);
        expect(d.spec.format).toBe(f.format);
        expect(src.rowAlignment).toBe(1);

        const ref = fs.readFileSync(inDir(f.ref));
        for (const [height, viaViews] of [[1, false], [2, true], [3, false], [f.shape[0], true]] as const) {
          const all = readAll(src, height, viaViews);
          // reference: NumPy's arr.astype('<' + kind).tobytes() — exact bits, floats included.
          expect(firstByteMismatch(bytesOf(all), ref), `first differing byte, tiles of ${height} rows`).toBe(-1);
        }

        const all = readAll(src, 2, false);
        const [sy, sx, dy, dx] = f.shape;
        const pattern = dy * dx;
        const sum = new Float64Array(pattern), absSum = new Float64Array(pattern);
        const max = new Float64Array(pattern).fill(-Infinity);
        const totals = new Float64Array(sy * sx), absTotals = new Float64Array(sy * sx);
        for (let p = 0; p < sy * sx; p++) {
          for (let k = 0; k < pattern; k++) {
            const v = all[p * pattern + k];
            sum[k] += v; absSum[k] += Math.abs(v);
            if (v > max[k]) max[k] = v;
            totals[p] += v; absTotals[p] += Math.abs(v);
          }
        }
        for (let k = 0; k < pattern; k++) {
          // reference: NumPy arr.astype(float64).sum(axis=(0, 1)), to 1e-9 of the summed magnitudes.
          expectClose(sum[k], f.sumOverScan[k], absSum[k], `sum over scan, pixel ${k}`);
          // reference: NumPy arr.astype(float64).max(axis=(0, 1)) — a max is exact.
          expect(max[k]).toBe(f.maxPattern[k]);
        }
        for (let p = 0; p < sy * sx; p++) {
          // reference: NumPy arr.astype(float64).sum(axis=(2, 3)).
          expectClose(totals[p], f.patternSums[p], absTotals[p], `sum of pattern ${p}`);
        }
        for (const [[iy, ix, ky, kx], value] of f.samples) {
          // reference: NumPy arr[iy, ix, ky, kx].item().
          expect(Object.is(all[((iy * sx + ix) * dy + ky) * dx + kx], value), `element ${[iy, ix, ky, kx]}`).toBe(true);
        }
      } finally {
        src.close();
      }
    });
  }

  it('big-endian files come out in native order', async () => {
    for (const name of ['be_u2', 'be_i4', 'be_f8', 'raw_be_i4_offset', 'odd_header_3d']) {
      const f = fixture(name);
      const src = await open(f);
      const all = readAll(src, f.shape[0], true);
      src.close();
      expect(src.descriptor.layout).toMatchObject({ byteOrder: 'big' });
      const stored = fs.readFileSync(inDir(f.file)).subarray(f.dataOffset, f.dataOffset + f.byteSize);
      const ref = fs.readFileSync(inDir(f.ref));
      // The stored bytes really are in the other order, so a reader that skipped the swap would fail below.
      expect(stored.equals(ref)).toBe(false);
      // reference: NumPy's little-endian tobytes() of the same array.
      expect(bytesOf(all).equals(ref)).toBe(true);
      // reference: NumPy arr[...].item() on the big-endian array.
      const [, sx, dy, dx] = f.shape;
      for (const [[iy, ix, ky, kx], value] of f.samples) {
        expect(all[((iy * sx + ix) * dy + ky) * dx + kx]).toBe(value);
      }
    }
  });

  it('the in-place swap agrees with NumPy on views that start at any byte', () => {
    for (const [name, elementBytes] of [['be_u2', 2], ['be_i4', 4], ['be_f8', 8]] as const) {
      const f = fixture(name);
      const stored = fs.readFileSync(inDir(f.file)).subarray(f.dataOffset, f.dataOffset + f.byteSize);
      for (const shift of [1, 2, 3]) {
        const backing = new Uint8Array(stored.length + shift);
        backing.set(stored, shift);
        const view = backing.subarray(shift);
        swapBytesInPlace(view, elementBytes);
        // reference: NumPy's little-endian tobytes() of the same elements.
        expect(Buffer.from(view).equals(fs.readFileSync(inDir(f.ref))), `${name} shifted by ${shift}`).toBe(true);
      }
    }
    expect(() => swapBytesInPlace(new Uint8Array(6), 4)).toThrow(/not a whole number of 4-byte elements/);
  });

  it('reads straight into WebAssembly memory', async () => {
    const f = fixture('le_f8');
    const src = await open(f);
    const memory = new WebAssembly.Memory({ initial: 1 });
    const n = f.byteSize / 8;
    const dest = new Float64Array(memory.buffer, 1024, n);
    src.readRows(0, f.shape[0], dest);
    src.close();
    // reference: NumPy tobytes() of the same array.
    expect(Buffer.from(memory.buffer, 1024, f.byteSize).equals(fs.readFileSync(inDir(f.ref)))).toBe(true);
  });

  it('reads positions past 2^32 bytes (sparse file with data at 4 GiB + 12 KiB)', async () => {
    const f = fixture('raw_far');
    expect(f.dataOffset).toBeGreaterThan(2 ** 32);
    const src = await open(f);
    const all = readAll(src, 1, false);
    src.close();
    // reference: NumPy arr.tofile() written after f.seek(2**32 + 12294).
    expect(bytesOf(all).equals(fs.readFileSync(inDir(f.ref)))).toBe(true);
  });

  it('positional reads in small pieces reassemble the data exactly', () => {
    const f = fixture('le_f8');
    const fd = fs.openSync(inDir(f.file), 'r');
    const dest = new Uint8Array(f.byteSize);
    readFullyAt(fd, dest, f.dataOffset, f.file, 7);
    fs.closeSync(fd);
    // reference: NumPy tobytes(); pieces of 7 bytes stand in for the 1 GiB pieces of big tiles.
    expect(Buffer.from(dest).equals(fs.readFileSync(inDir(f.ref)))).toBe(true);
  });

  it('describeNpy and describeRaw give the same descriptor as opening', async () => {
    for (const name of ['le_u2', 'pos3d_u2', 'raw_f4_offset']) {
      const f = fixture(name);
      const src = await open(f);
      src.close();
      const d = f.format === 'npy' ? await describeNpy(specOf(f)) : await describeRaw(specOf(f));
      expect(d).toEqual(src.descriptor);
    }
  });

  it('the descriptor spec reopens the same dataset', async () => {
    const f = fixture('pos3d_u2');
    const first = await open(f);
    first.close();
    const again = await openNpy(first.descriptor.spec);
    again.close();
    expect(again.descriptor).toEqual(first.descriptor);
  });
});

describe('.npy header literal', () => {
  it('reads the spellings of Python 2 era writers', () => {
    // reference: Python 2 repr() of the header dict — u'' strings and long ints with an L
    // suffix, which NumPy's own format.py still filters when reading old files.
    expect(parsePythonLiteral("{u'descr': u'<u2', 'fortran_order': False, 'shape': (3L, 4L, 5L, 6L), }  \n", 'old.npy'))
      .toEqual({ descr: '<u2', fortran_order: false, shape: [3, 4, 5, 6] });
    // reference: Python syntax — a one-element tuple needs its trailing comma, () is empty.
    expect(parsePythonLiteral("{'shape': (5,), 'x': (), 'y': [1, (2, 'a\\'b')], 'z': None}", 'x.npy'))
      .toEqual({ shape: [5], x: [], y: [1, [2, "a'b"]], z: null });
  });

  it('refuses a malformed header, naming the file', () => {
    for (const bad of ["{'descr': '<u2', 'shape': (3, 4}", "{'descr' '<u2'}", "{'a': nan}", "{'a': 1} extra", "{'a': 'open"]) {
      expect(() => parsePythonLiteral(bad, '/data/broken.npy')).toThrow(/\/data\/broken\.npy: the \.npy header is not a valid Python literal.*expected a dict/);
    }
  });
});

describe('fingerprint', () => {
  const copyTo = (from: string, to: string) => { fs.copyFileSync(inDir(from), inDir(to)); return inDir(to); };
  const flipByte = (file: string, position: number) => {
    const fd = fs.openSync(file, 'r+');
    const b = Buffer.alloc(1);
    fs.readSync(fd, b, 0, 1, position);
    b[0] ^= 0x5a;
    fs.writeSync(fd, b, 0, 1, position);
    fs.closeSync(fd);
  };

  it('is stable across opens and file moves, and changes with one sampled byte', async () => {
    const f = fixture('raw_u2_big');
    const one = await openRaw(specOf(f)); one.close();
    const two = await openRaw(specOf(f)); two.close();
    expect(one.descriptor.fingerprint).toMatch(/^sha256:[0-9a-f]{32}$/);
    expect(two.descriptor.fingerprint).toBe(one.descriptor.fingerprint);

    const moved = copyTo(f.file, 'moved_big.bin');
    const movedSource = await openRaw({ path: moved, raw: f.raw });
    movedSource.close();
    expect(movedSource.descriptor.fingerprint).toBe(one.descriptor.fingerprint);

    // The data is 1 MiB, so blocks are sampled: change one byte inside the 8th sampled block.
    const offsets = sampleOffsets(f.byteSize, 4096, 16);
    expect(offsets.length).toBe(16);
    const changed = copyTo(f.file, 'changed_big.bin');
    flipByte(changed, f.dataOffset + offsets[7] + 100);
    const changedSource = await openRaw({ path: changed, raw: f.raw });
    changedSource.close();
    expect(changedSource.descriptor.fingerprint).not.toBe(one.descriptor.fingerprint);

    // A byte between sampled blocks is not looked at: that is the price of not hashing 100 GB.
    const between = copyTo(f.file, 'between_big.bin');
    flipByte(between, f.dataOffset + offsets[7] + 4096 + 10);
    const betweenSource = await openRaw({ path: between, raw: f.raw });
    betweenSource.close();
    expect(betweenSource.descriptor.fingerprint).toBe(one.descriptor.fingerprint);
  });

  it('covers every byte of a small file, and differs between dtypes and shapes', async () => {
    const f = fixture('le_u2');
    const base = await openNpy(specOf(f)); base.close();
    const changed = copyTo(f.file, 'changed_small.npy');
    flipByte(changed, f.dataOffset + f.byteSize - 1);
    const changedSource = await openNpy({ path: changed }); changedSource.close();
    expect(changedSource.descriptor.fingerprint).not.toBe(base.descriptor.fingerprint);

    const r = fixture('raw_u2');
    const asU2 = await openRaw(specOf(r)); asU2.close();
    const asI2 = await openRaw({ path: inDir(r.file), raw: { ...r.raw!, dtype: 'int16' } }); asI2.close();
    const reshaped = await openRaw({ path: inDir(r.file), raw: { ...r.raw!, shape: { scanY: 3, scanX: 5, detY: 7, detX: 9 } } });
    reshaped.close();
    expect(asI2.descriptor.fingerprint).not.toBe(asU2.descriptor.fingerprint);
    expect(reshaped.descriptor.fingerprint).not.toBe(asU2.descriptor.fingerprint);
  });
});

async function expectInputError(attempt: Promise<unknown>, code: InputErrorCode, mentions: (string | number)[]): Promise<string> {
  const error = await attempt.then(() => null, (e: unknown) => e);
  expect(isInputError(error), `expected an InputError, got ${String(error)}`).toBe(true);
  const e = error as Error & { code: string };
  expect(e.code).toBe(code);
  for (const m of mentions) expect(e.message).toContain(String(m));
  return e.message;
}

describe('bad input is refused with a message naming the file and what was expected', () => {
  const npy = (name: string, scanShape?: [number, number]) => openNpy({ path: inDir(manifest.bad[name]), scanShape });
  const rawU2 = (): RawLayoutSpec => ({ ...fixture('raw_u2').raw! });
  const raw = (layout: unknown, file = fixture('raw_u2').file) =>
    openRaw({ path: inDir(file), raw: layout as RawLayoutSpec });

  it('missing .npy file', async () => {
    await expectInputError(openNpy({ path: inDir('no_such.npy') }), 'missing-file', [inDir('no_such.npy'), 'expected']);
  });

  it('missing raw file', async () => {
    await expectInputError(openRaw({ path: inDir('no_such.bin'), raw: rawU2() }), 'missing-file', [inDir('no_such.bin'), 'expected']);
  });

  it('a directory instead of a file', async () => {
    await expectInputError(openNpy({ path: dir }), 'not-a-file', [dir, 'a folder', 'expected']);
  });

  it('.npy shorter than header + shape × dtype', async () => {
    // reference: the script's os.truncate size and NumPy's header length + nbytes.
    await expectInputError(npy('truncated'), 'short-file',
      ['truncated.npy', `${manifest.truncatedSize} bytes`, `at least ${manifest.truncatedNeeded} bytes`]);
  });

  it('raw file shorter than offset + shape × dtype', async () => {
    const layout = { ...rawU2(), offset: 16 };
    // reference: the script wrote 16 + nbytes − 10 bytes.
    await expectInputError(raw(layout, manifest.bad.short_raw), 'short-file',
      ['short_raw.bin', `${manifest.shortRawSize} bytes`, `expected ${manifest.shortRawNeeded} bytes`, 'offset 16']);
  });

  it('a file that is not .npy at all', async () => {
    await expectInputError(npy('not_npy'), 'bad-input', ['not_npy.npy', 'NUMPY', 'expected']);
  });

  it.each([
    ['dtype_f2', "'<f2'", 'float16'],
    ['dtype_c8', "'<c8'", 'complex64'],
    ['dtype_u8', "'<u8'", 'uint64'],
    ['dtype_i8', "'<i8'", 'int64'],
    ['dtype_b1', "'|b1'", 'bool'],
  ])('.npy with unsupported dtype %s', async (name, descr, label) => {
    // reference: NumPy writes these descr strings for np.float16, complex64, uint64, int64, bool.
    await expectInputError(npy(name), 'bad-dtype', [`${name}.npy`, descr, label, 'expected one of', 'u2', 'f8', 'float32']);
  });

  it('.npy with a structured dtype', async () => {
    await expectInputError(npy('structured'), 'bad-dtype', ['structured.npy', 'structured', '<u2', 'expected']);
  });

  it.each(['uint64', 'complex64', 'float16', ''])('raw with unsupported dtype %j', async (dtype) => {
    await expectInputError(raw({ ...rawU2(), dtype }), 'bad-dtype',
      ['raw_u2.bin', JSON.stringify(dtype), 'expected one of', 'uint8', 'uint16', 'float64']);
  });

  it('Fortran-ordered .npy', async () => {
    await expectInputError(npy('fortran'), 'unsupported', ['fortran.npy', 'Fortran-ordered', 'np.ascontiguousarray']);
  });

  it('2-D and 5-D arrays', async () => {
    await expectInputError(npy('rank2'), 'bad-rank', ['rank2.npy', '2-D', '(6, 7)', 'expected 4-D']);
    await expectInputError(npy('rank5'), 'bad-rank', ['rank5.npy', '5-D', '(2, 2, 2, 3, 3)', 'expected 4-D']);
  });

  it('3-D without a scan shape', async () => {
    await expectInputError(openNpy({ path: inDir('pos3d_u2.npy') }), 'bad-shape', ['pos3d_u2.npy', '3-D', '15 positions', 'scan shape']);
  });

  it('3-D whose length is not scan_y × scan_x', async () => {
    await expectInputError(openNpy({ path: inDir('pos3d_u2.npy'), scanShape: [4, 4] }), 'bad-shape',
      ['pos3d_u2.npy', '4×4 = 16', 'expected scan_y × scan_x = 15']);
  });

  it('4-D with a contradicting scan shape', async () => {
    await expectInputError(openNpy({ path: inDir('le_u1.npy'), scanShape: [3, 5] }), 'bad-shape', ['le_u1.npy', '5×3', '3×5', 'expected']);
  });

  it('zero and negative sizes', async () => {
    await expectInputError(npy('zero_dim'), 'bad-shape', ['zero_dim.npy', 'scan_y', 'positive whole number', 'got 0']);
    await expectInputError(npy('negative_dim'), 'bad-shape', ['negative_dim.npy', 'scan_x', 'positive whole number', 'got -3']);
    for (const [key, value] of [['detY', 0], ['detX', -4], ['scanY', 2.5]] as const) {
      const layout = { ...rawU2(), shape: { ...rawU2().shape, [key]: value } };
      await expectInputError(raw(layout), 'bad-shape', ['raw_u2.bin', 'positive whole number', `got ${value}`]);
    }
    await expectInputError(raw({ ...rawU2(), shape: undefined }), 'bad-shape', ['raw_u2.bin', 'shape', 'expected']);
  });

  it('a shape whose bytes overflow 2^53', async () => {
    await expectInputError(npy('overflow'), 'bad-shape', ['overflow.npy', '2^53']);
    const huge = { scanY: 2 ** 20, scanX: 2 ** 20, detY: 2 ** 10, detX: 2 ** 10 };
    await expectInputError(raw({ ...rawU2(), shape: huge }), 'bad-shape', ['raw_u2.bin', '2^53']);
  });

  it('raw layout missing or with a bad byte order or offset', async () => {
    await expectInputError(openRaw({ path: inDir('raw_u2.bin') }), 'bad-input', ['raw_u2.bin', 'layout', 'expected', 'dtype', 'offset']);
    await expectInputError(raw({ ...rawU2(), byteOrder: 'middle' }), 'bad-input', ['raw_u2.bin', '"middle"', '"little" or "big"']);
    for (const offset of [-1, 1.5, '16', undefined]) {
      await expectInputError(raw({ ...rawU2(), offset }), 'bad-input', ['raw_u2.bin', 'offset', 'whole number of bytes ≥ 0']);
    }
  });

  it('raw with trailing bytes: refused unless they are said (a wrong description would read patterns out of step); said, they are ignored', async () => {
    const f = fixture('raw_u1_trailing');
    expect(fs.statSync(inDir(f.file)).size).toBeGreaterThan(f.dataOffset + f.byteSize);
    const { trailer, ...unsaid } = f.raw as unknown as Record<string, unknown>;
    expect(trailer).toBe(333);
    await expectInputError(raw(unsaid, f.file), 'bad-shape', ['raw_u1_trailing.bin', '333 more than offset 7', '--trailer']);
    const src = await open(f);
    const all = readAll(src, f.shape[0], true);
    src.close();
    // reference: NumPy tobytes() of the array written before the trailer.
    expect(bytesOf(all).equals(fs.readFileSync(inDir(f.ref)))).toBe(true);
  });

  it('readRows out of bounds, wrong dest and after close', async () => {
    const f = fixture('le_u2');
    const src = await open(f);
    const [sy, sx, dy, dx] = f.shape;
    const row = sx * dy * dx;
    const tile = (n: number) => new Uint16Array(n * row);
    expect(() => src.readRows(-1, 1, tile(1))).toThrow(/le_u2\.npy.*row0 must be a whole number ≥ 0, got -1/);
    expect(() => src.readRows(0.5, 1, tile(1))).toThrow(/row0 must be a whole number/);
    expect(() => src.readRows(0, 0, tile(1))).toThrow(/nRows must be a whole number ≥ 1, got 0/);
    expect(() => src.readRows(sy - 1, 2, tile(2))).toThrow(new RegExp(`rows \\[${sy - 1}, ${sy + 1}\\) run past scan_y = ${sy}`));
    expect(() => src.readRows(sy, 1, tile(1))).toThrow(/run past scan_y/);
    expect(() => src.readRows(0, 2, tile(1))).toThrow(new RegExp(`dest holds ${row} elements, expected 2 rows × ${row} = ${2 * row}`));
    expect(() => src.readRows(0, 1, new Float32Array(row))).toThrow(/dest is a Float32Array, expected a Uint16Array/);
    expect(() => src.readRows(0, 1, new Int16Array(row))).toThrow(/expected a Uint16Array/);
    src.readRows(sy - 1, 1, tile(1)); // the last row itself is in bounds
    src.close();
    src.close(); // closing twice is harmless
    expect(() => src.readRows(0, 1, tile(1))).toThrow(/closed/);
  });
});
