import fs from 'node:fs';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { DType, NumericArray } from '../../src-shared/model/dtype';
import type { FirstPassGeometry, FirstPassTileResult } from '../../src-shared/compute/first-pass-types';
import { firstPassReference } from '../../src-shared/compute/first-pass';
import { createWasmFirstPassKernel } from '../../src-shared/compute/first-pass-wasm';
import { loadWasmModule } from '../../src-main/workers/wasm-loader';
import { loadFixtureCases, readFixtureTile, readRawF64 } from '../helpers/fixtures';
import { firstMismatch } from '../helpers/synthetic';

// Both first-pass kernels against NumPy on tiles that test/fixtures/make_first_pass_fixture.py
// generates (fixed seed) into a temp dir, together with NumPy's sums, max, totals and binned preview.

interface FixtureCase {
  name: string; dtype: string; nRows: number; scanX: number; detY: number; detX: number;
  detBin: number; scanBin: number; nonFinite: number;
}

let dir = '';
let numpyVersion = '';
let cases: FixtureCase[] = [];

beforeAll(() => {
  ({ dir, numpy: numpyVersion, cases } = loadFixtureCases<FixtureCase>('make_first_pass_fixture.py', 'scanfold-first-pass-'));
});

afterAll(() => {
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

const readF64 = (name: string, key: string) => readRawF64(path.join(dir, `${name}.${key}.f64`));
const readTile = (c: FixtureCase): NumericArray => readFixtureTile(dir, c.name, c.dtype, c.nRows * c.scanX * c.detY * c.detX).tile;

function expectClose(what: string, got: ArrayLike<number>, want: ArrayLike<number>, ok: (x: number, y: number, i: number) => boolean) {
  const i = firstMismatch(got, want, ok);
  const detail = i === -2 ? `length ${got.length}, NumPy ${want.length}` : `at ${i}: ${got[i]}, NumPy ${want[i]}`;
  expect(i, `${what} ${detail}`).toBe(-1);
}

function checkAgainstNumpy(kernelName: string, c: FixtureCase, r: FirstPassTileResult) {
  const what = (s: string) => `${kernelName} ${c.name} ${s} vs NumPy ${numpyVersion}`;
  const sumAbs = readF64(c.name, 'sum_abs');
  const totalAbs = readF64(c.name, 'total_abs');
  const previewAbs = readF64(c.name, 'preview_abs');
  // reference: NumPy np.where(np.isfinite(t), t, 0).astype(float64).sum(axis=(0, 1)); 1e-9 of Σ|t| (signs may cancel)
  expectClose(what('sum'), r.sum, readF64(c.name, 'sum'), (x, y, i) => Math.abs(x - y) <= 1e-9 * sumAbs[i]);
  // reference: NumPy np.where(np.isfinite(t), t, -inf).max(axis=(0, 1)); the max is a stored value, so exact
  expectClose(what('max'), r.max, readF64(c.name, 'max'), (x, y) => x === y);
  // reference: NumPy clean.sum(axis=(2, 3)) in float64
  expectClose(what('total'), r.total, readF64(c.name, 'total'), (x, y, i) => Math.abs(x - y) <= 1e-9 * totalAbs[i]);
  // reference: NumPy zero-padded reshape (qY, sb, qX, sb, pY, db, pX, db).sum(axis=(1, 3, 5, 7)) / scan positions
  // present, in float64; ours is float32, so within one float32 rounding (2⁻²⁴ relative)
  expectClose(what('preview'), r.preview, readF64(c.name, 'preview'),
    (x, y, i) => Math.abs(x - y) <= 2 ** -24 * Math.abs(y) + 1e-9 * previewAbs[i]);
  // reference: NumPy np.count_nonzero(~np.isfinite(t))
  expect(r.nonFinite, what('nonFinite')).toBe(c.nonFinite);
}

function geometryOf(c: FixtureCase): FirstPassGeometry {
  return { scanX: c.scanX, detY: c.detY, detX: c.detX, detBin: c.detBin, scanBin: c.scanBin };
}

describe('first pass vs NumPy', () => {
  it('the fixture script produced uint16 and float32 cases with non-finite values', () => {
    expect(cases.map((c) => c.dtype)).toEqual(expect.arrayContaining(['uint16', 'float32']));
    expect(cases.filter((c) => c.dtype === 'float32').every((c) => c.nonFinite > 0)).toBe(true);
  });

  it('TypeScript reference kernel', () => {
    for (const c of cases) checkAgainstNumpy('reference', c, firstPassReference(readTile(c), c.nRows, geometryOf(c)));
  });

  it('WebAssembly kernel', () => {
    const kernel = createWasmFirstPassKernel(loadWasmModule('first-pass'), 4 << 20);
    for (const c of cases) {
      const tile = readTile(c);
      kernel.tileBuffer(c.dtype as DType, tile.length).set(tile as never);
      checkAgainstNumpy('wasm', c, kernel.run(c.dtype as DType, c.nRows, geometryOf(c)));
    }
  });
});
