import { execFileSync } from 'node:child_process';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import type { CompiledDetector, DetectorShape, DetectorSpec } from '../../src-shared/model/detectors';
import { InputError } from '../../src-shared/model/errors';
import { binDetectorWeights, compileDetector, describeDetector, detectorFill } from '../../src-shared/compute/detector-masks';

// Virtual-detector geometry against NumPy masks and quadratures made by
// test/fixtures/make_mask_fixtures.py (run into a temp dir), and against analytic areas.

interface BinaryCase { name: string; detY: number; detX: number; shape: DetectorShape; indices: number[] }
interface PolygonCase { name: string; detY: number; detX: number; points: [number, number][]; indices: number[] }
interface WeightedCase { name: string; detY: number; detX: number; shape: DetectorShape; weights: number[] }
interface Fixture { numpy: string; binary: BinaryCase[]; polygons: PolygonCase[]; weighted: WeightedCase[] }

const here = path.dirname(fileURLToPath(import.meta.url));
let dir = '';
let fx: Fixture;

beforeAll(() => {
  dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-masks-'));
  execFileSync('/usr/bin/python3', [path.resolve(here, '../fixtures/make_mask_fixtures.py'), dir], { stdio: 'pipe' });
  fx = JSON.parse(fs.readFileSync(path.join(dir, 'masks.json'), 'utf8')) as Fixture;
});

afterAll(() => {
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

function indicesOf(d: CompiledDetector): number[] {
  if (d.mode !== 'indices') throw new Error(`expected indices, got ${d.mode}`);
  return Array.from(d.indices);
}

function weightsOf(d: CompiledDetector): Float64Array {
  if (d.mode !== 'weights') throw new Error(`expected weights, got ${d.mode}`);
  return d.weights;
}

const total = (w: ArrayLike<number>) => { let s = 0; for (let i = 0; i < w.length; i++) s += w[i]; return s; };

function shoelace(points: [number, number][]): number {
  let s = 0;
  for (let i = 0; i < points.length; i++) {
    const [x0, y0] = points[i];
    const [x1, y1] = points[(i + 1) % points.length];
    s += x0 * y1 - x1 * y0;
  }
  return Math.abs(s) / 2;
}

function gcd(a: number, b: number): number { return b === 0 ? Math.abs(a) : gcd(b, a % b); }

/** Regular pentagram {5/2}: its even–odd interior is the five points, without the central pentagon. */
function pentagram(cx: number, cy: number, R: number): [number, number][] {
  return Array.from({ length: 5 }, (_, k) => {
    const t = (2 * Math.PI * 2 * k) / 5 - Math.PI / 2;
    return [cx + R * Math.cos(t), cy + R * Math.sin(t)] as [number, number];
  });
}

describe('binary detectors vs NumPy broadcasting', () => {
  it('disk, annulus and rectangle masks match index for index (odd sizes, sub-pixel centres, clipped shapes, exact ties)', () => {
    expect(fx.binary.length).toBeGreaterThan(20);
    for (const c of fx.binary) {
      if (c.indices.length === 0) {
        // reference: NumPy finds no pixel centre inside, so this must be the empty-detector error
        expect(() => compileDetector({ shape: c.shape }, c.detY, c.detX), c.name).toThrow(/empty detector/);
        continue;
      }
      const d = compileDetector({ shape: c.shape }, c.detY, c.detX);
      // reference: NumPy `(xx-cx)**2 + (yy-cy)**2 <= r**2` (and the annulus / rectangle forms) on np.mgrid, np.flatnonzero
      expect(indicesOf(d), `${c.name} (NumPy ${fx.numpy})`).toEqual(c.indices);
      // reference: the same NumPy mask's count over the detector size
      expect(detectorFill(d)).toBeCloseTo(c.indices.length / (c.detY * c.detX), 15);
    }
  });

  it('polygons whose edges miss every pixel centre match an even–odd ray-crossing test, including a self-intersecting pentagram', () => {
    for (const c of fx.polygons) {
      const d = compileDetector({ shape: { kind: 'polygon', points: c.points } }, c.detY, c.detX);
      // reference: vectorised NumPy even–odd crossing test in make_mask_fixtures.py
      expect(indicesOf(d), c.name).toEqual(c.indices);
    }
  });

  it("a lattice polygon selects I + B lattice points, as Pick's theorem predicts (closed-polygon boundary rule)", () => {
    const lattice: [number, number][][] = [
      [[2, 3], [30, 5], [25, 20], [15, 12], [8, 33], [1, 20]],
      [[5, 5], [20, 5], [20, 18], [12, 10], [5, 18]],
      [[3, 1], [35, 9], [11, 30]],
      // horizontal edges on the highest and lowest rows, which the crossing rule alone would miss or halve
      [[3, 34], [3, 20], [12, 25], [22, 20], [22, 34]],
    ];
    for (const points of lattice) {
      const A = shoelace(points);
      let B = 0;
      for (let i = 0; i < points.length; i++) {
        const [x0, y0] = points[i];
        const [x1, y1] = points[(i + 1) % points.length];
        B += gcd(Math.abs(x1 - x0), Math.abs(y1 - y0));
      }
      const d = compileDetector({ shape: { kind: 'polygon', points } }, 37, 41);
      // reference: Pick's theorem A = I + B/2 − 1, so interior + boundary lattice points = A + B/2 + 1
      expect(indicesOf(d).length).toBe(A + B / 2 + 1);
    }
  });

  it('an axis-aligned polygon with integer corners selects the same pixels as the inclusive rectangle', () => {
    const rect = compileDetector({ shape: { kind: 'rectangle', x0: 4, y0: 7, x1: 19, y1: 30 } }, 37, 41);
    const poly = compileDetector({ shape: { kind: 'polygon', points: [[4, 7], [19, 7], [19, 30], [4, 30]] } }, 37, 41);
    // reference: both are 16 × 24 pixel centres by the inclusive-corner rule (counted by hand: 19−4+1, 30−7+1)
    expect(indicesOf(rect).length).toBe(16 * 24);
    expect(indicesOf(poly)).toEqual(indicesOf(rect));
  });
});

describe('weighted detectors', () => {
  it('per-pixel fractions match NumPy quadrature / clipping to 1e-11', () => {
    for (const c of fx.weighted) {
      const w = weightsOf(compileDetector({ shape: c.shape, weighted: true }, c.detY, c.detX));
      let worst = 0;
      for (let i = 0; i < w.length; i++) worst = Math.max(worst, Math.abs(w[i] - c.weights[i]));
      // reference: Gauss–Legendre (np.polynomial.legendre.leggauss) chord integrals for circles,
      // Sutherland–Hodgman clip + shoelace for polygons, 1-D overlap products for rectangles (make_mask_fixtures.py)
      expect(worst, c.name).toBeLessThan(1e-11);
    }
  });

  it('a disk wholly inside totals π r² at sub-pixel centres and radii', () => {
    for (const [cx, cy, r] of [[20, 18, 5], [20.37, 17.81, 7.3], [64.5, 63.5, 40], [33.123, 40.987, 0.3], [50.01, 49.99, 25.55]]) {
      const w = weightsOf(compileDetector({ shape: { kind: 'disk', cx, cy, r }, weighted: true }, 128, 128));
      // reference: area of a circle, π r²
      expect(Math.abs(total(w) / (Math.PI * r * r) - 1)).toBeLessThan(1e-9);
    }
  });

  it('an annulus wholly inside totals π (rOuter² − rInner²)', () => {
    for (const [cx, cy, ri, ro] of [[64, 64, 10, 30], [63.7, 64.21, 0.4, 57.9], [40.5, 70.25, 12.33, 12.9]]) {
      const w = weightsOf(compileDetector({ shape: { kind: 'annulus', cx, cy, rInner: ri, rOuter: ro }, weighted: true }, 128, 128));
      // reference: area of an annulus, π (r_o² − r_i²)
      expect(Math.abs(total(w) / (Math.PI * (ro * ro - ri * ri)) - 1)).toBeLessThan(1e-9);
    }
  });

  it('a disk cut by the detector edge through its centre keeps half its area', () => {
    const r = 9.3;
    const cases: DetectorShape[] = [
      { kind: 'disk', cx: 20.4, cy: -0.5, r },
      { kind: 'disk', cx: -0.5, cy: 17.2, r },
      { kind: 'disk', cx: 40.5, cy: 21.6, r },
      { kind: 'disk', cx: 11.9, cy: 36.5, r },
    ];
    for (const shape of cases) {
      const w = weightsOf(compileDetector({ shape, weighted: true }, 37, 41));
      // reference: a diameter halves a circle, π r² / 2 (the detector's pixel squares end at −0.5 and size − 0.5)
      expect(Math.abs(total(w) / (Math.PI * r * r * 0.5) - 1)).toBeLessThan(1e-9);
    }
  });

  it('a weighted rectangle totals its area; a weighted simple polygon totals its shoelace area', () => {
    const rect = weightsOf(compileDetector({ shape: { kind: 'rectangle', x0: 30.55, y0: 12.2, x1: 3.25, y1: 2.9 }, weighted: true }, 37, 41));
    // reference: rectangle area |x1 − x0| · |y1 − y0|
    expect(total(rect)).toBeCloseTo((30.55 - 3.25) * (12.2 - 2.9), 10);
    const polys: [number, number][][] = [
      [[3.37, 4.11], [35.73, 8.29], [30.13, 33.21], [9.41, 27.33]],
      [[2.5, 3.25], [30.1, 5.7], [25.3, 20.2], [15.05, 12.7], [8.2, 33.9], [1.1, 20.6]],
      [[10, 10], [30, 10], [10, 30]],
    ];
    for (const points of polys) {
      const w = weightsOf(compileDetector({ shape: { kind: 'polygon', points }, weighted: true }, 37, 41));
      // reference: shoelace formula ½ |Σ (x_i y_{i+1} − x_{i+1} y_i)|
      expect(Math.abs(total(w) / shoelace(points) - 1)).toBeLessThan(1e-12);
    }
  });

  it('a self-intersecting pentagram totals the even–odd area (its five points, not the centre pentagon)', () => {
    const R = 15.4;
    const w = weightsOf(compileDetector({ shape: { kind: 'polygon', points: pentagram(20.31, 18.62, R) }, weighted: true }, 37, 41));
    // reference: elementary geometry of the regular pentagram — inner pentagon circumradius ri = R cos72°/cos36°,
    // each point a triangle with base 2 ri sin36° and height R − ri cos36°
    const ri = (R * Math.cos((2 * Math.PI) / 5)) / Math.cos(Math.PI / 5);
    const points = 5 * ri * Math.sin(Math.PI / 5) * (R - ri * Math.cos(Math.PI / 5));
    expect(Math.abs(total(w) / points - 1)).toBeLessThan(1e-12);
    // and every weight is a fraction
    expect(Math.min(...w)).toBeGreaterThanOrEqual(0);
    expect(Math.max(...w)).toBeLessThanOrEqual(1);
  });

  it('a weighted painted mask keeps its values', () => {
    const values = Array.from({ length: 9 * 7 }, (_, i) => ((i * 37) % 11) / 10);
    const w = weightsOf(compileDetector({ shape: { kind: 'mask', width: 7, height: 9, values }, weighted: true }, 9, 7));
    // reference: the input values themselves (the definition of a weighted mask)
    expect(Array.from(w)).toEqual(values);
    // A mask of fractions is weights even without `weighted`: 0.5 is half a pixel, never a whole one.
    const b = compileDetector({ shape: { kind: 'mask', width: 7, height: 9, values } }, 9, 7);
    expect(Array.from(weightsOf(b))).toEqual(values);
    // A 0/1 mask stays binary: reference, the indices where the input is > 0, found by filtering the input
    const ones = values.map((v) => (v > 0.5 ? 1 : 0));
    const c = compileDetector({ shape: { kind: 'mask', width: 7, height: 9, values: ones } }, 9, 7);
    expect(indicesOf(c)).toEqual(ones.flatMap((v, i) => (v > 0 ? [i] : [])));
  });

  it('is continuous: a 1e-3 px move changes a weighted image by at most perimeter × max I × 1e-3, while the binary mask jumps', () => {
    const H = 64, W = 64;
    const pattern = new Float64Array(H * W);
    let maxI = 0, minI = Infinity;
    for (let y = 0; y < H; y++) for (let x = 0; x < W; x++) {
      const v = 1 + Math.exp(-((x - 30) ** 2 + (y - 28) ** 2) / 80) + 0.3 * Math.sin(x / 3) * Math.cos(y / 5);
      pattern[y * W + x] = v; maxI = Math.max(maxI, v); minI = Math.min(minI, v);
    }
    const image = (d: CompiledDetector) => {
      let s = 0;
      if (d.mode === 'weights') for (let i = 0; i < d.weights.length; i++) s += d.weights[i] * pattern[i];
      else for (const i of d.indices) s += pattern[i];
      return s;
    };
    const r = 10, step = 1e-3;
    const at = (cx: number, weighted: boolean) => image(compileDetector({ shape: { kind: 'disk', cx, cy: 30, r }, weighted }, H, W));
    // Integer centre and radius put pixel centres exactly on the circle, e.g. (36, 38): 6² + 8² = 10².
    const dWeighted = Math.abs(at(30 + step, true) - at(30, true));
    const dBinary = Math.abs(at(30 + step, false) - at(30, false));
    // reference: d/dcx ∫_disk I = ∮ I n_x ds, bounded by 2π r · max I (Reynolds transport for a translating region)
    expect(dWeighted).toBeLessThanOrEqual(2 * Math.PI * r * maxI * step);
    expect(dWeighted).toBeGreaterThan(0);
    // reference: pixels on the circle's left rim leave the disk, each at least min I
    expect(dBinary).toBeGreaterThanOrEqual(minI);
  });
});

describe('bad pixels', () => {
  it('are left out of binary and weighted detectors', () => {
    const exclude = new Uint8Array(37 * 41);
    exclude[18 * 41 + 20] = 1; // the centre of the disk below
    exclude[0] = 1;
    const shape: DetectorShape = { kind: 'disk', cx: 20, cy: 18, r: 5 };
    const full = indicesOf(compileDetector({ shape }, 37, 41));
    const kept = indicesOf(compileDetector({ shape }, 37, 41, { excludePixels: exclude }));
    // reference: the full mask minus the one bad pixel that lies inside it
    expect(kept).toEqual(full.filter((i) => i !== 18 * 41 + 20));
    const w = weightsOf(compileDetector({ shape, weighted: true }, 37, 41, { excludePixels: exclude }));
    expect(w[18 * 41 + 20]).toBe(0);
    // reference: π r² less the excluded centre pixel, which lies wholly inside (weight 1)
    expect(total(w)).toBeCloseTo(Math.PI * 25 - 1, 9);
  });
});

describe('binDetectorWeights', () => {
  const H = 37, W = 41;
  const specs: DetectorSpec[] = [
    { shape: { kind: 'annulus', cx: 19.7, cy: 18.2, rInner: 4.4, rOuter: 12.9 }, weighted: true },
    { shape: { kind: 'disk', cx: 37.35, cy: 30.62, r: 9.7 } },
    { shape: { kind: 'polygon', points: pentagram(20.31, 18.62, 15.4) }, weighted: true },
  ];

  it('Σ_bins w_bin · binSum equals Σ_pixels w · I when I is constant inside each bin (partial edge bins too)', () => {
    for (const detBin of [2, 3, 4, 8]) {
      const pY = Math.ceil(H / detBin), pX = Math.ceil(W / detBin);
      const level = Array.from({ length: pY * pX }, (_, k) => 1 + ((k * 7919) % 97) / 13);
      const pattern = new Float64Array(H * W);
      for (let y = 0; y < H; y++) for (let x = 0; x < W; x++) pattern[y * W + x] = level[Math.floor(y / detBin) * pX + Math.floor(x / detBin)];
      const binSum = new Float64Array(pY * pX);
      for (let y = 0; y < H; y++) for (let x = 0; x < W; x++) binSum[Math.floor(y / detBin) * pX + Math.floor(x / detBin)] += pattern[y * W + x];
      for (const spec of specs) {
        const d = compileDetector(spec, H, W);
        const wb = binDetectorWeights(d, detBin);
        expect(wb.length).toBe(pY * pX);
        let binned = 0;
        for (let k = 0; k < wb.length; k++) binned += wb[k] * binSum[k];
        let full = 0;
        if (d.mode === 'weights') for (let i = 0; i < H * W; i++) full += d.weights[i] * pattern[i];
        else for (const i of d.indices) full += pattern[i];
        // reference: algebraic identity — with I_p = c_B on bin B (n_B pixels), Σ_B (Σ_{p∈B} w_p / n_B)(n_B c_B) = Σ_p w_p I_p
        expect(Math.abs(binned - full) / full).toBeLessThan(1e-12);
        for (const v of wb) { expect(v).toBeGreaterThanOrEqual(0); expect(v).toBeLessThanOrEqual(1 + 1e-15); }
      }
    }
  });

  it('with detBin 1 equals the detector itself', () => {
    for (const spec of specs) {
      const d = compileDetector(spec, H, W);
      const wb = binDetectorWeights(d, 1);
      // reference: a 1×1 bin's mean is its single pixel (the dense weights, or 1 at each listed index)
      const dense = new Float64Array(H * W);
      if (d.mode === 'weights') dense.set(d.weights); else for (const i of d.indices) dense[i] = 1;
      expect(Array.from(wb)).toEqual(Array.from(dense));
    }
  });

  it('rejects a bin that is not a whole number ≥ 1', () => {
    const d = compileDetector(specs[1], H, W);
    expect(() => binDetectorWeights(d, 0)).toThrow(InputError);
    expect(() => binDetectorWeights(d, 2.5)).toThrow(/whole number/);
  });
});

describe('describeDetector', () => {
  it('gives one line per shape', () => {
    // reference: the format the HDF5 attribute uses, as specified for the session file
    expect(describeDetector({ shape: { kind: 'annulus', cx: 48, cy: 47.5, rInner: 10, rOuter: 30 }, weighted: true })).toBe('annulus cx=48 cy=47.5 r=10..30 (weighted)');
    expect(describeDetector({ shape: { kind: 'disk', cx: 1 / 3, cy: 2, r: 4.25 } })).toBe('disk cx=0.333333 cy=2 r=4.25');
    expect(describeDetector({ shape: { kind: 'rectangle', x0: 1, y0: 2, x1: 3, y1: 4 } })).toBe('rectangle x=1..3 y=2..4');
    expect(describeDetector({ shape: { kind: 'polygon', points: [[0, 0], [4, 0], [0, 3]] } })).toBe('polygon (0,0) (4,0) (0,3)');
    expect(describeDetector({ shape: { kind: 'mask', width: 3, height: 2, values: [0, 1, 0.5, 0, 0, 1] } })).toBe('painted mask 2×3 with 3 nonzero');
    expect(describeDetector({ shape: { kind: 'polygon', points: pentagram(5, 5, 3).concat(pentagram(5, 5, 2)) } })).toMatch(/^polygon 10 points x=[\d.]+\.\.[\d.]+ y=/);
  });

  it('labels a compiled detector with its label, or else its description', () => {
    expect(compileDetector({ shape: { kind: 'disk', cx: 5, cy: 5, r: 2 }, label: 'BF' }, 11, 11).label).toBe('BF');
    expect(compileDetector({ shape: { kind: 'disk', cx: 5, cy: 5, r: 2 } }, 11, 11).label).toBe('disk cx=5 cy=5 r=2');
  });
});

describe('bad input', () => {
  const H = 37, W = 41;
  const bad = (shape: DetectorShape, message: RegExp, weighted = false, options = {}) => {
    let caught: unknown;
    try { compileDetector({ shape, weighted }, H, W, options); } catch (e) { caught = e; }
    expect(caught, `${JSON.stringify(shape)} should fail`).toBeInstanceOf(InputError);
    expect((caught as Error).message).toMatch(message);
  };

  it('non-finite numbers', () => {
    bad({ kind: 'disk', cx: NaN, cy: 3, r: 2 }, /disk detector: cx must be a finite number, got NaN/);
    bad({ kind: 'disk', cx: 3, cy: 3, r: Infinity }, /r must be a finite number, got Infinity/);
    bad({ kind: 'annulus', cx: 3, cy: 3, rInner: 1, rOuter: NaN }, /rOuter must be a finite number/);
    bad({ kind: 'rectangle', x0: 0, y0: 0, x1: -Infinity, y1: 4 }, /rectangle detector: x1 must be a finite number/);
    bad({ kind: 'polygon', points: [[0, 0], [4, NaN], [0, 3]] }, /point 1 y must be a finite number/);
  });

  it('radii', () => {
    bad({ kind: 'disk', cx: 3, cy: 3, r: 0 }, /radius r must be > 0, got 0/);
    bad({ kind: 'disk', cx: 3, cy: 3, r: -2 }, /radius r must be > 0, got -2/);
    bad({ kind: 'annulus', cx: 3, cy: 3, rInner: 5, rOuter: 5 }, /outer radius must be greater than inner radius, got rInner=5 rOuter=5/);
    bad({ kind: 'annulus', cx: 3, cy: 3, rInner: 6, rOuter: 5 }, /outer radius must be greater than inner radius/);
    bad({ kind: 'annulus', cx: 3, cy: 3, rInner: -1, rOuter: 5 }, /inner radius must be ≥ 0, got rInner=-1/);
  });

  it('polygons with fewer than 3 points or no area', () => {
    bad({ kind: 'polygon', points: [[0, 0], [4, 4]] }, /needs at least 3 points, got 2/);
    bad({ kind: 'polygon', points: [[1, 1], [5, 5], [9, 9], [3, 3]] }, /encloses zero area/);
    bad({ kind: 'polygon', points: [[1, 1], [5, 1], [9, 1]] }, /encloses zero area/, true);
  });

  it('masks of the wrong shape or with values outside [0, 1]', () => {
    const values = new Float64Array(40 * 41);
    bad({ kind: 'mask', width: 41, height: 40, values }, /painted mask detector is 40×41 \(height × width\) but the detector is 37×41/);
    bad({ kind: 'mask', width: 37, height: 41, values: new Float64Array(37 * 41) }, /is 41×37 .* detector is 37×41/);
    const v = new Float64Array(H * W);
    v[5] = 1.5;
    bad({ kind: 'mask', width: W, height: H, values: v }, /values must lie in \[0, 1\], got 1.5 at row 0, column 5/);
    v[5] = -0.1;
    bad({ kind: 'mask', width: W, height: H, values: v }, /got -0.1/);
    v[5] = NaN;
    bad({ kind: 'mask', width: W, height: H, values: v }, /got NaN/, true);
    bad({ kind: 'mask', width: W, height: H, values: new Float64Array(H * W) }, /empty detector: painted mask 37×41 with 0 nonzero/);
  });

  it('empty detectors say where they are and how big the detector is', () => {
    bad({ kind: 'disk', cx: 100, cy: 10, r: 5 }, /empty detector: disk cx=100 cy=10 r=5, reaching x 95..105, y 5..15, lies wholly outside the 37×41 detector \(pixel centres x 0..40, y 0..36\)/);
    bad({ kind: 'annulus', cx: -50, cy: -50, rInner: 3, rOuter: 20 }, /lies wholly outside the 37×41 detector/, true);
    bad({ kind: 'rectangle', x0: 2.2, y0: 3.1, x1: 2.8, y1: 9 }, /empty detector: rectangle .* contains no pixel centre of the 37×41 detector/);
    bad({ kind: 'polygon', points: [[-9, -9], [-3, -9], [-3, -2]] }, /lies wholly outside/, true);
    // A tiny disk between four centres holds none of them, yet covers area when weighted.
    bad({ kind: 'disk', cx: 10.5, cy: 10.5, r: 0.5 }, /contains no pixel centre/);
    expect(() => compileDetector({ shape: { kind: 'disk', cx: 10.5, cy: 10.5, r: 0.5 }, weighted: true }, H, W)).not.toThrow();
    // Partly outside is normal while dragging.
    expect(() => compileDetector({ shape: { kind: 'disk', cx: -3, cy: -3, r: 5 } }, H, W)).not.toThrow();
  });

  it('bad pixels covering the whole detector make it empty', () => {
    const exclude = new Uint8Array(H * W).fill(1);
    // reference: 13 lattice points lie within distance 2 of a lattice point: itself, (±1,0), (0,±1), (±2,0), (0,±2), (±1,±1)
    bad({ kind: 'disk', cx: 10, cy: 10, r: 2 }, /empty detector: disk cx=10 cy=10 r=2 covers 13 pixels of the 37×41 detector .*, and every one of them is marked bad/, false, { excludePixels: exclude });
    bad({ kind: 'disk', cx: 10, cy: 10, r: 2 }, /marked bad/, true, { excludePixels: exclude });
    bad({ kind: 'disk', cx: 10, cy: 10, r: 2 }, /bad-pixel map holds 5 values, expected detY × detX = 37 × 41/, false, { excludePixels: new Uint8Array(5) });
  });

  it('unknown shape kinds and detector sizes', () => {
    bad({ kind: 'hexagon' } as unknown as DetectorShape, /shape kind 'hexagon' is not one of disk, annulus, rectangle, polygon, mask/);
    expect(() => compileDetector({ shape: { kind: 'disk', cx: 1, cy: 1, r: 1 } }, 0, 4)).toThrow(/detector size must be whole numbers ≥ 1, got 0×4/);
  });
});

describe('speed', () => {
  it('compiles a weighted annulus on a 256×256 detector well under 5 ms', () => {
    const spec = (i: number): DetectorSpec => ({ shape: { kind: 'annulus', cx: 127.3 + i * 1e-3, cy: 128.6, rInner: 40.2, rOuter: 118.7 }, weighted: true });
    for (let i = 0; i < 20; i++) compileDetector(spec(i), 256, 256);
    // Best of several batches, so a burst of load from parallel test files does not decide the result.
    const batches: number[] = [];
    for (let b = 0; b < 5; b++) {
      const t0 = performance.now();
      for (let i = 0; i < 20; i++) compileDetector(spec(b * 20 + i), 256, 256);
      batches.push((performance.now() - t0) / 20);
    }
    const ms = Math.min(...batches);
    console.log(`weighted annulus 256×256: best ${ms.toFixed(3)} ms, worst batch ${Math.max(...batches).toFixed(3)} ms per compile`);
    expect(ms).toBeLessThan(5);
  });
});

describe('painted masks of weights', () => {
  it('a mask holding fractions is used as weights without --weighted (0.5 counts as half a pixel)', () => {
    // analytic case: the compiled weights are the painted values themselves
    const values = new Float64Array(12).fill(0);
    values[1] = 0.5; values[5] = 1; values[7] = 0.25;
    const d = compileDetector({ shape: { kind: 'mask', width: 4, height: 3, values } }, 3, 4);
    expect(d.mode).toBe('weights');
    expect(d.mode === 'weights' && Array.from(d.weights)).toEqual(Array.from(values));
    const binary = compileDetector({ shape: { kind: 'mask', width: 4, height: 3, values: values.map((v) => (v > 0 ? 1 : 0)) } }, 3, 4);
    expect(binary.mode).toBe('indices');
  });
});
