import fs from 'node:fs';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { virtualImagesReference } from '../../src-shared/compute/virtual-image';
import { createWasmVirtualImageKernel, type VirtualImageTuning } from '../../src-shared/compute/virtual-image-wasm';
import { loadWasmModule } from '../../src-main/workers/wasm-loader';
import { loadFixtureCases, readFixtureDetectors, readFixtureTile, readRawF64 } from '../helpers/fixtures';

// Both virtual-image kernels against NumPy on seeded random uint16 and float32 tiles that
// test/fixtures/make_kernel_fixtures.py writes into a temp dir, with NumPy's
// tile.reshape(n, -1) @ mask.reshape(-1) in float64 (non-finite values as 0) for every mask.

interface FixtureCase {
  name: string; dtype: string; n: number; detY: number; detX: number;
  masks: { label: string; mode: 'binary' | 'weights'; nonFinite: number }[];
  unionNonFinite: number;
}

let dir = '';
let numpyVersion = '';
let cases: FixtureCase[] = [];
let wasmModule: WebAssembly.Module;

beforeAll(() => {
  ({ dir, numpy: numpyVersion, cases } = loadFixtureCases<FixtureCase>('make_kernel_fixtures.py', 'scanfold-kernels-'));
  wasmModule = loadWasmModule('virtual-image');
});

afterAll(() => {
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

const readF64 = (file: string) => readRawF64(path.join(dir, file));
const readTile = (c: FixtureCase) => readFixtureTile(dir, c.name, c.dtype, c.n * c.detY * c.detX);
/** The fixture's masks as compiled detectors: 0/1 masks as sorted indices, weights as they are. */
const readDetectors = (c: FixtureCase) => readFixtureDetectors(dir, c);

const WASM_MODES: { name: string; tuning: VirtualImageTuning }[] = [
  { name: 'WASM, runs', tuning: { sparseFill: 2 } },
  { name: 'WASM, dense', tuning: { sparseFill: 0 } },
  { name: "WASM, kernel's choice", tuning: {} },
];

describe('virtual images against NumPy', () => {
  it('fixtures were written by NumPy', () => {
    expect(numpyVersion).toMatch(/^\d+\.\d+/);
    expect(cases.map((c) => c.name)).toEqual(['uint16_37x41', 'uint16_128x128', 'float32_37x41']);
  });

  it('every mask of every case, all detectors in one pass, TS twin and WASM', () => {
    for (const c of cases) {
      const { tile, dtype } = readTile(c);
      const detectors = readDetectors(c);
      // reference: NumPy tile.reshape(n, -1) @ mask.reshape(-1) in float64 (make_kernel_fixtures.py)
      const numpy = readF64(`${c.name}.images.f64`);
      const runs: [string, { images: Float64Array; nonFinite: number }][] = [
        ['TS twin', virtualImagesReference(tile, c.n, c.detY, c.detX, detectors)],
      ];
      for (const mode of WASM_MODES) {
        const kernel = createWasmVirtualImageKernel(wasmModule, tile.byteLength, mode.tuning);
        kernel.setDetectors(detectors);
        kernel.tileBuffer(dtype, tile.length).set(tile as never);
        runs.push([mode.name, kernel.run(dtype, c.n)]);
      }
      for (const [name, got] of runs) {
        for (let i = 0; i < numpy.length; i++) {
          const where = `${c.name}, ${name}, ${c.masks[Math.floor(i / c.n)].label}, pattern ${i % c.n}`;
          expect(Math.abs(got.images[i] - numpy[i]), where).toBeLessThanOrEqual(1e-9 * Math.max(1, Math.abs(numpy[i])));
        }
        // reference: NumPy count of ~isfinite(tile) inside the union of the masks' supports
        expect(got.nonFinite, `${c.name}, ${name}: non-finite values`).toBe(c.unionNonFinite);
      }
    }
  });

  it('one mask at a time counts the non-finite values it reads', () => {
    const c = cases.find((k) => k.dtype === 'float32')!;
    const { tile } = readTile(c);
    const numpy = readF64(`${c.name}.images.f64`);
    readDetectors(c).forEach((det, k) => {
      const kernel = createWasmVirtualImageKernel(wasmModule, tile.byteLength);
      kernel.setDetectors([det]);
      kernel.tileBuffer('float32', tile.length).set(tile as Float32Array);
      const got = kernel.run('float32', c.n);
      // reference: NumPy, per mask (make_kernel_fixtures.py)
      expect(got.nonFinite, det.label).toBe(c.masks[k].nonFinite);
      for (let p = 0; p < c.n; p++) {
        const want = numpy[k * c.n + p];
        expect(Math.abs(got.images[p] - want), `${det.label}, pattern ${p}`).toBeLessThanOrEqual(1e-9 * Math.max(1, Math.abs(want)));
      }
    });
  });
});
