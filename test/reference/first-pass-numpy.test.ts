import { execFileSync } from 'node:child_process';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { isDType, typedView, DTYPE_BYTES, type DType, type NumericArray } from '../../src-shared/model/dtype';
import type { FirstPassGeometry, FirstPassTileResult } from '../../src-shared/compute/first-pass-types';
import { firstPassReference } from '../../src-shared/compute/first-pass';
import { createWasmFirstPassKernel } from '../../src-shared/compute/first-pass-wasm';
import { loadWasmModule } from '../../src-main/workers/wasm-loader';

// Both first-pass kernels against NumPy on tiles that test/fixtures/make_first_pass_fixture.py
// generates (fixed seed) into a temp dir, together with NumPy's sums, max, totals and binned preview.

interface FixtureCase {
  name: string; dtype: string; nRows: number; scanX: number; detY: number; detX: number;
  detBin: number; scanBin: number; nonFinite: number;
}

const here = path.dirname(fileURLToPath(import.meta.url));
const script = path.resolve(here, '../fixtures/make_first_pass_fixture.py');
let dir = '';
let numpyVersion = '';
let cases: FixtureCase[] = [];

beforeAll(() => {
  dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-first-pass-'));
  execFileSync('/usr/bin/python3', [script, dir], { stdio: 'pipe' });
  const meta = JSON.parse(fs.readFileSync(path.join(dir, 'cases.json'), 'utf8')) as { numpy: string; cases: FixtureCase[] };
  numpyVersion = meta.numpy;
  cases = meta.cases;
});

afterAll(() => {
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

function readF64(name: string, key: string): Float64Array {
  const bytes = fs.readFileSync(path.join(dir, `${name}.${key}.f64`));
  return new Float64Array(bytes.buffer.slice(bytes.byteOffset, bytes.byteOffset + bytes.byteLength));
}

function readTile(c: FixtureCase): NumericArray {
  if (!isDType(c.dtype)) throw new Error(`fixture ${c.name}: unknown dtype ${c.dtype}`);
  const bytes = fs.readFileSync(path.join(dir, `${c.name}.tile.bin`));
  const n = c.nRows * c.scanX * c.detY * c.detX;
  expect(bytes.byteLength).toBe(n * DTYPE_BYTES[c.dtype]);
  return typedView(c.dtype, bytes.buffer.slice(bytes.byteOffset, bytes.byteOffset + bytes.byteLength), 0, n);
}

function firstMismatch(got: ArrayLike<number>, want: ArrayLike<number>, ok: (x: number, y: number, i: number) => boolean): number {
  if (got.length !== want.length) return -2;
  for (let i = 0; i < got.length; i++) if (!ok(got[i], want[i], i)) return i;
  return -1;
}

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
