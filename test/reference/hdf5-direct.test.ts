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

  it('a plain file is described without the HDF5 library exactly as the library describes it; anything else is left to the library', async () => {
    const listings: Record<string, string | null> = JSON.parse(fs.readFileSync(path.join(fx, 'listings.json'), 'utf8'));
    const files = fs.readdirSync(fx).filter((f) => f.endsWith('.h5')).map((f) => f.replace(/\.h5$/, ''));
    // Which files are read here (the rest go through the library): uncompressed, whole-row
    // layouts whose attributes and links are of the kinds read here.
    const plainExpected = new Set([
      'contiguous-earliest', 'contiguous-latest', 'rows-earliest', 'rows-latest', 'tworows-earliest', 'tworows-latest',
      'single-earliest', 'single-latest', 'growable-earliest', 'userblock', 'attrs-earliest', 'attrs-latest', 'dense-attrs', 'dense-indirect', 'many-links-earliest', 'many-links-latest', 'committed-earliest', 'committed-latest', 'case-earliest', 'case-latest', 'text-kinds', 'big-chunks', 'three-d', 'int32',
    ]);
    const seenPlain: string[] = [];
    const seenPlainNoPath: string[] = [];
    for (const name of files) {
      for (const datasetPath of [listings[name] ?? (facts[name] ? (name.startsWith('tworows') ? '/scan/deep/frames' : '/frames') : undefined), undefined]) {
        if (datasetPath === undefined && (name === 'two' || name.startsWith('committed'))) {
          // With no path, two candidates: the library's message names both.
          await expect(openTileSource({ path: path.join(fx, `${name}.h5`) } as never)).rejects.toThrow(/2 datasets .*\/x.*\/y/);
          continue;
        }
        if (datasetPath === undefined && listings[name] === undefined && !facts[name]) continue;
        const scanShape = name === 'three-d' ? [6, 5] : name === 'big-chunks' ? [8192, 16] : undefined;
        const spec = { path: path.join(fx, `${name}.h5`), ...(datasetPath ? { datasetPath } : {}), ...(scanShape ? { scanShape } : {}) } as never;
        const lib = await openTileSource(spec, { throughLibrary: true } as never);
        const here = await openTileSource(spec);
        try {
          const isPlain = here.memory.fixedBytes === 0 && lib.memory.fixedBytes > 0;
          if (isPlain) (datasetPath ? seenPlain : seenPlainNoPath).push(name);
          // reference: the HDF5 library's (h5wasm's) description of the same file, h5py having written it
          const { spec: specHere, ...descHere } = here.descriptor;
          const { spec: specLib, ...descLib } = lib.descriptor;
          expect(descHere, name).toEqual(descLib);
          // In the same order too: a value looked up by several spellings is the first found.
          expect(Object.keys(descHere.attributes ?? {}), name).toEqual(Object.keys(descLib.attributes ?? {}));
          const { hdf5Direct: hintHere, ...restHere } = specHere;
          const { hdf5Direct: hintLib, ...restLib } = specLib;
          expect(restHere, name).toEqual(restLib);
          if (hintLib) expect(hintHere?.layout, name).toEqual(hintLib.layout);
          // Every row reads the same both ways.
          const n = here.descriptor.shape.scanX * here.descriptor.shape.detY * here.descriptor.shape.detX;
          for (let row = 0; row < here.descriptor.shape.scanY; row++) {
            const a = new Float64Array(n), b = new Float64Array(n);
            const bufA = allocFor(here.descriptor.dtype, n), bufB = allocFor(here.descriptor.dtype, n);
            here.readRows(row, 1, bufA);
            lib.readRows(row, 1, bufB);
            a.set(bufA as ArrayLike<number>); b.set(bufB as ArrayLike<number>);
            expect(Array.from(a), `${name} row ${row}`).toEqual(Array.from(b));
          }
        } finally {
          here.close();
          lib.close();
        }
      }
    }
    expect(new Set(seenPlain)).toEqual(plainExpected);
    // With no path given, the one dataset that could be opened is found here too (links of every kind).
    for (const name of ['rows-earliest', 'attrs-earliest', 'attrs-latest', 'many-links-earliest', 'many-links-latest']) expect(seenPlainNoPath).toContain(name);
    // What is kept of the attributes (as the library path keeps them).
    const attrs = (await openTileSource({ path: path.join(fx, 'attrs-earliest.h5') } as never));
    try {
      expect(attrs.descriptor.datasetPath).toBe('/scan/frames');
      expect(attrs.descriptor.attributes).toEqual({
        beam_energy_kev: 300, convergence_mrad: 21.5, count_i32: -7, bits_u8: 12, frames_i64: 5, step_nm: [0.5, 0.25], one: [3], units: 'counts',
      });
    } finally {
      attrs.close();
    }
  });
});

function allocFor(dtype: string, n: number) {
  const C = { uint8: Uint8Array, uint16: Uint16Array, uint32: Uint32Array, int8: Int8Array, int16: Int16Array, int32: Int32Array, float32: Float32Array, float64: Float64Array }[dtype]!;
  return new C(n);
}
