// The demo specimen: a polycrystalline fcc film (copper-like, a = 0.3615 nm, [001]-textured
// grains rotated in plane) on a thin amorphous carbon support, with vacuum beyond the torn
// edge of the support and an in-plane electric field over part of the film.
//
// Everything here is pure arithmetic: no I/O, no clock, no Math.random. A pattern is a
// function of (size, seed, scan position) only, so the output is the same however the scan
// rows are blocked. Only IEEE-754 basic operations (+ − × ÷ √ and rounding), which are
// correctly rounded on every platform, feed the pattern values; exp and cos come from the
// short series below rather than from the JS engine's libm, whose last bits may differ
// between engines and versions.
//
// Noise model: a counting detector, Poisson noise only. λ < 32 counts is sampled exactly by
// inverse transform from precomputed CDF tables on a grid of step 1/16 in λ, blending the two
// neighbouring tables (the result is the mixture of Poisson(λ_lo) and Poisson(λ_hi) with
// mean exactly λ and a variance larger by at most 1/1024). λ ≥ 32 uses the normal
// approximation round(λ + √λ·z), z from an 8192-level table of normal quantiles (tails cut
// at ±3.8σ). One 32-bit draw of xoshiro128** per detector pixel, seeded per scan position.

import type { Shape4D } from '../src-shared/model/dataset';
import { InputError } from '../src-shared/model/errors';

export const GENERATOR_NAME = 'scanfold-sample';
/** Bump whenever a change alters any generated value, so files say which scenario they hold. */
export const GENERATOR_VERSION = 1;
export const DEFAULT_SEED = 1;

export const SAMPLE_SIZE_NAMES = ['tiny', 'demo', 'large'] as const;
export type SampleSizeName = (typeof SAMPLE_SIZE_NAMES)[number];

export function isSampleSizeName(s: string): s is SampleSizeName {
  return (SAMPLE_SIZE_NAMES as readonly string[]).includes(s);
}

export interface ScenarioSizeSpec {
  shape: Shape4D;
  /** Mean counts per bright-field pixel in vacuum; sets the dose. */
  vacuumCountsPerPixel: number;
  hotPixelCount: number;
  deadPixelCount: number;
}

export const SCENARIO_SIZES: Record<SampleSizeName, ScenarioSizeSpec> = {
  tiny: { shape: { scanY: 8, scanX: 10, detY: 24, detX: 20 }, vacuumCountsPerPixel: 2000, hotPixelCount: 2, deadPixelCount: 1 },
  demo: { shape: { scanY: 64, scanX: 64, detY: 96, detX: 96 }, vacuumCountsPerPixel: 600, hotPixelCount: 6, deadPixelCount: 1 },
  large: { shape: { scanY: 256, scanX: 256, detY: 128, detX: 128 }, vacuumCountsPerPixel: 400, hotPixelCount: 8, deadPixelCount: 1 },
};

// ---- Specimen and optics (invented but plausible numbers) ----------------------------------

const BEAM_ENERGY_KEV = 200;
const LATTICE_CONSTANT_NM = 0.3615;
/** Field of view along the scan's fast axis; the slow axis is scaled by scanY / scanX. */
const FIELD_OF_VIEW_NM = 200;
/** {200} spacing on the detector as a fraction of its smaller side. */
const G200_FRACTION_OF_DETECTOR = 0.2;
/** Probe (disk) radius as a fraction of the {200} spacing: small enough that no disks overlap. */
const DISK_RADIUS_FRACTION_OF_G200 = 0.22;
/** Offset of the undeflected beam from the detector's centre, in px (y, x). */
const DISK_CENTER_OFFSET_PX: [number, number] = [0.31, -0.23];

/** In-plane rotation of each grain's [001] pattern, degrees; ≥ 29° apart modulo 90°, so disks never overlap. */
const GRAIN_ROTATION_DEG = [7, 36, 68];
/** Voronoi nuclei of the grains, in normalized scan coordinates (u along x, v along y). */
const GRAIN_NUCLEI: [number, number][] = [[0.40, 0.28], [0.82, 0.30], [0.62, 0.82]];
/** Width of the mixed zone at a grain boundary (where the probe samples both grains), normalized. */
const GRAIN_BOUNDARY_WIDTH = 0.012;

/** Reflection rings of the [001] zone: (h² + k²), the extinction-like length (nm, invented) and the peak fraction of the beam per disk. */
const RINGS = [
  { hk2: 1, extinctionNm: 46, peakFraction: 0.055 }, // {200}
  { hk2: 2, extinctionNm: 64, peakFraction: 0.03 }, // {220}
  { hk2: 4, extinctionNm: 105, peakFraction: 0.015 }, // {400}
];
const DISKS_PER_RING = 4;

/** Mean free paths for scattering out of the bright-field disk, nm. */
const SUPPORT_MEAN_FREE_PATH_NM = 150;
const FILM_MEAN_FREE_PATH_NM = 110;
/** Of what the support scatters: share into the amorphous halo and into the diffuse background (the rest leaves the detector). */
const SUPPORT_HALO_SHARE = 0.55;
const SUPPORT_DIFFUSE_SHARE = 0.3;
/** Of what the film scatters out of the Bragg beams: share into the diffuse background. */
const FILM_DIFFUSE_SHARE = 0.6;
/** Amorphous carbon halo: radius and half-width in units of the {200} spacing. */
const HALO_RADIUS_G200 = 0.85;
const HALO_HALF_WIDTH_G200 = 0.12;
/** Diffuse background (inelastic + thermal diffuse) width in units of the {200} spacing. */
const DIFFUSE_WIDTH_G200 = 0.5;

/** The in-plane field: a compact smooth patch with a radial part (a charged feature) and a uniform part. */
const FIELD_CENTER: [number, number] = [0.70, 0.60]; // (u, v)
const FIELD_RADIUS = 0.27;
const FIELD_RADIAL_PEAK_PX = 0.4;
const FIELD_UNIFORM_PX = 0.35;
const FIELD_UNIFORM_DIRECTION: [number, number] = [0.8, -0.6]; // (x, y), unit length

/** Detector defects depend on the detector, not on the noise seed. */
const DETECTOR_DEFECT_SEED = 0x0d37ec7;
const HOT_PIXEL_MIN_COUNTS = 20000;
const HOT_PIXEL_SPAN_COUNTS = 30000;

/** Margin of the padded template grid; the field shift stays below 1 px, and bilinear reads one more. */
const PAD = 2;
const MAX_SHIFT_PX = 1;

// ---- Deterministic arithmetic --------------------------------------------------------------

const LN2 = 0.6931471805599453;
const TWO_PI = 2 * Math.PI;

/** e^x from a Taylor series after reduction by ln 2; only basic operations, so identical everywhere. */
export function deterministicExp(x: number): number {
  if (x < -700) return 0;
  const k = Math.round(x / LN2);
  const r = x - k * LN2;
  let p = 1;
  for (let n = 17; n >= 1; n--) p = 1 + (r * p) / n;
  if (k > 0) for (let i = 0; i < k; i++) p *= 2;
  else for (let i = 0; i < -k; i++) p *= 0.5;
  return p;
}

/** cos x from a Taylor series after reduction to [−π, π]. */
export function deterministicCos(x: number): number {
  const r = x - Math.round(x / TWO_PI) * TWO_PI;
  const r2 = r * r;
  let c = 1;
  for (let n = 30; n >= 2; n -= 2) c = 1 - (r2 * c) / (n * (n - 1));
  return c;
}

function cosDeg(deg: number): number { return deterministicCos((deg * Math.PI) / 180); }
function sinDeg(deg: number): number { return deterministicCos(((deg - 90) * Math.PI) / 180); }

/** x·x, not x ** 2: exponentiation goes through the engine's pow, which need not round as one multiply does. */
function square(x: number): number { return x * x; }

function smoothstep01(s: number): number {
  const t = s <= 0 ? 0 : s >= 1 ? 1 : s;
  return t * t * (3 - 2 * t);
}

/** MurmurHash3's 32-bit finaliser: a bijective mix, used to derive independent per-position seeds. */
function fmix32(h: number): number {
  h ^= h >>> 16; h = Math.imul(h, 0x85ebca6b);
  h ^= h >>> 13; h = Math.imul(h, 0xc2b2ae35);
  h ^= h >>> 16;
  return h >>> 0;
}

function positionKey(seed: number, y: number, x: number): number {
  let k = fmix32((seed ^ 0x5ca9f01d) >>> 0);
  k = fmix32((k + Math.imul(y + 1, 0x9e3779b1)) >>> 0);
  return fmix32((k ^ Math.imul(x + 1, 0xc2b2ae3d)) >>> 0);
}

/** xoshiro128** (Blackman & Vigna), seeded by a Weyl sequence through fmix32. */
class Xoshiro128 {
  private s0: number; private s1: number; private s2: number; private s3: number;
  constructor(key: number) {
    let w = key >>> 0;
    w = (w + 0x9e3779b9) >>> 0; this.s0 = fmix32(w);
    w = (w + 0x9e3779b9) >>> 0; this.s1 = fmix32(w);
    w = (w + 0x9e3779b9) >>> 0; this.s2 = fmix32(w);
    w = (w + 0x9e3779b9) >>> 0; this.s3 = fmix32(w);
    if ((this.s0 | this.s1 | this.s2 | this.s3) === 0) this.s0 = 1;
  }
  nextUint32(): number {
    const s1 = this.s1;
    const m = Math.imul(s1, 5);
    const result = Math.imul((m << 7) | (m >>> 25), 9) >>> 0;
    const t = s1 << 9;
    this.s2 ^= this.s0; this.s3 ^= s1; this.s1 ^= this.s2; this.s0 ^= this.s3;
    this.s2 ^= t; this.s3 = (this.s3 << 11) | (this.s3 >>> 21);
    return result;
  }
  /** Uniform in [0, 1). */
  next(): number { return this.nextUint32() * 2 ** -32; }
}

// ---- Poisson tables ------------------------------------------------------------------------

const SMALL_LAMBDA_LIMIT = 32;
const LAMBDA_STEPS_PER_COUNT = 16;
const CDF_ROWS = SMALL_LAMBDA_LIMIT * LAMBDA_STEPS_PER_COUNT + 1;
/** P(N ≥ 88 | λ = 32) is far below 2^-32, so rows end at 1 by then. */
const CDF_STRIDE = 88;
const NORMAL_TABLE_BITS = 13;
const NORMAL_TABLE_SIZE = 1 << NORMAL_TABLE_BITS;
const UINT16_MAX = 65535;

let poissonCdfTable: Float64Array | null = null;
let normalQuantileTable: Float64Array | null = null;

function poissonCdf(): Float64Array {
  if (poissonCdfTable) return poissonCdfTable;
  const table = new Float64Array(CDF_ROWS * CDF_STRIDE);
  for (let k = 0; k < CDF_ROWS; k++) {
    const lambda = k / LAMBDA_STEPS_PER_COUNT;
    let p = deterministicExp(-lambda);
    let cdf = 0;
    const row = k * CDF_STRIDE;
    for (let n = 0; n < CDF_STRIDE; n++) {
      cdf += p;
      table[row + n] = cdf < 1 ? cdf : 1;
      p = (p * lambda) / (n + 1);
    }
    // Guarantees the inverse-transform search stops inside the row.
    table[row + CDF_STRIDE - 1] = 1;
  }
  poissonCdfTable = table;
  return table;
}

/** Normal quantiles at the midpoints (i + ½)/N, by inverting a trapezoid-integrated density. */
function normalQuantiles(): Float64Array {
  if (normalQuantileTable) return normalQuantileTable;
  const zMin = -9, step = 1 / 256, points = 18 * 256 + 1;
  const norm = 1 / Math.sqrt(TWO_PI);
  const cdf = new Float64Array(points);
  let prevDensity = norm * deterministicExp(-0.5 * zMin * zMin);
  for (let j = 1; j < points; j++) {
    const z = zMin + j * step;
    const density = norm * deterministicExp(-0.5 * z * z);
    cdf[j] = cdf[j - 1] + 0.5 * step * (prevDensity + density);
    prevDensity = density;
  }
  const total = cdf[points - 1];
  const table = new Float64Array(NORMAL_TABLE_SIZE);
  let j = 0;
  for (let i = 0; i < NORMAL_TABLE_SIZE; i++) {
    const target = ((i + 0.5) / NORMAL_TABLE_SIZE) * total;
    while (cdf[j + 1] < target) j++;
    table[i] = zMin + step * (j + (target - cdf[j]) / (cdf[j + 1] - cdf[j]));
  }
  normalQuantileTable = table;
  return table;
}

/**
 * A Poisson count with mean `lambda` from one uniform 32-bit `draw`: inverse transform on the
 * blended CDF tables below SMALL_LAMBDA_LIMIT, the rounded normal approximation above.
 */
export function poissonCount(lambda: number, draw: number, cdf: Float64Array = poissonCdf(), normal: Float64Array = normalQuantiles()): number {
  if (lambda < SMALL_LAMBDA_LIMIT) {
    const scaled = lambda * LAMBDA_STEPS_PER_COUNT;
    const k = scaled | 0;
    const hi = scaled - k, lo = 1 - hi;
    const row = k * CDF_STRIDE;
    const u = draw * 2 ** -32;
    let n = 0;
    while (u >= lo * cdf[row + n] + hi * cdf[row + CDF_STRIDE + n]) n++;
    return n;
  }
  const v = Math.round(lambda + Math.sqrt(lambda) * normal[draw >>> (32 - NORMAL_TABLE_BITS)]);
  return v > UINT16_MAX ? UINT16_MAX : v;
}

// ---- Templates -----------------------------------------------------------------------------

interface SparseTemplate {
  /** Indices into the padded grid. */
  index: Int32Array;
  /** Weights summing to 1. */
  weight: Float64Array;
}

const SUPERSAMPLE = 16;

/** An anti-aliased disk: fraction of each pixel's area inside the circle, by 16×16 supersampling at the edge. */
function diskTemplate(cy: number, cx: number, radius: number, gridY: number, gridX: number): SparseTemplate {
  const index: number[] = [];
  const weight: number[] = [];
  const halfDiagonal = Math.SQRT1_2;
  const y0 = Math.max(0, Math.floor(cy - radius - 1)), y1 = Math.min(gridY - 1, Math.ceil(cy + radius + 1));
  const x0 = Math.max(0, Math.floor(cx - radius - 1)), x1 = Math.min(gridX - 1, Math.ceil(cx + radius + 1));
  const r2 = radius * radius;
  for (let py = y0; py <= y1; py++) {
    for (let px = x0; px <= x1; px++) {
      const d = Math.sqrt(square(py - cy) + square(px - cx));
      let w: number;
      if (d <= radius - halfDiagonal) w = 1;
      else if (d >= radius + halfDiagonal) w = 0;
      else {
        let inside = 0;
        for (let sy = 0; sy < SUPERSAMPLE; sy++) {
          const dy = py - 0.5 + (sy + 0.5) / SUPERSAMPLE - cy;
          for (let sx = 0; sx < SUPERSAMPLE; sx++) {
            const dx = px - 0.5 + (sx + 0.5) / SUPERSAMPLE - cx;
            if (dy * dy + dx * dx <= r2) inside++;
          }
        }
        w = inside / (SUPERSAMPLE * SUPERSAMPLE);
      }
      if (w > 0) { index.push(py * gridX + px); weight.push(w); }
    }
  }
  const sum = weight.reduce((a, b) => a + b, 0);
  return { index: Int32Array.from(index), weight: Float64Array.from(weight, (w) => w / sum) };
}

function mergeTemplates(parts: SparseTemplate[]): SparseTemplate {
  const n = parts.reduce((a, p) => a + p.index.length, 0);
  const index = new Int32Array(n), weight = new Float64Array(n);
  let o = 0;
  for (const p of parts) { index.set(p.index, o); weight.set(p.weight, o); o += p.index.length; }
  return { index, weight };
}

/** A radially symmetric profile sampled at pixel centres over the padded grid, normalized to sum 1. */
function radialTemplate(cy: number, cx: number, gridY: number, gridX: number, profile: (r2: number) => number): Float64Array {
  const t = new Float64Array(gridY * gridX);
  let sum = 0;
  for (let py = 0; py < gridY; py++) {
    for (let px = 0; px < gridX; px++) {
      const v = profile(square(py - cy) + square(px - cx));
      t[py * gridX + px] = v;
      sum += v;
    }
  }
  for (let i = 0; i < t.length; i++) t[i] /= sum;
  return t;
}

// ---- The scenario --------------------------------------------------------------------------

/** Ground truth of a scenario, arrays in scan order (y major) unless noted. */
export interface ScenarioTruth {
  /** 0 = vacuum, −1 = amorphous support only, 1.. = grain id (majority grain at a boundary). */
  grainMap: Int32Array;
  /** Whole-pattern shift by the in-plane field, detector px; 0 outside the field patch. */
  fieldShiftX: Float64Array;
  fieldShiftY: Float64Array;
  /** Crystalline film thickness, nm. */
  thickness: Float64Array;
  /** Amorphous support thickness, nm (0 in vacuum). */
  supportThickness: Float64Array;
  /** Undeflected beam centre on the detector (y, x), px. */
  diskCenter: [number, number];
  /** Radius of the bright-field disk and of every Bragg disk, px. */
  diskRadiusPx: number;
  /** Detector pixels (y, x), flattened pairs. */
  hotPixels: Int32Array;
  deadPixels: Int32Array;
  /** Every Bragg disk drawn: its grain id, ring index (0 {200}, 1 {220}, 2 {400}) and centre (y, x) before any field shift. */
  braggDiskGrain: Int32Array;
  braggDiskRing: Int32Array;
  braggDiskCenter: Float64Array;
  grainRotationDeg: Float64Array;
  /** Mean counts in the whole beam (the vacuum bright-field disk). */
  beamCounts: number;
}

/** Scalars describing the scenario, written as attributes beside the frames. */
export type ScenarioAttributes = Record<string, number | string | number[]>;

// Per-position coefficient layout: fractions of the beam.
const COEF_BF = 0, COEF_DIFFUSE = 1, COEF_HALO = 2, COEF_BRAGG = 3;

export class Scenario {
  readonly shape: Shape4D;
  readonly truth: ScenarioTruth;
  private readonly gridY: number;
  private readonly gridX: number;
  private readonly diffuseTemplate: Float64Array;
  private readonly haloTemplate: Float64Array;
  private readonly bfTemplate: SparseTemplate;
  /** [grain][ring] */
  private readonly braggTemplates: SparseTemplate[][];
  private readonly coefStride: number;
  private readonly coefs: Float64Array;
  private readonly hotIndex: Int32Array;
  private readonly hotLambda: Float64Array;
  private readonly deadIndex: Int32Array;
  private readonly padded: Float64Array;
  private readonly detectorLambda: Float64Array;
  private readonly cdf = poissonCdf();
  private readonly normal = normalQuantiles();

  /** Validates user-facing arguments; `seed` must be an integer in [0, 2³²). */
  static create(size: string, seed: number = DEFAULT_SEED): Scenario {
    if (!isSampleSizeName(size)) throw new InputError(`sample size "${size}" is not known; expected one of ${SAMPLE_SIZE_NAMES.join(', ')}`);
    if (!Number.isInteger(seed) || seed < 0 || seed > 0xffffffff) throw new InputError(`sample seed ${seed} is not valid; expected an integer from 0 to 4294967295`);
    return new Scenario(size, seed);
  }

  private constructor(readonly size: SampleSizeName, readonly seed: number) {
    const spec = SCENARIO_SIZES[size];
    const shape = (this.shape = { ...spec.shape });
    const { scanY, scanX, detY, detX } = shape;
    this.gridY = detY + 2 * PAD;
    this.gridX = detX + 2 * PAD;

    const g200 = G200_FRACTION_OF_DETECTOR * Math.min(detY, detX);
    const radius = DISK_RADIUS_FRACTION_OF_G200 * g200;
    const center: [number, number] = [(detY - 1) / 2 + DISK_CENTER_OFFSET_PX[0], (detX - 1) / 2 + DISK_CENTER_OFFSET_PX[1]];
    const pcy = center[0] + PAD, pcx = center[1] + PAD;
    const beamCounts = spec.vacuumCountsPerPixel * Math.PI * radius * radius;

    this.bfTemplate = diskTemplate(pcy, pcx, radius, this.gridY, this.gridX);
    const wd2 = square(DIFFUSE_WIDTH_G200 * g200);
    this.diffuseTemplate = radialTemplate(pcy, pcx, this.gridY, this.gridX, (r2) => {
      const q = 1 + r2 / wd2;
      return 1 / (q * Math.sqrt(q));
    });
    const haloR = HALO_RADIUS_G200 * g200, haloW = HALO_HALF_WIDTH_G200 * g200;
    this.haloTemplate = radialTemplate(pcy, pcx, this.gridY, this.gridX, (r2) => {
      const d = (Math.sqrt(r2) - haloR) / haloW;
      return 1 / (1 + d * d);
    });

    // Bragg disks: kept only when the disk and its Friedel mate both lie wholly on the
    // detector even when shifted, so every pattern stays centrosymmetric about the beam.
    const diskGrain: number[] = [], diskRing: number[] = [], diskCenter: number[] = [];
    this.braggTemplates = GRAIN_ROTATION_DEG.map((deg, g) => {
      const c = cosDeg(deg), s = sinDeg(deg);
      return RINGS.map((ring, j) => {
        const parts: SparseTemplate[] = [];
        for (let h = -2; h <= 2; h++) {
          for (let k = -2; k <= 2; k++) {
            if (h * h + k * k !== ring.hk2) continue;
            const gx = g200 * (h * c - k * s), gy = g200 * (h * s + k * c);
            const reach = radius + MAX_SHIFT_PX;
            const fits = (y: number, x: number) => y - reach >= -0.5 && y + reach <= detY - 0.5 && x - reach >= -0.5 && x + reach <= detX - 0.5;
            if (!fits(center[0] + gy, center[1] + gx) || !fits(center[0] - gy, center[1] - gx)) continue;
            parts.push(diskTemplate(pcy + gy, pcx + gx, radius, this.gridY, this.gridX));
            diskGrain.push(g + 1); diskRing.push(j); diskCenter.push(center[0] + gy, center[1] + gx);
          }
        }
        // Each disk keeps its own unit sum, so a coefficient is a fraction of the beam per disk.
        return mergeTemplates(parts);
      });
    });

    const nPos = scanY * scanX;
    const nGrains = GRAIN_ROTATION_DEG.length;
    this.coefStride = COEF_BRAGG + nGrains * RINGS.length;
    this.coefs = new Float64Array(nPos * this.coefStride);
    const grainMap = new Int32Array(nPos);
    const fieldShiftX = new Float64Array(nPos), fieldShiftY = new Float64Array(nPos);
    const thickness = new Float64Array(nPos), supportThickness = new Float64Array(nPos);
    for (let y = 0; y < scanY; y++) {
      for (let x = 0; x < scanX; x++) {
        const p = y * scanX + x;
        const u = (x + 0.5) / scanX, v = (y + 0.5) / scanY;
        const o = p * this.coefStride;
        const supportEdge = 0.12 + 0.06 * v * v;
        if (u < supportEdge) { grainMap[p] = 0; this.coefs[o + COEF_BF] = 1; continue; }

        const ts = 14 + 4 * v;
        supportThickness[p] = ts;
        const transmittedSupport = deterministicExp(-ts / SUPPORT_MEAN_FREE_PATH_NM);
        const scatteredSupport = 1 - transmittedSupport;
        this.coefs[o + COEF_HALO] = SUPPORT_HALO_SHARE * scatteredSupport;
        let diffuse = SUPPORT_DIFFUSE_SHARE * scatteredSupport;
        let bf = transmittedSupport;

        const filmEdge = supportEdge + 0.09 + 0.05 * (1 - v) * (1 - v);
        if (u < filmEdge) {
          grainMap[p] = -1;
        } else {
          // Thickness: a wedge rising to the right with a smooth mound; it tapers to zero at the film edge.
          const du = u - 0.58, dv = v - 0.40;
          const base = 24 + 38 * u + 16 * v + 14 / (1 + (du * du + dv * dv) / 0.015);
          const tf = base * smoothstep01((u - filmEdge) / 0.07);
          thickness[p] = tf;
          const transmittedFilm = deterministicExp(-tf / FILM_MEAN_FREE_PATH_NM);
          const weights = this.grainWeights(u, v);
          let braggTotal = 0;
          RINGS.forEach((ring, j) => {
            // Two-beam-like oscillation with thickness: sin²(π t / ξ) = (1 − cos(2π t / ξ)) / 2.
            const perDisk = ring.peakFraction * 0.5 * (1 - deterministicCos((TWO_PI * tf) / ring.extinctionNm));
            braggTotal += DISKS_PER_RING * perDisk;
            for (let g = 0; g < nGrains; g++) {
              this.coefs[o + COEF_BRAGG + g * RINGS.length + j] = weights[g] * transmittedSupport * transmittedFilm * perDisk;
            }
          });
          bf = transmittedSupport * transmittedFilm * (1 - braggTotal);
          diffuse += transmittedSupport * (1 - transmittedFilm) * FILM_DIFFUSE_SHARE;
          let best = 0;
          for (let g = 1; g < nGrains; g++) if (weights[g] > weights[best]) best = g;
          grainMap[p] = best + 1;
        }
        this.coefs[o + COEF_BF] = bf;
        this.coefs[o + COEF_DIFFUSE] = diffuse;

        const [sx, sy] = fieldShift(u, v);
        fieldShiftX[p] = sx;
        fieldShiftY[p] = sy;
      }
    }

    const defects = detectorDefects(detY, detX, center, radius, g200, spec.hotPixelCount, spec.deadPixelCount);
    this.hotIndex = Int32Array.from(defects.hot, ([y, x]) => y * detX + x);
    this.hotLambda = Float64Array.from(defects.hotLambda);
    this.deadIndex = Int32Array.from(defects.dead, ([y, x]) => y * detX + x);

    this.padded = new Float64Array(this.gridY * this.gridX);
    this.detectorLambda = new Float64Array(detY * detX);
    this.truth = {
      grainMap, fieldShiftX, fieldShiftY, thickness, supportThickness,
      diskCenter: center,
      diskRadiusPx: radius,
      hotPixels: Int32Array.from(defects.hot.flat()),
      deadPixels: Int32Array.from(defects.dead.flat()),
      braggDiskGrain: Int32Array.from(diskGrain),
      braggDiskRing: Int32Array.from(diskRing),
      braggDiskCenter: Float64Array.from(diskCenter),
      grainRotationDeg: Float64Array.from(GRAIN_ROTATION_DEG),
      beamCounts,
    };
  }

  /** Mixing weights of the grains at (u, v): 1 for the nearest nucleus, shared across a boundary's width. */
  private grainWeights(u: number, v: number): number[] {
    const d2 = GRAIN_NUCLEI.map(([nu, nv]) => square(u - nu) + square(v - nv));
    let a = 0;
    for (let g = 1; g < d2.length; g++) if (d2[g] < d2[a]) a = g;
    let b = a === 0 ? 1 : 0;
    for (let g = 0; g < d2.length; g++) if (g !== a && d2[g] < d2[b]) b = g;
    const [au, av] = GRAIN_NUCLEI[a], [bu, bv] = GRAIN_NUCLEI[b];
    // Distance from the Voronoi bisector, positive on a's side.
    const distanceFromBoundary = (d2[b] - d2[a]) / (2 * Math.sqrt(square(au - bu) + square(av - bv)));
    const shareB = 0.5 * smoothstep01(1 - distanceFromBoundary / (0.5 * GRAIN_BOUNDARY_WIDTH));
    const w = d2.map(() => 0);
    w[a] = 1 - shareB;
    w[b] = shareB;
    return w;
  }

  /** Attributes for the frames dataset: what a reader needs to know about this scenario. */
  attributes(): ScenarioAttributes {
    const { scanY, scanX, detY, detX } = this.shape;
    const g200Px = G200_FRACTION_OF_DETECTOR * Math.min(detY, detX);
    const wavelengthPm = electronWavelengthPm(BEAM_ENERGY_KEV);
    // {200} spacing d = a/2, so its scattering angle is λ / d.
    const g200Mrad = (wavelengthPm * 1e-3) / (LATTICE_CONSTANT_NM / 2) * 1e3;
    const mradPerPx = g200Mrad / g200Px;
    const stepX = FIELD_OF_VIEW_NM / scanX;
    const stepY = (FIELD_OF_VIEW_NM * (scanY / scanX)) / scanY;
    return {
      generator: GENERATOR_NAME,
      generator_version: GENERATOR_VERSION,
      size: this.size,
      seed: this.seed,
      dims: 'scan_y,scan_x,det_y,det_x',
      specimen: 'polycrystalline fcc film (a = 0.3615 nm, [001]-textured grains rotated in plane) on amorphous carbon; vacuum at the low-x edge; an in-plane electric field over part of the film',
      noise: 'Poisson; exact inverse transform for mean < 32 (tables on a 1/16 grid, blended), normal approximation round(m + sqrt(m) z) above; xoshiro128** seeded per scan position',
      beam_energy_kev: BEAM_ENERGY_KEV,
      wavelength_pm: wavelengthPm,
      mrad_per_px: mradPerPx,
      convergence_semiangle_mrad: this.truth.diskRadiusPx * mradPerPx,
      disk_radius_px: this.truth.diskRadiusPx,
      disk_center_px: [...this.truth.diskCenter],
      lattice_constant_nm: LATTICE_CONSTANT_NM,
      g200_px: g200Px,
      scan_step_nm: [stepY, stepX],
      beam_counts: this.truth.beamCounts,
    };
  }

  /** Renders scan rows [rowStart, rowStart + rowCount) as (rows, scanX, detY, detX) counts. */
  renderRows(rowStart: number, rowCount: number, out?: Uint16Array): Uint16Array {
    const { scanY, scanX, detY, detX } = this.shape;
    if (!Number.isInteger(rowStart) || !Number.isInteger(rowCount) || rowStart < 0 || rowCount < 0 || rowStart + rowCount > scanY) {
      throw new RangeError(`rows ${rowStart}..${rowStart + rowCount} are outside the scan of ${scanY} rows`);
    }
    const patternLength = detY * detX;
    const needed = rowCount * scanX * patternLength;
    const target = out ?? new Uint16Array(needed);
    if (target.length < needed) throw new RangeError(`output holds ${target.length} values; ${needed} needed`);
    for (let r = 0; r < rowCount; r++) {
      for (let x = 0; x < scanX; x++) this.renderPattern(rowStart + r, x, target, (r * scanX + x) * patternLength);
    }
    return target;
  }

  private renderPattern(y: number, x: number, out: Uint16Array, offset: number): void {
    const { scanX, detY, detX } = this.shape;
    const p = y * scanX + x;
    const coefs = this.coefs, o = p * this.coefStride;
    const counts = this.truth.beamCounts;
    const padded = this.padded;

    const diffuse = coefs[o + COEF_DIFFUSE] * counts, halo = coefs[o + COEF_HALO] * counts;
    if (diffuse === 0 && halo === 0) padded.fill(0);
    else {
      const dt = this.diffuseTemplate, ht = this.haloTemplate;
      for (let i = 0; i < padded.length; i++) padded[i] = diffuse * dt[i] + halo * ht[i];
    }
    addSparse(padded, this.bfTemplate, coefs[o + COEF_BF] * counts);
    for (let g = 0; g < this.braggTemplates.length; g++) {
      const rings = this.braggTemplates[g];
      for (let j = 0; j < rings.length; j++) {
        const c = coefs[o + COEF_BRAGG + g * rings.length + j];
        if (c !== 0) addSparse(padded, rings[j], c * counts);
      }
    }

    // Crop to the detector, moving the whole pattern by the field shift with bilinear
    // interpolation, which moves the centre of mass by exactly the shift.
    const lambda = this.detectorLambda, gx = this.gridX;
    const sx = this.truth.fieldShiftX[p], sy = this.truth.fieldShiftY[p];
    if (sx === 0 && sy === 0) {
      for (let dy = 0; dy < detY; dy++) {
        const src = (dy + PAD) * gx + PAD, dst = dy * detX;
        for (let dx = 0; dx < detX; dx++) lambda[dst + dx] = padded[src + dx];
      }
    } else {
      const qy = PAD - sy, qx = PAD - sx;
      const iy = Math.floor(qy), ix = Math.floor(qx);
      const fy = qy - iy, fx = qx - ix;
      const w00 = (1 - fy) * (1 - fx), w01 = (1 - fy) * fx, w10 = fy * (1 - fx), w11 = fy * fx;
      for (let dy = 0; dy < detY; dy++) {
        const src = (dy + iy) * gx + ix, dst = dy * detX;
        for (let dx = 0; dx < detX; dx++) {
          const s = src + dx;
          lambda[dst + dx] = w00 * padded[s] + w01 * padded[s + 1] + w10 * padded[s + gx] + w11 * padded[s + gx + 1];
        }
      }
    }

    // Poisson draws, xoshiro128** inlined with its state in locals because this loop is the hot path.
    const rng = new Xoshiro128(positionKey(this.seed, y, x));
    const cdf = this.cdf, normal = this.normal;
    let s0 = rng.nextUint32() | 0, s1 = rng.nextUint32() | 0, s2 = rng.nextUint32() | 0, s3 = rng.nextUint32() | 0;
    if ((s0 | s1 | s2 | s3) === 0) s0 = 1;
    const n = detY * detX;
    for (let i = 0; i < n; i++) {
      const m = Math.imul(s1, 5);
      const draw = Math.imul((m << 7) | (m >>> 25), 9) >>> 0;
      const t = s1 << 9;
      s2 ^= s0; s3 ^= s1; s1 ^= s2; s0 ^= s3; s2 ^= t; s3 = (s3 << 11) | (s3 >>> 21);

      out[offset + i] = poissonCount(lambda[i], draw, cdf, normal);
    }

    // Defects after the regular draws, from the same per-position stream.
    const tail = new Xoshiro128((s0 ^ s1 ^ s2 ^ s3) >>> 0);
    for (let h = 0; h < this.hotIndex.length; h++) out[offset + this.hotIndex[h]] = poissonCount(this.hotLambda[h], tail.nextUint32(), cdf, normal);
    for (let d = 0; d < this.deadIndex.length; d++) out[offset + this.deadIndex[d]] = 0;
  }
}

function addSparse(grid: Float64Array, t: SparseTemplate, scale: number): void {
  if (scale === 0) return;
  const idx = t.index, w = t.weight;
  for (let i = 0; i < idx.length; i++) grid[idx[i]] += scale * w[i];
}

/** The field patch: (1 − s²)² envelope, radial part peaking at FIELD_RADIAL_PEAK_PX, plus a uniform part. Returns (x, y) px. */
function fieldShift(u: number, v: number): [number, number] {
  const du = u - FIELD_CENTER[0], dv = v - FIELD_CENTER[1];
  const s2 = (du * du + dv * dv) / (FIELD_RADIUS * FIELD_RADIUS);
  if (s2 >= 1) return [0, 0];
  const envelope = (1 - s2) * (1 - s2);
  // max over s of s(1 − s²)² is 16 / (25 √5), at s = 1/√5.
  const radialScale = FIELD_RADIAL_PEAK_PX / (16 / (25 * Math.sqrt(5)));
  return [
    envelope * (radialScale * (du / FIELD_RADIUS) + FIELD_UNIFORM_PX * FIELD_UNIFORM_DIRECTION[0]),
    envelope * (radialScale * (dv / FIELD_RADIUS) + FIELD_UNIFORM_PX * FIELD_UNIFORM_DIRECTION[1]),
  ];
}

/** Hot pixels away from the bright-field disk; dead pixels in the dark gap between it and the first Bragg ring, where they show. */
function detectorDefects(detY: number, detX: number, center: [number, number], radius: number, g200: number, hotCount: number, deadCount: number) {
  const rng = new Xoshiro128(DETECTOR_DEFECT_SEED);
  const taken = new Set<number>();
  const hot: [number, number][] = [], hotLambda: number[] = [], dead: [number, number][] = [];
  const pick = (accept: (r: number) => boolean): [number, number] => {
    for (;;) {
      const y = Math.floor(rng.next() * detY), x = Math.floor(rng.next() * detX);
      const r = Math.sqrt(square(y - center[0]) + square(x - center[1]));
      if (!taken.has(y * detX + x) && accept(r)) { taken.add(y * detX + x); return [y, x]; }
    }
  };
  for (let i = 0; i < hotCount; i++) {
    hot.push(pick((r) => r > radius + 2));
    hotLambda.push(HOT_PIXEL_MIN_COUNTS + Math.floor(rng.next() * HOT_PIXEL_SPAN_COUNTS));
  }
  const gapInner = radius + 1.5, gapOuter = Math.max(gapInner + 1, g200 - radius - 1);
  for (let i = 0; i < deadCount; i++) dead.push(pick((r) => r >= gapInner && r <= gapOuter));
  return { hot, hotLambda, dead };
}

/** Relativistic electron wavelength λ = h / √(2 m₀ e V (1 + eV / (2 m₀ c²))), CODATA 2018 constants. */
export function electronWavelengthPm(energyKeV: number): number {
  const h = 6.62607015e-34, m0 = 9.1093837015e-31, e = 1.602176634e-19, c = 299792458;
  const eV = e * energyKeV * 1e3;
  return (h / Math.sqrt(2 * m0 * eV * (1 + eV / (2 * m0 * c * c)))) * 1e12;
}
