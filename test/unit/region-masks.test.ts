import { execFileSync } from 'node:child_process';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { RegionShape } from '../../src-shared/model/detectors';
import { InputError } from '../../src-shared/model/errors';
import { compileRegion, describeRegion } from '../../src-shared/compute/region-masks';

// Scan-view regions against NumPy masks made by test/fixtures/make_mask_fixtures.py (run into a
// temp dir) and against Pick's theorem.

interface RegionCase { name: string; scanY: number; scanX: number; shape: RegionShape; mask: number[] }

const here = path.dirname(fileURLToPath(import.meta.url));
let dir = '';
let numpyVersion = '';
let cases: RegionCase[] = [];

beforeAll(() => {
  dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-regions-'));
  execFileSync('/usr/bin/python3', [path.resolve(here, '../fixtures/make_mask_fixtures.py'), dir], { stdio: 'pipe' });
  const fx = JSON.parse(fs.readFileSync(path.join(dir, 'masks.json'), 'utf8')) as { numpy: string; regions: RegionCase[] };
  numpyVersion = fx.numpy;
  cases = fx.regions;
});

afterAll(() => {
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

function gcd(a: number, b: number): number { return b === 0 ? Math.abs(a) : gcd(b, a % b); }

describe('compileRegion', () => {
  it('rectangles and polygons match NumPy masks (inclusive rectangles, even–odd polygons, clipped to the scan)', () => {
    expect(cases.length).toBeGreaterThanOrEqual(5);
    for (const c of cases) {
      const got = compileRegion(c.shape, c.scanY, c.scanX);
      // reference: NumPy np.mgrid comparisons (rectangles) and a vectorised even–odd crossing test (polygons), make_mask_fixtures.py
      expect(Array.from(got), `${c.name} (NumPy ${numpyVersion})`).toEqual(c.mask);
    }
  });

  it("a lattice polygon selects I + B scan positions, as Pick's theorem predicts", () => {
    const points: [number, number][] = [[1, 1], [18, 2], [14, 9], [9, 6], [4, 14]];
    let twiceArea = 0, B = 0;
    for (let i = 0; i < points.length; i++) {
      const [x0, y0] = points[i];
      const [x1, y1] = points[(i + 1) % points.length];
      twiceArea += x0 * y1 - x1 * y0;
      B += gcd(Math.abs(x1 - x0), Math.abs(y1 - y0));
    }
    const mask = compileRegion({ kind: 'polygon', points }, 16, 23);
    // reference: Pick's theorem A = I + B/2 − 1, so I + B = A + B/2 + 1
    expect(mask.reduce((s, v) => s + v, 0)).toBe(Math.abs(twiceArea) / 2 + B / 2 + 1);
  });

  it('a mask selects the positions where it is > 0', () => {
    const values = Array.from({ length: 16 * 23 }, (_, i) => (i % 7 === 3 ? 1 : 0));
    // reference: the input itself, thresholded at 0
    expect(Array.from(compileRegion({ kind: 'mask', width: 23, height: 16, values }, 16, 23))).toEqual(values);
  });

  it('describes a region in one line', () => {
    expect(describeRegion({ kind: 'rectangle', x0: 2, y0: 0, x1: 10, y1: 5.5 })).toBe('rectangle x=2..10 y=0..5.5');
  });
});

describe('compileRegion bad input', () => {
  const bad = (shape: RegionShape, message: RegExp) => {
    let caught: unknown;
    try { compileRegion(shape, 16, 23); } catch (e) { caught = e; }
    expect(caught, JSON.stringify(shape)).toBeInstanceOf(InputError);
    expect((caught as Error).message).toMatch(message);
  };

  it('empty regions say where they are and how big the scan is', () => {
    bad({ kind: 'rectangle', x0: 30, y0: 2, x1: 40, y1: 5 }, /empty region: rectangle x=30..40 y=2..5, reaching x 30..40, y 2..5, lies wholly outside the 16×23 scan \(scan position centres x 0..22, y 0..15\)/);
    bad({ kind: 'rectangle', x0: 3.2, y0: 2, x1: 3.7, y1: 5 }, /empty region: .* contains no scan position centre of the 16×23 scan/);
    bad({ kind: 'polygon', points: [[-5, -5], [-1, -5], [-1, -1]] }, /lies wholly outside the 16×23 scan/);
    bad({ kind: 'mask', width: 23, height: 16, values: new Uint8Array(16 * 23) }, /empty region/);
  });

  it('masks of the wrong shape, polygons with too few points, non-finite numbers, shapes regions lack', () => {
    bad({ kind: 'mask', width: 16, height: 23, values: new Uint8Array(16 * 23) }, /painted mask region is 23×16 \(height × width\) but the scan is 16×23 \(rows × columns\)/);
    bad({ kind: 'polygon', points: [[0, 0], [5, 5]] }, /polygon region: needs at least 3 points, got 2/);
    bad({ kind: 'polygon', points: [[0, 0], [5, 5], [10, 10]] }, /polygon region: encloses zero area/);
    bad({ kind: 'rectangle', x0: 0, y0: NaN, x1: 3, y1: 3 }, /rectangle region: y0 must be a finite number, got NaN/);
    bad({ kind: 'disk', cx: 3, cy: 3, r: 2 } as unknown as RegionShape, /region shape kind 'disk' is not one of rectangle, polygon, mask/);
    expect(() => compileRegion({ kind: 'rectangle', x0: 0, y0: 0, x1: 3, y1: 3 }, 16, 0)).toThrow(/scan size must be whole numbers ≥ 1, got 16×0/);
  });
});
