import { spawnSync } from 'node:child_process';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { allocTyped, DTYPE_BYTES, DTYPES, typedView, type DType, type NumericArray } from '../../src-shared/model/dtype';
import { isInputError, type InputErrorCode } from '../../src-shared/model/errors';
import { listHdf5Datasets, openHdf5 } from '../../src-main/io/hdf5';
import { getH5, isFilterAvailable } from '../../src-main/io/h5wasm-module';
import type { TileSource } from '../../src-main/io/tile-source';

// Reference: h5py 3.7 / HDF5 1.10 / NumPy 1.24 (Debian) run on the same files, through
// test/fixtures/make_hdf5_fixtures.py.
const SCRIPT = fileURLToPath(new URL('../fixtures/make_hdf5_fixtures.py', import.meta.url));

interface ReadableFixture {
  id: string;
  file: string;
  dataset: string;
  stored_shape: number[];
  dtype: DType;
  chunks: number[] | null;
  filter_ids: number[];
  byte_order: 'little' | 'big';
  scan_shape: [number, number] | null;
}
interface ListedDataset { path: string; shape: number[]; dtype: string; chunks: number[] | null; filter_ids: number[] }
interface Manifest {
  readable: ReadableFixture[];
  skipped: string[];
  files: Record<string, { file: string; dataset?: string; filter_id?: number }>;
  listings: Record<string, { file: string; datasets: ListedDataset[] }>;
}

/** HDF5's registered filter ids (The HDF Group's filter registry) with the names the reader reports. */
const FILTER_NAME_BY_ID: Record<number, string> = {
  1: 'deflate', 2: 'shuffle', 3: 'fletcher32', 4: 'szip', 5: 'nbit', 6: 'scaleoffset',
  307: 'bzip2', 32000: 'lzf', 32001: 'blosc', 32004: 'lz4',
};

const READABLE_IDS = [
  'u16_contiguous', 'u16_gzip_shuffle', 'odd_chunks_gzip', 'scaleoffset', 'fletcher32_gzip', 'userblock',
  'positions3d_gzip', 'positions3d_f4', 'positions3d_u8', 'lzf', 'szip', 'lz4', 'blosc', 'bzip2', 'be_u2', 'be_f4',
  ...DTYPES.map((d) => `dtype_${d}`), 'nested',
];

/**
 * Analytic row alignments: 4-D → chunk extent along scan_y; 3-D → the fewest whole rows holding
 * whole chunks, lcm(chunk, scan_x) / scan_x: lcm(5, 7) / 7 = 5, lcm(9, 6) / 6 = 3, lcm(4, 6) / 6 = 2.
 */
const EXPECTED_ALIGNMENT: Record<string, number> = {
  u16_contiguous: 1, userblock: 1, be_u2: 1, u16_gzip_shuffle: 1, odd_chunks_gzip: 2, fletcher32_gzip: 2, be_f4: 2,
  positions3d_gzip: 5, positions3d_f4: 3, positions3d_u8: 2,
};

let dir: string;
let manifest: Manifest;

beforeAll(() => {
  dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-hdf5-'));
  const run = spawnSync('/usr/bin/python3', [SCRIPT, dir], { encoding: 'utf8' });
  if (run.status !== 0) throw new Error(`fixture script failed (${run.status}):\n${run.stdout}\n${run.stderr}`);
  manifest = JSON.parse(fs.readFileSync(path.join(dir, 'manifest.json'), 'utf8'));
});

afterAll(() => {
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

function fixture(id: string): ReadableFixture | undefined {
  return manifest.readable.find((f) => f.id === id);
}

function readF64(file: string): Float64Array {
  const b = fs.readFileSync(file);
  return new Float64Array(b.buffer.slice(b.byteOffset, b.byteOffset + b.byteLength));
}

function bytesOf(a: NumericArray): Uint8Array {
  return new Uint8Array(a.buffer, a.byteOffset, a.byteLength);
}

/** Index of the first differing byte, or -1: exact, bit for bit (NaN payloads and -0 included). */
function firstMismatch(a: Uint8Array, b: Uint8Array): number {
  if (a.length !== b.length) return Math.min(a.length, b.length);
  for (let i = 0; i < a.length; i++) if (a[i] !== b[i]) return i;
  return -1;
}

function closeTo(actual: number, expected: number, rel: number): boolean {
  if (Number.isNaN(expected)) return Number.isNaN(actual);
  if (actual === expected) return true;
  return Math.abs(actual - expected) <= rel * Math.abs(expected);
}

function readAll(src: TileSource, tileRows: number, into?: NumericArray): NumericArray {
  const { scanY, scanX, detY, detX } = src.descriptor.shape;
  const rowElems = scanX * detY * detX;
  const all = into ?? allocTyped(src.descriptor.dtype, scanY * rowElems);
  for (let r = 0; r < scanY; r += tileRows) {
    const n = Math.min(tileRows, scanY - r);
    // A subarray has a byteOffset, as a tile buffer inside a larger arena would.
    src.readRows(r, n, all.subarray(r * rowElems, (r + n) * rowElems) as NumericArray);
  }
  return all;
}

async function expectInputError(p: Promise<unknown>, code: InputErrorCode, ...fragments: string[]): Promise<string> {
  let caught: unknown;
  try {
    await p;
  } catch (e) {
    caught = e;
  }
  expect(isInputError(caught), `expected an InputError, got ${String(caught)}`).toBe(true);
  const err = caught as Error & { code: InputErrorCode };
  expect(err.code).toBe(code);
  for (const f of fragments) expect(err.message).toContain(f);
  return err.message;
}

function specFor(f: ReadableFixture) {
  return { path: f.file, datasetPath: f.dataset, ...(f.scan_shape ? { scanShape: f.scan_shape } : {}) };
}

describe('HDF5 reader against h5py', () => {
  it.each(READABLE_IDS)('%s: descriptor and every element match h5py for tiles of 1, 3, rowAlignment and all rows', async (id) => {
    const f = fixture(id);
    if (!f) {
      // The script said why (hdf5plugin or szip missing) in manifest.skipped.
      expect(manifest.skipped.join(' ')).toMatch(id === 'szip' ? /szip/ : /hdf5plugin/);
      return;
    }
    const src = await openHdf5(specFor(f));
    try {
      const d = src.descriptor;
      const [scanY, scanX] = f.scan_shape ?? f.stored_shape.slice(0, 2);
      const [detY, detX] = f.stored_shape.slice(-2);
      // reference: h5py Dataset.shape / .dtype / .chunks / filter pipeline ids of the same dataset
      expect(d.shape).toEqual({ scanY, scanX, detY, detX });
      expect(d.storedShape).toEqual(f.stored_shape);
      expect(d.dtype).toBe(f.dtype);
      expect(d.format).toBe('hdf5');
      expect(d.path).toBe(f.file);
      expect(d.datasetPath).toBe(f.dataset);
      expect(d.byteSize).toBe(f.stored_shape.reduce((a, b) => a * b, 1) * DTYPE_BYTES[f.dtype]);
      expect(d.layout).toEqual({
        kind: 'hdf5',
        rank: f.stored_shape.length,
        chunks: f.chunks,
        filters: f.filter_ids.map((i) => FILTER_NAME_BY_ID[i]),
        byteOrder: f.byte_order,
      });
      const expectedAlignment = EXPECTED_ALIGNMENT[id] ?? (f.chunks ? f.chunks[0] : 1);
      expect(src.rowAlignment).toBe(expectedAlignment);

      const reference = fs.readFileSync(path.join(dir, `${id}.data.bin`));
      const heights = [...new Set([1, 3, src.rowAlignment, scanY])];
      for (const h of heights) {
        const all = readAll(src, h);
        // reference: h5py ds[...] written little-endian with ndarray.tofile; exact bytes
        expect(firstMismatch(bytesOf(all), reference), `tile height ${h}`).toBe(-1);
      }

      // Sum over all patterns per detector pixel, and per-pattern totals, from what we read.
      const all = readAll(src, src.rowAlignment);
      const pix = detY * detX;
      const sum = new Float64Array(pix);
      const totals = new Float64Array(scanY * scanX);
      for (let p = 0; p < scanY * scanX; p++) {
        let t = 0;
        for (let i = 0; i < pix; i++) {
          const v = all[p * pix + i];
          sum[i] += v;
          t += v;
        }
        totals[p] = t;
      }
      const refSum = readF64(path.join(dir, `${id}.sum.f64`));
      const refTotals = readF64(path.join(dir, `${id}.totals.f64`));
      for (let i = 0; i < pix; i++) {
        // reference: NumPy np.sum(patterns.astype(float64), axis=0) on h5py's data
        if (!closeTo(sum[i], refSum[i], 1e-9)) expect(sum[i], `pixel ${i}`).toBe(refSum[i]);
      }
      for (let p = 0; p < totals.length; p++) {
        // reference: NumPy np.sum(patterns.astype(float64), axis=(1, 2))
        if (!closeTo(totals[p], refTotals[p], 1e-9)) expect(totals[p], `pattern ${p}`).toBe(refTotals[p]);
      }
    } finally {
      src.close();
    }
  });

  it('reads into a view on WebAssembly memory', async () => {
    const f = fixture('odd_chunks_gzip')!;
    const src = await openHdf5(specFor(f));
    try {
      const n = f.stored_shape.reduce((a, b) => a * b, 1);
      const memory = new WebAssembly.Memory({ initial: 1 });
      const view = typedView('uint16', memory.buffer, 64, n);
      readAll(src, src.rowAlignment, view);
      // reference: h5py ds[...] bytes
      expect(firstMismatch(bytesOf(view), fs.readFileSync(path.join(dir, 'odd_chunks_gzip.data.bin')))).toBe(-1);
    } finally {
      src.close();
    }
  });

  it.each([
    // rows split one at a time across chunks of 2 rows; rows split into runs of 2 and 3 positions
    ['odd_chunks_gzip', (row: number, pat: number) => row + 1],
    ['odd_chunks_gzip', (_row: number, pat: number) => 2 * pat],
    ['odd_chunks_gzip', (_row: number, pat: number) => 3 * pat],
    ['positions3d_gzip', (_row: number, pat: number) => 5 * pat],
    ['positions3d_gzip', (_row: number, pat: number) => 3 * pat],
    ['positions3d_gzip', (row: number) => 2 * row],
    ['positions3d_f4', (_row: number, pat: number) => 4 * pat],
  ] as const)('%s: tiles cut into several slices still match h5py (case %#)', async (id, cap) => {
    const f = fixture(id)!;
    const [detY, detX] = f.stored_shape.slice(-2);
    const scanX = f.scan_shape ? f.scan_shape[1] : f.stored_shape[1];
    const pat = detY * detX * DTYPE_BYTES[f.dtype];
    const src = await openHdf5(specFor(f), { maxSliceBytes: cap(scanX * pat, pat) });
    try {
      const reference = fs.readFileSync(path.join(dir, `${id}.data.bin`));
      for (const h of [1, src.rowAlignment, src.descriptor.shape.scanY]) {
        // reference: h5py ds[...] bytes
        expect(firstMismatch(bytesOf(readAll(src, h)), reference), `tile height ${h}`).toBe(-1);
      }
    } finally {
      src.close();
    }
  });

  it('big-endian data arrives with the same values as little-endian storage would give', async () => {
    const f = fixture('be_u2')!;
    const src = await openHdf5(specFor(f));
    try {
      expect(src.descriptor.layout).toMatchObject({ byteOrder: 'big' });
      const all = readAll(src, 1) as Uint16Array;
      const ref = fs.readFileSync(path.join(dir, 'be_u2.data.bin'));
      // reference: h5py reads '>u2' and converts to values; 65535 (uint16 max) sits at element 1
      expect(all[1]).toBe(65535);
      expect(all[2]).toBe(ref.readUInt16LE(4));
    } finally {
      src.close();
    }
  });

  it('fingerprint is stable across opens and differs between datasets', async () => {
    const a = fixture('dtype_uint16')!, b = fixture('dtype_int16')!;
    const [s1, s2, s3] = await Promise.all([openHdf5(specFor(a)), openHdf5(specFor(a)), openHdf5(specFor(b))]);
    try {
      expect(s1.descriptor.fingerprint).toMatch(/^sha256:[0-9a-f]{32}$/);
      expect(s2.descriptor.fingerprint).toBe(s1.descriptor.fingerprint);
      expect(s3.descriptor.fingerprint).not.toBe(s1.descriptor.fingerprint);
      // The descriptor's spec reopens the same data.
      const again = await openHdf5(s1.descriptor.spec);
      expect(again.descriptor.fingerprint).toBe(s1.descriptor.fingerprint);
      again.close();
    } finally {
      s1.close(); s2.close(); s3.close();
    }
  });

  it('opens the only candidate when no dataset path is given, inside nested groups with links', async () => {
    const src = await openHdf5({ path: manifest.files.nested.file });
    try {
      expect(src.descriptor.datasetPath).toBe('/entry/data/frames');
      // reference: h5py ds[...] bytes of /entry/data/frames
      expect(firstMismatch(bytesOf(readAll(src, 2)), fs.readFileSync(path.join(dir, 'nested.data.bin')))).toBe(-1);
    } finally {
      src.close();
    }
  });

  it('opens a dataset through a soft link to it', async () => {
    const src = await openHdf5({ path: manifest.files.nested.file, datasetPath: 'entry/frames_alias' });
    try {
      expect(src.descriptor.datasetPath).toBe('/entry/frames_alias');
      // reference: h5py ds[...] bytes of the link's target, /entry/data/frames
      expect(firstMismatch(bytesOf(readAll(src, 1)), fs.readFileSync(path.join(dir, 'nested.data.bin')))).toBe(-1);
    } finally {
      src.close();
    }
  });

  it('knows which filters it can decode', async () => {
    await getH5();
    // built into HDF5, and plugins from h5wasm-plugins (lz4 32004, bzip2 307: registered ids)
    expect(isFilterAvailable(1)).toBe(true);
    expect(isFilterAvailable('deflate')).toBe(true);
    expect(isFilterAvailable('lz4')).toBe(true);
    expect(isFilterAvailable(307)).toBe(true);
    expect(isFilterAvailable(32017)).toBe(false);
    expect(isFilterAvailable('no-such-filter')).toBe(false);
  });
});

describe('listHdf5Datasets against h5py visititems', () => {
  it.each(['mixed.h5', 'nested.h5'])('%s lists the numeric datasets h5py finds through hard links', async (name) => {
    const { file, datasets } = manifest.listings[name];
    const listed = (await listHdf5Datasets(file)).sort((a, b) => a.path.localeCompare(b.path));
    const expected = [...datasets].sort((a, b) => a.path.localeCompare(b.path));
    // reference: h5py visititems over numeric (kind i/u/f) datasets; soft and external links are not objects there
    expect(listed.map((d) => ({ path: d.path, shape: d.shape, dtype: d.dtype, chunks: d.chunks, filters: d.filters }))).toEqual(
      expected.map((d) => ({ path: d.path, shape: d.shape, dtype: d.dtype, chunks: d.chunks, filters: d.filter_ids.map((i) => FILTER_NAME_BY_ID[i]) })));
    for (const d of listed) {
      // candidate ⇔ rank 3 or 4 with a supported dtype (the definition in Hdf5DatasetInfo)
      expect(d.candidate, d.path).toBe((d.shape.length === 3 || d.shape.length === 4) && (DTYPES as readonly string[]).includes(d.dtype));
      if (!d.candidate) expect(d.note, d.path).toBeTruthy();
    }
  });

  it('mixed.h5: exactly /frames and /stack3d are candidates; notes say why the others are not', async () => {
    const listed = await listHdf5Datasets(manifest.files.mixed.file);
    // analytic: the script wrote one 4-D uint16 and one 3-D float32 dataset, the rest 0–2-D or of other types
    expect(listed.filter((d) => d.candidate).map((d) => d.path).sort()).toEqual(['/frames', '/stack3d']);
    const byPath = Object.fromEntries(listed.map((d) => [d.path, d]));
    expect(byPath['/counts'].note).toContain('int64');
    expect(byPath['/image'].note).toContain('2-D');
    expect(byPath['/stack3d'].note).toContain('12');
  });

  it('names the file when it is not HDF5', async () => {
    const f = manifest.files.not_hdf5.file;
    await expectInputError(listHdf5Datasets(f), 'bad-input', f, 'not an HDF5 file');
  });
});

describe('HDF5 reader refuses bad input with a message naming the file', () => {
  const mixed = () => manifest.files.mixed.file;

  it('missing file', async () => {
    const f = path.join(dir, 'does-not-exist.h5');
    await expectInputError(openHdf5({ path: f, datasetPath: '/data' }), 'missing-file', f, 'expected an HDF5 file');
  });

  it('not an HDF5 file', async () => {
    const f = manifest.files.not_hdf5.file;
    await expectInputError(openHdf5({ path: f, datasetPath: '/data' }), 'bad-input', f, 'not an HDF5 file', 'expected an HDF5 file');
  });

  it('truncated HDF5 file', async () => {
    const whole = fs.readFileSync(fixture('u16_gzip_shuffle')!.file);
    const cut = path.join(dir, 'truncated.h5');
    // analytic: the second half of the file is gone, so the superblock's end-of-file address lies past the end
    fs.writeFileSync(cut, whole.subarray(0, whole.length >> 1));
    await expectInputError(openHdf5({ path: cut, datasetPath: '/data' }), 'bad-input', cut, 'truncated', 'expected an intact HDF5 file');
  });

  it('dataset path that does not exist, listing the candidates', async () => {
    await expectInputError(openHdf5({ path: mixed(), datasetPath: '/nope' }), 'not-a-dataset', mixed(), '/nope', 'expected a dataset', '/frames', '/stack3d');
  });

  it('dataset path that names a group', async () => {
    await expectInputError(openHdf5({ path: mixed(), datasetPath: 'group' }), 'not-a-dataset', mixed(), '/group', 'a group');
  });

  it('several candidates and no dataset path', async () => {
    const f = manifest.files.dtypes.file;
    await expectInputError(openHdf5({ path: f }), 'not-a-dataset', f, 'expected a dataset path', ...DTYPES.map((d) => `/${d} (`));
  });

  it('2-D dataset', async () => {
    await expectInputError(openHdf5({ path: mixed(), datasetPath: '/image' }), 'bad-rank', mixed(), '/image', '2-D', '(8, 8)', 'expected 4-D');
  });

  it('int64 and uint64 datasets', async () => {
    await expectInputError(openHdf5({ path: mixed(), datasetPath: '/counts' }), 'bad-dtype', mixed(), '/counts', 'int64', 'expected one of', 'uint16', 'float64');
    await expectInputError(openHdf5({ path: mixed(), datasetPath: '/wide' }), 'bad-dtype', mixed(), 'uint64');
  });

  it('float16 dataset', async () => {
    await expectInputError(openHdf5({ path: mixed(), datasetPath: '/half' }), 'bad-dtype', mixed(), '/half', 'float16', 'expected one of');
  });

  it('3-D dataset without a scan shape', async () => {
    await expectInputError(openHdf5({ path: mixed(), datasetPath: '/stack3d' }), 'bad-shape', mixed(), '/stack3d', 'scan shape', '12');
  });

  it('3-D dataset with a scan shape of the wrong size; the right one opens', async () => {
    await expectInputError(openHdf5({ path: mixed(), datasetPath: '/stack3d', scanShape: [5, 2] }), 'bad-shape', mixed(), '5×2', '12');
    const src = await openHdf5({ path: mixed(), datasetPath: '/stack3d', scanShape: [3, 4] });
    expect(src.descriptor.shape).toEqual({ scanY: 3, scanX: 4, detY: 4, detX: 4 });
    src.close();
  });

  it('4-D dataset with a disagreeing scan shape', async () => {
    await expectInputError(openHdf5({ path: mixed(), datasetPath: '/frames', scanShape: [5, 4] }), 'bad-shape', mixed(), '4×5', '5×4');
  });

  it('a compression filter this build cannot decode', async () => {
    const { file, dataset, filter_id } = manifest.files.unavailable_filter;
    // reference: the script set filter id 32017 (SZ) in the pipeline; h5py itself cannot read it back either
    await expectInputError(openHdf5({ path: file, datasetPath: dataset }), 'missing-filter', file, `filter id ${filter_id}`, "'sz'", 'deflate');
    const listed = await listHdf5Datasets(file);
    expect(listed[0].note).toContain(`filter id ${filter_id}`);
  });

  it('readRows out of bounds, with a wrong destination, or after close', async () => {
    const f = fixture('odd_chunks_gzip')!;
    const src = await openHdf5(specFor(f));
    const { scanY, scanX, detY, detX } = src.descriptor.shape;
    const row = scanX * detY * detX;
    const bad = (fn: () => void, ...fragments: string[]) => {
      let caught: unknown;
      try { fn(); } catch (e) { caught = e; }
      expect(caught).toBeInstanceOf(Error);
      expect(isInputError(caught)).toBe(false);
      for (const s of fragments) expect((caught as Error).message).toContain(s);
    };
    bad(() => src.readRows(scanY - 1, 2, new Uint16Array(2 * row)), f.file, `scan_y = ${scanY}`);
    bad(() => src.readRows(scanY, 1, new Uint16Array(row)), f.file, `scan_y = ${scanY}`);
    bad(() => src.readRows(-1, 1, new Uint16Array(row)), f.file, 'row0');
    bad(() => src.readRows(0, 0, new Uint16Array(0)), f.file, 'nRows');
    bad(() => src.readRows(0, 1, new Uint16Array(row - 1)), f.file, 'expected 1 rows');
    bad(() => src.readRows(0, 1, new Float32Array(row)), f.file, 'Uint16Array');
    src.close();
    bad(() => src.readRows(0, 1, new Uint16Array(row)), f.file, 'closed');
  });
});
