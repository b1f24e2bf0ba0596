// Reading uncompressed HDF5 data straight from the file: where the bytes lie, checked against
// h5py's own account of each file (Dataset.id.get_offset / get_chunk_info,
// make_hdf5_direct_fixtures.py), and the rows read equal to NumPy's array.
import fs from 'node:fs';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { directLayout } from '../../src-main/io/hdf5-direct';
import { openTileSource } from '../../src-main/io/index';
import { makeFixtures, readNpyF64 } from '../helpers/fixtures';

let fx: string;
let facts: Record<string, { kind: string; offset?: number; chunks?: number[]; offsets?: number[] }>;
beforeAll(() => {
  fx = makeFixtures('make_hdf5_direct_fixtures.py');
  facts = JSON.parse(fs.readFileSync(path.join(fx, 'facts.json'), 'utf8'));
});
afterAll(() => fs.rmSync(fx, { recursive: true, force: true }));

const shape = [6, 5, 8, 7];
const rowElements = 5 * 8 * 7;

describe('direct HDF5 layout', () => {
  it('finds the bytes where h5py says they are, for every layout it reads, and declines the others', () => {
    const read: string[] = [];
    for (const [name, f] of Object.entries(facts)) {
      const datasetPath = name.startsWith('tworows') ? '/scan/deep/frames' : '/frames';
      const got = directLayout(path.join(fx, `${name}.h5`), datasetPath, shape, 2, rowElements);
      if (f.kind === 'filtered' || f.kind === 'partial' || name.startsWith('growable-latest')) {
        // compressed, chunks cutting rows, or an extensible-array index: the library reads them
        expect(got, name).toBeNull();
        continue;
      }
      expect(got, name).not.toBeNull();
      read.push(name);
      // reference: h5py's Dataset.id.get_offset() / get_chunk_info(i).byte_offset, HDF5 addresses
      // that count from the superblock: after a 1024-byte user block the file position is 1024 more
      const base = name === 'userblock' ? 1024 : 0;
      if (f.kind === 'contiguous') expect(got, name).toEqual({ kind: 'contiguous', address: f.offset! + base });
      else expect(got, name).toEqual({ kind: 'chunked', rowsPerChunk: f.chunks![0], chunkAddress: f.offsets!.map((o) => o + base) });
    }
    expect(read.length).toBeGreaterThanOrEqual(8);
  });

  it('rows read directly equal NumPy\'s array', async () => {
    const want = readNpyF64(path.join(fx, 'data.npy'));
    for (const name of ['contiguous-earliest', 'rows-latest', 'tworows-earliest', 'single-latest', 'userblock']) {
      const datasetPath = name.startsWith('tworows') ? '/scan/deep/frames' : '/frames';
      const src = await openTileSource({ path: path.join(fx, `${name}.h5`), datasetPath } as never);
      try {
        expect(src.memory.tileCopies, name).toBe(1); // read directly
        const rows = new Uint16Array(3 * rowElements);
        src.readRows(2, 3, rows);
        // reference: the array NumPy wrote (np.save beside the files)
        expect(Array.from(rows), name).toEqual(Array.from(want.data.subarray(2 * rowElements, 5 * rowElements)));
      } finally {
        src.close();
      }
    }
  });

  it('other workers read with the layout the first one found, without the HDF5 library, and refuse a changed file', async () => {
    const want = readNpyF64(path.join(fx, 'data.npy'));
    const file = path.join(fx, 'rows-earliest.h5');
    const first = await openTileSource({ path: file, datasetPath: '/frames' } as never);
    const spec = first.descriptor.spec;
    first.close();
    expect(spec.hdf5Direct).toBeDefined();
    const other = await openTileSource(spec);
    try {
      expect(other.descriptor.shape).toEqual(first.descriptor.shape);
      const rows = new Uint16Array(2 * rowElements);
      other.readRows(4, 2, rows);
      // reference: the array NumPy wrote
      expect(Array.from(rows)).toEqual(Array.from(want.data.subarray(4 * rowElements, 6 * rowElements)));
      const pattern = new Uint16Array(8 * 7);
      other.readPattern(3, 2, pattern);
      expect(Array.from(pattern)).toEqual(Array.from(want.data.subarray((3 * 5 + 2) * 56, (3 * 5 + 3) * 56)));
    } finally {
      other.close();
    }
    const later = new Date(Date.now() + 10_000);
    fs.utimesSync(file, later, later);
    await expect(openTileSource(spec)).rejects.toThrow(/changed while it was open/);
  });
});
