import fs from 'node:fs';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { allocTyped, DTYPES, type DType, type NumericArray } from '../../src-shared/model/dtype';
import type { CompiledDetector } from '../../src-shared/model/detectors';
import type { ComOptions } from '../../src-shared/compute/tile-kernels-types';
import { comSumsReference, type ComSums } from '../../src-shared/compute/com';
import { createWasmComKernel, type ComTuning } from '../../src-shared/compute/com-wasm';
import { loadWasmModule } from '../../src-main/workers/wasm-loader';
import { loadFixtureCases, readFixtureDetectors, readFixtureTile, readRawF64 } from '../helpers/fixtures';

// Both centre-of-mass kernels against NumPy on the seeded tiles and masks of
// test/fixtures/make_kernel_fixtures.py (written to a temp dir: NumPy's (tile * xx).sum(axis=(1, 2)),
// (tile * yy).sum(...) and tile.sum(...) with the same masks and thresholds), and against
// centres known in closed form.

interface FixtureCase {
  name: string; dtype: string; n: number; detY: number; detX: number;
  masks: { label: string; mode: 'binary' | 'weights' }[];
  com: { mask: number | null; threshold: number; nonFinite: number }[];
}

let dir = '';
let numpyVersion = '';
let cases: FixtureCase[] = [];
let wasmModule: WebAssembly.Module;

beforeAll(() => {
  ({ dir, numpy: numpyVersion, cases } = loadFixtureCases<FixtureCase>('make_kernel_fixtures.py', 'scanfold-com-'));
  wasmModule = loadWasmModule('com');
});

afterAll(() => {
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

const readF64 = (file: string) => readRawF64(path.join(dir, file));
const readTile = (c: FixtureCase) => readFixtureTile(dir, c.name, c.dtype, c.n * c.detY * c.detX);
const readMasks = (c: FixtureCase) => readFixtureDetectors(dir, c);

const WASM_MODES: { name: string; tuning: ComTuning }[] = [
  { name: 'WASM, runs', tuning: { sparseFill: 2 } },
  { name: 'WASM, dense', tuning: { sparseFill: 0 } },
  { name: "WASM, kernel's choice", tuning: {} },
];

/** The twin and every WASM mode on one tile. */
function allKernels(dtype: DType, tile: NumericArray, n: number, detY: number, detX: number, options: ComOptions): [string, ComSums][] {
  const out: [string, ComSums][] = [['TS twin', comSumsReference(tile, n, detY, detX, options)]];
  for (const mode of WASM_MODES) {
    const kernel = createWasmComKernel(wasmModule, tile.byteLength, mode.tuning);
    kernel.setOptions(options, detY, detX);
    kernel.tileBuffer(dtype, tile.length).set(tile as never);
    out.push([mode.name, kernel.run(dtype, n)]);
  }
  return out;
}

const close = (got: number, want: number, rel: number) =>
  (Number.isNaN(want) ? Number.isNaN(got) : Math.abs(got - want) <= rel * Math.max(1, Math.abs(want)));

describe('centre of mass against NumPy', () => {
  it('fixtures were written by NumPy', () => {
    expect(numpyVersion).toMatch(/^\d+\.\d+/);
    expect(cases.length).toBe(3);
  });

  it('sums and centres for every mask and threshold of every case', () => {
    for (const c of cases) {
      const { tile, dtype } = readTile(c);
      const masks = readMasks(c);
      // reference: NumPy total, Σ I·x, Σ I·y, COM_x, COM_y per setting (make_kernel_fixtures.py)
      const numpy = readF64(`${c.name}.com.f64`);
      c.com.forEach((setting, s) => {
        const options = { mask: setting.mask === null ? null : masks[setting.mask], threshold: setting.threshold };
        const want = (row: number, p: number) => numpy[(s * 5 + row) * c.n + p];
        for (const [name, got] of allKernels(dtype, tile, c.n, c.detY, c.detX, options)) {
          const where = `${c.name}, ${name}, mask ${options.mask?.label ?? 'none'}, threshold ${setting.threshold}`;
          // reference: NumPy count of ~isfinite(tile) inside the mask's support
          expect(got.nonFinite, `${where}: non-finite values`).toBe(setting.nonFinite);
          for (let p = 0; p < c.n; p++) {
            expect(close(got.total[p], want(0, p), 1e-9), `${where}, pattern ${p}: total ${got.total[p]} vs ${want(0, p)}`).toBe(true);
            expect(close(got.sumX[p], want(1, p), 1e-9), `${where}, pattern ${p}: Σ I·x ${got.sumX[p]} vs ${want(1, p)}`).toBe(true);
            expect(close(got.sumY[p], want(2, p), 1e-9), `${where}, pattern ${p}: Σ I·y ${got.sumY[p]} vs ${want(2, p)}`).toBe(true);
            expect(close(got.sumX[p] / got.total[p], want(3, p), 1e-9), `${where}, pattern ${p}: COM x`).toBe(true);
            expect(close(got.sumY[p] / got.total[p], want(4, p), 1e-9), `${where}, pattern ${p}: COM y`).toBe(true);
          }
        }
      });
    }
  });
});

/**
 * Area of the disk of radius r about (cx, cy) inside the rectangle [x0, x1] × [y0, y1], in
 * closed form: the integral over x of the disk's vertical chord clipped to [y0, y1], split where
 * a chord end crosses y0 or y1, each piece a constant or ∫ √(r² − u²) du.
 */
function diskRectangleArea(cx: number, cy: number, r: number, x0: number, x1: number, y0: number, y1: number): number {
  const a = Math.max(x0 - cx, -r);
  const b = Math.min(x1 - cx, r);
  if (a >= b) return 0;
  const v0 = y0 - cy, v1 = y1 - cy;
  const cuts = [a, b];
  for (const v of [v0, v1]) {
    if (Math.abs(v) >= r) continue;
    const u = Math.sqrt(r * r - v * v);
    for (const s of [-u, u]) if (s > a && s < b) cuts.push(s);
  }
  cuts.sort((p, q) => p - q);
  const h = (u: number) => Math.sqrt(Math.max(0, r * r - u * u));
  const integralOfH = (u: number) => (u * h(u) + r * r * Math.asin(Math.max(-1, Math.min(1, u / r)))) / 2;
  let area = 0;
  for (let k = 0; k + 1 < cuts.length; k++) {
    const lo = cuts[k], hi = cuts[k + 1];
    if (hi <= lo) continue;
    const mid = h((lo + hi) / 2);
    if (Math.min(v1, mid) <= Math.max(v0, -mid)) continue; // the chord misses the rectangle here
    const hArea = integralOfH(hi) - integralOfH(lo);
    const top = mid < v1 ? hArea : v1 * (hi - lo);
    const bottom = -mid > v0 ? -hArea : v0 * (hi - lo);
    area += top - bottom;
  }
  return area;
}

/** Each pixel's area inside the disk: pixel (x, y) is the unit square centred on (x, y). */
function diskCoverage(detY: number, detX: number, cx: number, cy: number, r: number): Float64Array {
  const cover = new Float64Array(detY * detX);
  for (let y = 0; y < detY; y++) {
    for (let x = 0; x < detX; x++) cover[y * detX + x] = diskRectangleArea(cx, cy, r, x - 0.5, x + 0.5, y - 0.5, y + 0.5);
  }
  return cover;
}

describe('centre of mass: centres known in closed form', () => {
  it('one bright pixel at (x0, y0) has its centre there, exactly', () => {
    const detY = 37, detX = 41;
    for (const dtype of DTYPES) {
      for (const [x0, y0] of [[0, 0], [40, 36], [17, 5], [3, 29]]) {
        const tile = allocTyped(dtype, detY * detX);
        tile[y0 * detX + x0] = dtype === 'int8' ? 100 : 200;
        const around: CompiledDetector = {
          mode: 'indices', detY, detX, label: 'around it',
          indices: Uint32Array.from({ length: detY * detX }, (_, i) => i).filter((i) => Math.abs((i % detX) - x0) <= 4),
        };
        for (const mask of [null, around]) {
          for (const [name, got] of allKernels(dtype, tile, 1, detY, detX, { mask, threshold: 0 })) {
            // reference: analytic — Σ I·x / Σ I = v·x0 / v
            expect([got.sumX[0] / got.total[0], got.sumY[0] / got.total[0]], `${dtype} ${name} at (${x0}, ${y0})`).toEqual([x0, y0]);
          }
        }
      }
    }
  });

  // Symmetry: with 2·cx and 2·cy integers, the point reflection p → 2c − p maps pixel centres to
  // pixel centres and each pixel's square onto another's, and leaves the disk unchanged. So the
  // exact area coverage obeys A(p) = A(2c − p), the terms of Σ A(p)·(p − c) cancel in pairs, and
  // the centre of mass is c itself — only float64 rounding of the sums remains.
  const centres: [number, number][] = [[20.5, 17.5], [20, 17.5], [19.5, 18]];
  const detY = 37, detX = 41, r = 9.3;

  it('the exact coverage of a disk adds up to πr²', () => {
    for (const [cx, cy] of centres) {
      const total = diskCoverage(detY, detX, cx, cy, r).reduce((a, b) => a + b, 0);
      // reference: analytic — the disk lies inside the detector, so its pixels cover all of πr²
      expect(Math.abs(total - Math.PI * r * r)).toBeLessThan(1e-10);
    }
  });

  it('a disk of exact area coverage centred at a half-integer (cx, cy) has its centre there', () => {
    for (const [cx, cy] of centres) {
      const cover = diskCoverage(detY, detX, cx, cy, r);
      // The coverage as the pattern itself (float64), with no mask …
      const pattern = Float64Array.from(cover);
      for (const [name, got] of allKernels('float64', pattern, 1, detY, detX, { mask: null, threshold: 0 })) {
        // reference: analytic (the symmetry argument above)
        expect(Math.abs(got.sumX[0] / got.total[0] - cx), `pattern, ${name}, x`).toBeLessThan(1e-9);
        expect(Math.abs(got.sumY[0] / got.total[0] - cy), `pattern, ${name}, y`).toBeLessThan(1e-9);
      }
      // … and as area weights over a uniform uint16 pattern.
      const uniform = allocTyped('uint16', detY * detX).fill(1000);
      const weights: CompiledDetector = { mode: 'weights', weights: cover, detY, detX, label: 'disk coverage' };
      for (const [name, got] of allKernels('uint16', uniform, 1, detY, detX, { mask: weights, threshold: 0 })) {
        // reference: analytic (the symmetry argument above)
        expect(Math.abs(got.sumX[0] / got.total[0] - cx), `weights, ${name}, x`).toBeLessThan(1e-9);
        expect(Math.abs(got.sumY[0] / got.total[0] - cy), `weights, ${name}, y`).toBeLessThan(1e-9);
      }
    }
  });
});
