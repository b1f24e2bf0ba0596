import fs from 'node:fs';
import path from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import {
  curl,
  descan,
  divergence,
  estimateRotation,
  fillNonFinite,
  gaussianSmooth,
  integrateCom,
  magnitudeDirection,
  rotateCom,
} from '../../src-shared/compute/com-field';
import { InputError } from '../../src-shared/model/errors';
import { makeFixtures, readNpyF64 } from '../helpers/fixtures';
import { mulberry32 } from '../helpers/synthetic';

function gaussianNoise(rand: () => number): number {
  return Math.sqrt(-2 * Math.log(1 - rand())) * Math.cos(2 * Math.PI * rand());
}

function pearson(a: ArrayLike<number>, b: ArrayLike<number>): number {
  const n = a.length;
  let ma = 0;
  let mb = 0;
  for (let i = 0; i < n; i++) {
    ma += a[i];
    mb += b[i];
  }
  ma /= n;
  mb /= n;
  let sab = 0;
  let saa = 0;
  let sbb = 0;
  for (let i = 0; i < n; i++) {
    sab += (a[i] - ma) * (b[i] - mb);
    saa += (a[i] - ma) ** 2;
    sbb += (b[i] - mb) ** 2;
  }
  return sab / Math.sqrt(saa * sbb);
}

/** Least-squares slope of `measured` against `truth`: the scale the integration put on φ. */
function slope(measured: ArrayLike<number>, truth: ArrayLike<number>): number {
  const n = truth.length;
  let mt = 0;
  let mm = 0;
  for (let i = 0; i < n; i++) {
    mt += truth[i];
    mm += measured[i];
  }
  mt /= n;
  mm /= n;
  let stm = 0;
  let stt = 0;
  for (let i = 0; i < n; i++) {
    stm += (truth[i] - mt) * (measured[i] - mm);
    stt += (truth[i] - mt) ** 2;
  }
  return stm / stt;
}

function rms(a: ArrayLike<number>, interiorOf?: { scanY: number; scanX: number; margin: number }): number {
  let s = 0;
  let n = 0;
  for (let i = 0; i < a.length; i++) {
    if (interiorOf) {
      const y = Math.floor(i / interiorOf.scanX);
      const x = i % interiorOf.scanX;
      const m = interiorOf.margin;
      if (y < m || x < m || y >= interiorOf.scanY - m || x >= interiorOf.scanX - m) continue;
    }
    s += a[i] * a[i];
    n++;
  }
  return Math.sqrt(s / n);
}

interface PhaseObject {
  scanY: number;
  scanX: number;
  phi: Float64Array;
  /** The analytic ∂φ/∂x, ∂φ/∂y and ∇²φ. */
  dx: Float64Array;
  dy: Float64Array;
  laplacian: Float64Array;
  /** ∂⁴φ/∂x⁴ + ∂⁴φ/∂y⁴: six times the leading error of a central-difference divergence of ∇φ. */
  fourth: Float64Array;
}

/**
 * A weak phase object: well separated positive Gaussian bumps of known amplitude and width,
 * φ = Σ A·exp(−r²/2s²), with its gradient and Laplacian in closed form.
 */
function gaussianBumps(scanY: number, scanX: number, seed: number, count = 14): PhaseObject {
  const rand = mulberry32(seed);
  const n = scanY * scanX;
  const phi = new Float64Array(n);
  const dx = new Float64Array(n);
  const dy = new Float64Array(n);
  const laplacian = new Float64Array(n);
  const fourth = new Float64Array(n);
  for (let b = 0; b < count; b++) {
    const cx = 8 + rand() * (scanX - 16);
    const cy = 8 + rand() * (scanY - 16);
    const s = 3.5 + 2 * rand();
    const amp = 0.5 + 0.5 * rand();
    for (let y = 0; y < scanY; y++) {
      for (let x = 0; x < scanX; x++) {
        const i = y * scanX + x;
        const r2 = (x - cx) ** 2 + (y - cy) ** 2;
        const g = amp * Math.exp(-r2 / (2 * s * s));
        phi[i] += g;
        dx[i] += (-(x - cx) / (s * s)) * g;
        dy[i] += (-(y - cy) / (s * s)) * g;
        laplacian[i] += (r2 / s ** 4 - 2 / (s * s)) * g;
        // d⁴/du⁴ exp(−u²/2s²) = (u⁴/s⁸ − 6u²/s⁶ + 3/s⁴)·exp(−u²/2s²)
        const hermite4 = (u: number) => u ** 4 / s ** 8 - (6 * u * u) / s ** 6 + 3 / s ** 4;
        fourth[i] += (hermite4(x - cx) + hermite4(y - cy)) * g;
      }
    }
  }
  return { scanY, scanX, phi, dx, dy, laplacian, fourth };
}

/** COM = k·∇φ plus Gaussian noise of `noise`·RMS(k·∇φ). */
function comOf(obj: PhaseObject, k: number, noise: number, seed: number): { comX: Float64Array; comY: Float64Array } {
  const rand = mulberry32(seed);
  const comX = obj.dx.map((v) => k * v);
  const comY = obj.dy.map((v) => k * v);
  const sd = noise * Math.sqrt((rms(comX) ** 2 + rms(comY) ** 2) / 2);
  for (let i = 0; i < comX.length; i++) {
    comX[i] += sd * gaussianNoise(rand);
    comY[i] += sd * gaussianNoise(rand);
  }
  return { comX, comY };
}

/**
 * Turn a scan-frame field into what the detector records under the convention
 * scan = R(θ)·T·detector, written out by hand: detector = T·R(−θ)·scan, T = swap of x and y.
 */
function toDetectorFrame(sx: Float64Array, sy: Float64Array, degrees: number, flip: boolean) {
  const t = (degrees * Math.PI) / 180;
  const detX = new Float64Array(sx.length);
  const detY = new Float64Array(sx.length);
  for (let i = 0; i < sx.length; i++) {
    const rx = Math.cos(t) * sx[i] + Math.sin(t) * sy[i];
    const ry = -Math.sin(t) * sx[i] + Math.cos(t) * sy[i];
    detX[i] = flip ? ry : rx;
    detY[i] = flip ? rx : ry;
  }
  return { comX: detX, comY: detY };
}

function angleDistance(a: number, b: number): number {
  const d = Math.abs((((a - b) % 360) + 540) % 360 - 180);
  return d;
}

describe('(1) linear phase ramp', () => {
  it('a constant gradient integrates back to the ramp φ = a·x + b·y', () => {
    const scanY = 75;
    const scanX = 90;
    const a = 0.037;
    const b = -0.052;
    const ramp = new Float64Array(scanY * scanX);
    for (let y = 0; y < scanY; y++) for (let x = 0; x < scanX; x++) ramp[y * scanX + x] = a * x + b * y;
    const { phase, nonFiniteCount } = integrateCom(new Float64Array(scanY * scanX).fill(a), new Float64Array(scanY * scanX).fill(b), scanY, scanX);
    expect(nonFiniteCount).toBe(0);
    // reference: analytic — ∇(a·x + b·y) = (a, b) everywhere, so the integral is the ramp up to a constant
    expect(pearson(phase, ramp)).toBeGreaterThan(0.999);
    expect(slope(phase, ramp)).toBeCloseTo(1, 2);
  });

  it('the gradient of a linear ramp in the other direction (power-of-two grid)', () => {
    const n = 64;
    const ramp = new Float64Array(n * n);
    for (let y = 0; y < n; y++) for (let x = 0; x < n; x++) ramp[y * n + x] = -0.2 * x + 0.1 * y;
    const { phase } = integrateCom(new Float64Array(n * n).fill(-0.2), new Float64Array(n * n).fill(0.1), n, n);
    // reference: analytic, as above
    expect(pearson(phase, ramp)).toBeGreaterThan(0.999);
    expect(slope(phase, ramp)).toBeCloseTo(1, 2);
  });
});

describe('(2) weak phase object', () => {
  it('COM = k·∇φ (+noise) on 75×90 integrates to k·φ', () => {
    const obj = gaussianBumps(75, 90, 11);
    const k = 0.8;
    const { comX, comY } = comOf(obj, k, 0.03, 12);
    const { phase } = integrateCom(comX, comY, obj.scanY, obj.scanX);
    // reference: first-order theory (common practice) — for a weak phase object and a small probe
    // the COM shift is proportional to ∇φ, so the integral is k·φ up to a constant
    expect(pearson(phase, obj.phi)).toBeGreaterThan(0.99);
    // reference: the scale promised by integrateCom, ∇φ_integrated ≈ (gx, gy) per scan step
    expect(Math.abs(slope(phase, obj.phi) / k - 1)).toBeLessThan(0.02);
  });

  it('without noise, the mirror-extended Fourier integral is close to exact', () => {
    const obj = gaussianBumps(75, 90, 21);
    const { phase } = integrateCom(obj.dx, obj.dy, obj.scanY, obj.scanX);
    // reference: analytic gradient of known Gaussians
    expect(pearson(phase, obj.phi)).toBeGreaterThan(0.9999);
  });

  it('high-pass regularisation removes a slow ramp but keeps the bumps', () => {
    const obj = gaussianBumps(75, 90, 31);
    const gx = obj.dx.map((v) => v + 0.05);
    const plain = integrateCom(gx, obj.dy, obj.scanY, obj.scanX).phase;
    const highPassed = integrateCom(gx, obj.dy, obj.scanY, obj.scanX, { highPassCutoff: 0.02 }).phase;
    // reference: analytic — the ramp 0.05·x dominates the plain integral and is damped by k²/(k² + k_c²)
    expect(pearson(highPassed, obj.phi)).toBeGreaterThan(pearson(plain, obj.phi) + 0.3);
    expect(pearson(highPassed, obj.phi)).toBeGreaterThan(0.8);
    expect(() => integrateCom(gx, obj.dy, obj.scanY, obj.scanX, { highPassCutoff: -1 })).toThrow(InputError);
  });
});

describe('(3) divergence and curl', () => {
  const obj = gaussianBumps(75, 90, 41);
  const interior = { scanY: obj.scanY, scanX: obj.scanX, margin: 1 };

  it('div ∇φ equals the analytic Laplacian of the Gaussians', () => {
    const div = divergence(obj.dx, obj.dy, obj.scanY, obj.scanX);
    const err = div.map((v, i) => v - obj.laplacian[i]);
    let peak = 0;
    for (const v of obj.laplacian) peak = Math.max(peak, Math.abs(v));
    let worst = 0;
    for (let y = 1; y < obj.scanY - 1; y++) for (let x = 1; x < obj.scanX - 1; x++) worst = Math.max(worst, Math.abs(err[y * obj.scanX + x]));
    // reference: analytic ∇²φ; central differences err by (h²/6)·∂³g, for widths ≥ 3.5 steps a few % of the peak
    expect(worst / peak).toBeLessThan(0.04);
    // reference: Taylor expansion — (f(x+1) − f(x−1))/2 = f' + f'''/6 + O(h⁴), so the error is
    // (∂⁴φ/∂x⁴ + ∂⁴φ/∂y⁴)/6 to leading order; what remains must be an order of magnitude smaller
    const residual = err.map((v, i) => v - obj.fourth[i] / 6);
    expect(rms(err, interior) / rms(obj.laplacian, interior)).toBeLessThan(0.05);
    expect(rms(residual, interior) / rms(err, interior)).toBeLessThan(0.1);
  });

  it('curl of a gradient is ~0; curl of the gradient turned by 90° is the Laplacian', () => {
    const c = curl(obj.dx, obj.dy, obj.scanY, obj.scanX);
    // reference: analytic — curl ∇φ = 0, up to central-difference truncation
    expect(rms(c, interior) / rms(obj.laplacian, interior)).toBeLessThan(0.01);
    // Turning (gx, gy) by +90° gives (−gy, gx), whose curl is ∂x gx + ∂y gy = ∇²φ.
    const turned = curl(obj.dy.map((v) => -v), obj.dx, obj.scanY, obj.scanX);
    const err = turned.map((v, i) => v - obj.laplacian[i] - obj.fourth[i] / 6);
    // reference: analytic ∇²φ plus the Taylor error term, as in the previous test
    expect(rms(err, interior) / rms(obj.laplacian, interior)).toBeLessThan(0.005);
  });

  it('curl of a discrete gradient vanishes exactly, edges included (difference operators on x and y commute)', () => {
    const { scanY, scanX, phi } = obj;
    const zero = new Float64Array(scanY * scanX);
    const gx = divergence(phi, zero, scanY, scanX); // ∂φ/∂x by the same stencil
    const gy = divergence(zero, phi, scanY, scanX);
    const c = curl(gx, gy, scanY, scanX);
    // reference: analytic — Dx·Dy = Dy·Dx for stencils acting on separate axes
    expect(Math.max(...c.map(Math.abs))).toBeLessThan(1e-15);
  });

  describe('against NumPy', () => {
    let dir: string;
    beforeAll(() => {
      dir = makeFixtures('make_fft_fixture.py');
    });
    it('divergence and curl equal np.gradient sums, edges included', () => {
      const load = (name: string) => readNpyF64(path.join(dir, `${name}.npy`)).data;
      const { ny, nx } = JSON.parse(fs.readFileSync(path.join(dir, 'cases.json'), 'utf8')).grad;
      const gx = load('grad_gx');
      const gy = load('grad_gy');
      const div = divergence(gx, gy, ny, nx);
      const cur = curl(gx, gy, ny, nx);
      const refDiv = load('grad_div');
      const refCurl = load('grad_curl');
      for (let i = 0; i < ny * nx; i++) {
        // reference: NumPy np.gradient(gx, axis=1) + np.gradient(gy, axis=0), and the curl likewise
        expect(div[i]).toBeCloseTo(refDiv[i], 12);
        expect(cur[i]).toBeCloseTo(refCurl[i], 12);
      }
    });
  });
});

describe('rotateCom and magnitudeDirection', () => {
  it('follow the documented convention (analytic)', () => {
    const ex = new Float64Array([1, 0]);
    const ey = new Float64Array([0, 1]);
    const r = rotateCom(ex, ey, 90, false);
    // reference: R(90°)·(1, 0) = (0, 1) and R(90°)·(0, 1) = (−1, 0)
    expect(r.comX[0]).toBeCloseTo(0, 15);
    expect(r.comY[0]).toBeCloseTo(1, 15);
    expect(r.comX[1]).toBeCloseTo(-1, 15);
    expect(r.comY[1]).toBeCloseTo(0, 15);
    const f = rotateCom(ex, ey, 90, true);
    // reference: T·(1, 0) = (0, 1), then R(90°) gives (−1, 0)
    expect(f.comX[0]).toBeCloseTo(-1, 15);
    expect(f.comY[0]).toBeCloseTo(0, 15);
    const nan = rotateCom(new Float64Array([NaN]), new Float64Array([1]), 30, false);
    expect(Number.isNaN(nan.comX[0]) && Number.isNaN(nan.comY[0])).toBe(true);
  });

  it('magnitude and atan2 direction (analytic)', () => {
    const { magnitude, directionRadians } = magnitudeDirection(new Float64Array([3, -1, 0]), new Float64Array([4, 0, -2]));
    // reference: |(3,4)| = 5, atan2(4,3); (−1,0) points at π; (0,−2) at −π/2
    expect(Array.from(magnitude)).toEqual([5, 1, 2]);
    expect(directionRadians[0]).toBeCloseTo(Math.atan2(4, 3), 15);
    expect(directionRadians[1]).toBeCloseTo(Math.PI, 15);
    expect(directionRadians[2]).toBeCloseTo(-Math.PI / 2, 15);
  });
});

describe('(4a) smoothing for the rotation estimate', () => {
  it('keeps a constant exactly, edges included, and a linear ramp away from the edges (analytic)', () => {
    const scanY = 20;
    const scanX = 30;
    const flat = new Float64Array(scanY * scanX).fill(2.5);
    for (const v of gaussianSmooth(flat, scanY, scanX, 1.5)) expect(v).toBeCloseTo(2.5, 12);
    // reference: a symmetric kernel of unit sum maps a·x + b·y to itself wherever its window fits
    const ramp = new Float64Array(scanY * scanX);
    for (let y = 0; y < scanY; y++) for (let x = 0; x < scanX; x++) ramp[y * scanX + x] = 0.3 * x - 0.7 * y;
    const out = gaussianSmooth(ramp, scanY, scanX, 1.5);
    for (let y = 5; y < scanY - 5; y++) for (let x = 5; x < scanX - 5; x++) expect(out[y * scanX + x]).toBeCloseTo(ramp[y * scanX + x], 12);
  });

  it('spreads a single value as the normalised Gaussian exp(−r²/2σ²) (analytic)', () => {
    const n = 31; // every window read below lies inside the scan, so no edge renormalisation
    const delta = new Float64Array(n * n);
    delta[15 * n + 15] = 1;
    const sigma = 2;
    const out = gaussianSmooth(delta, n, n, sigma);
    // reference: the 1-D weights exp(−k²/2σ²), |k| ≤ 3σ, normalised, applied along x then y
    let z = 0;
    for (let k = -6; k <= 6; k++) z += Math.exp(-0.5 * (k / sigma) ** 2);
    for (const [dy, dx] of [[0, 0], [1, 0], [2, 3], [-4, 1], [6, -6]]) {
      expect(out[(15 + dy) * n + 15 + dx]).toBeCloseTo(Math.exp(-0.5 * (dx * dx + dy * dy) / (sigma * sigma)) / (z * z), 14);
    }
    expect(out[15 * n + 22]).toBe(0);
  });

  it('leaves a non-finite position out and does not let it spread', () => {
    const m = new Float64Array(25).fill(1);
    m[12] = NaN;
    const out = gaussianSmooth(m, 5, 5, 1);
    expect(Number.isNaN(out[12])).toBe(true);
    expect(out[11]).toBeCloseTo(1, 14);
  });

  it('recovers the angle from a noisy field where the unsmoothed curl cannot', () => {
    // White noise 1.2× the field's RMS (counting noise on a low dose): reference is the planted angle.
    const obj = gaussianBumps(64, 64, 91, 6);
    const noisy = comOf(obj, 0.8, 1.2, 92);
    const detector = toDetectorFrame(noisy.comX, noisy.comY, 23, false);
    const raw = estimateRotation(detector.comX, detector.comY, 64, 64, { smoothingSigmas: [0] });
    const est = estimateRotation(detector.comX, detector.comY, 64, 64);
    expect(est.smoothingSigma).toBeGreaterThan(0);
    expect(est.curlRelative).toBeLessThan(raw.curlRelative);
    expect(angleDistance(est.degrees, 23)).toBeLessThan(2);
    expect(angleDistance(raw.degrees, 23)).toBeGreaterThan(5);
    console.log(`noise 1.2× the field: unsmoothed ${raw.degrees.toFixed(2)}° (relative curl ${raw.curlRelative.toFixed(2)}), ` +
      `smoothed σ = ${est.smoothingSigma}: ${est.degrees.toFixed(2)}° (${est.curlRelative.toFixed(2)}); planted 23°`);
  });
});

describe('(4) rotation and flip recovery', () => {
  const obj = gaussianBumps(75, 90, 51);
  const scanFrame = comOf(obj, 0.8, 0.03, 52);
  const angles = [0, 17, 90, 133, 180, 245, 359.5];
  const cases = angles.flatMap((a) => [[a, false], [a, true]] as Array<[number, boolean]>);

  it.each(cases)('θ = %f°, flip = %s', (degrees, flip) => {
    const detector = toDetectorFrame(scanFrame.comX, scanFrame.comY, degrees, flip);
    const est = estimateRotation(detector.comX, detector.comY, obj.scanY, obj.scanX);
    // reference: the synthetic truth — a potential gradient is curl-free only in the scan frame, and
    // COM ∝ +∇φ with positive phase bumps (first-order theory) fixes the half-turn via the phase's skewness
    expect(est.flip).toBe(flip);
    expect(angleDistance(est.degrees, degrees)).toBeLessThan(1);
    expect(angleDistance(est.alternativeDegrees, degrees + 180)).toBeLessThan(1);
    expect(est.halfTurnRule).toBe('positive-phase-skewness');
    expect(est.halfTurnScore).toBeGreaterThan(0.5);
    expect(est.curlRelative).toBeLessThan(0.1);
    expect(est.otherFlip.curlRelative).toBeGreaterThan(0.3);
  });

  it.each([[17, false], [245, true]] as Array<[number, boolean]>)('θ = %f°, flip = %s: the estimate hands back the turned field and its phase, as rotateCom and integrateCom give them', (degrees, flip) => {
    // Internal consistency (not an outside reference): the caller uses these instead of turning
    // and integrating again; the half-turn only negates them.
    const detector = toDetectorFrame(scanFrame.comX, scanFrame.comY, degrees, flip);
    const est = estimateRotation(detector.comX, detector.comY, obj.scanY, obj.scanX);
    const again = rotateCom(detector.comX, detector.comY, est.degrees, est.flip);
    const phase = integrateCom(again.comX, again.comY, obj.scanY, obj.scanX).phase;
    const scale = Math.max(...Array.from(phase, Math.abs));
    for (const [got, want] of [[est.rotated.comX, again.comX], [est.rotated.comY, again.comY], [est.phase.phase, phase]] as const) {
      let worst = 0;
      for (let i = 0; i < want.length; i++) worst = Math.max(worst, Math.abs(got[i] - want[i]));
      expect(worst).toBeLessThan(1e-12 * Math.max(1, scale));
    }
  });

  it('the closed-form minimum agrees with a direct scan of the curl over angles', () => {
    // Internal consistency of the closed form (not an outside reference): evaluate RMS curl of
    // rotateCom output every 0.25° and compare the arg-min, modulo the 180° the curl cannot see.
    const detector = toDetectorFrame(scanFrame.comX, scanFrame.comY, 133, false);
    const est = estimateRotation(detector.comX, detector.comY, obj.scanY, obj.scanX);
    let bestAngle = 0;
    let bestCurl = Infinity;
    for (let a = 0; a < 180; a += 0.25) {
      const r = rotateCom(detector.comX, detector.comY, a, false);
      const c = rms(curl(r.comX, r.comY, obj.scanY, obj.scanX));
      if (c < bestCurl) {
        bestCurl = c;
        bestAngle = a;
      }
    }
    expect(angleDistance(2 * bestAngle, 2 * est.degrees) / 2).toBeLessThanOrEqual(0.25);
    expect(bestCurl).toBeGreaterThanOrEqual(est.curlAtBest * (1 - 1e-12));
  });

  it('a vacuum mask decides the half-turn where positive matter fills most of the view', () => {
    // A smooth plateau (a particle) over 80% of the scan, vacuum in the last columns, plus bumps:
    // most of the phase is high, so its skewness is negative and the skewness rule is unreliable.
    const scanY = 60;
    const scanX = 80;
    const edge = 0.8 * scanX;
    const bumps = gaussianBumps(scanY, scanX, 61, 6);
    const gx = new Float64Array(scanY * scanX);
    const gy = new Float64Array(scanY * scanX);
    const mask = new Uint8Array(scanY * scanX);
    for (let y = 0; y < scanY; y++) {
      for (let x = 0; x < scanX; x++) {
        const i = y * scanX + x;
        const t = Math.tanh((edge - x) / 3);
        // φ = 2·(1 + tanh((edge − x)/3)) + 0.3·bumps, differentiated by hand
        gx[i] = (-2 / 3) * (1 - t * t) + 0.3 * bumps.dx[i];
        gy[i] = 0.3 * bumps.dy[i];
        if (x >= edge + 8) mask[i] = 1;
      }
    }
    const truth = 245;
    const detector = toDetectorFrame(gx, gy, truth, true);
    const withMask = estimateRotation(detector.comX, detector.comY, scanY, scanX, { vacuumMask: mask });
    // reference: the synthetic truth; matter has positive mean inner potential, so vacuum has the lowest phase
    expect(withMask.halfTurnRule).toBe('vacuum-phase-lowest');
    expect(withMask.flip).toBe(true);
    expect(angleDistance(withMask.degrees, truth)).toBeLessThan(1);
    // Without the mask only the pair {θ, θ + 180°} is determinable from curl; both candidates are
    // reported (here the skewness rule picks the wrong one of the two, as the file's notes warn).
    const noMask = estimateRotation(detector.comX, detector.comY, scanY, scanX);
    expect(Math.min(angleDistance(noMask.degrees, truth), angleDistance(noMask.alternativeDegrees, truth))).toBeLessThan(1);
  });
});

describe('(5) descan', () => {
  const scanY = 40;
  const scanX = 50;
  const base = comOf(gaussianBumps(scanY, scanX, 71, 6), 1, 0.1, 72);
  const plane = (a: number, b: number, c: number) => {
    const out = new Float64Array(scanY * scanX);
    for (let y = 0; y < scanY; y++) for (let x = 0; x < scanX; x++) out[y * scanX + x] = a + b * x + c * y;
    return out;
  };
  const add = (u: Float64Array, v: Float64Array) => u.map((x, i) => x + v[i]);

  it("'plane' removes an added plane a + b·x + c·y to 1e-9", () => {
    const px = plane(3.5, -0.02, 0.013);
    const py = plane(-1.25, 0.007, 0.031);
    const withPlane = descan(add(base.comX, px), add(base.comY, py), scanY, scanX, { kind: 'plane' });
    const without = descan(base.comX, base.comY, scanY, scanX, { kind: 'plane' });
    // reference: analytic — least squares is linear, so the added plane is exactly what changes in the fit
    for (let i = 0; i < scanY * scanX; i++) {
      expect(Math.abs(withPlane.comX[i] - without.comX[i])).toBeLessThan(1e-9);
      expect(Math.abs(withPlane.comY[i] - without.comY[i])).toBeLessThan(1e-9);
    }
    expect(withPlane.removedX.a - without.removedX.a).toBeCloseTo(3.5, 9);
    expect(withPlane.removedX.b - without.removedX.b).toBeCloseTo(-0.02, 9);
    expect(withPlane.removedY.c - without.removedY.c).toBeCloseTo(0.031, 9);
  });

  it("'plane' fits a pure plane exactly, ignoring NaN positions", () => {
    const px = plane(2, 0.5, -0.25);
    px[7] = NaN;
    px[1234] = NaN;
    const r = descan(px, plane(0, 0, 1), scanY, scanX, { kind: 'plane' });
    // reference: analytic — a plane is its own least-squares fit
    expect(r.removedX.a).toBeCloseTo(2, 9);
    expect(r.removedX.b).toBeCloseTo(0.5, 9);
    expect(r.removedX.c).toBeCloseTo(-0.25, 9);
    for (let i = 0; i < px.length; i++) {
      if (i === 7 || i === 1234) expect(Number.isNaN(r.comX[i])).toBe(true);
      else expect(Math.abs(r.comX[i])).toBeLessThan(1e-9);
    }
  });

  it("'reference' subtracts the mean over the vacuum mask; 'mean' the scan mean; 'none' nothing", () => {
    const mask = new Uint8Array(scanY * scanX);
    for (let y = 0; y < scanY; y++) for (let x = 0; x < 6; x++) mask[y * scanX + x] = 1;
    const comX = add(base.comX, plane(4, 0, 0));
    comX[0] = NaN; // inside the mask: must be ignored, not poison the mean
    let sum = 0;
    let n = 0;
    for (let i = 0; i < comX.length; i++) if (mask[i] && Number.isFinite(comX[i])) { sum += comX[i]; n++; }
    const r = descan(comX, base.comY, scanY, scanX, { kind: 'reference', mask });
    // reference: analytic — the arithmetic mean over the masked finite positions, summed here independently
    expect(r.removedX.a).toBeCloseTo(sum / n, 12);
    for (let i = 1; i < comX.length; i++) expect(r.comX[i]).toBeCloseTo(comX[i] - sum / n, 12);

    const m = descan(comX, base.comY, scanY, scanX, { kind: 'mean' });
    let after = 0;
    for (let i = 1; i < comX.length; i++) after += m.comX[i];
    // reference: analytic — subtracting the mean leaves zero mean
    expect(Math.abs(after / (comX.length - 1))).toBeLessThan(1e-12);

    const none = descan(comX, base.comY, scanY, scanX, { kind: 'none' });
    expect(Array.from(none.comY)).toEqual(Array.from(base.comY));

    expect(() => descan(comX, base.comY, scanY, scanX, { kind: 'reference', mask: new Uint8Array(scanY * scanX) })).toThrow(InputError);
  });
});

describe('(6) NaN positions', () => {
  it('are counted and filled, and do not poison the integrated map', () => {
    const obj = gaussianBumps(75, 90, 81);
    const { comX, comY } = comOf(obj, 1, 0.02, 82);
    const holes = [0, 5, 90 * 40 + 45, 90 * 40 + 46, 90 * 41 + 45, 90 * 41 + 46, 90 * 74 + 89, 90 * 20 + 89, 1000];
    const clean = integrateCom(comX, comY, obj.scanY, obj.scanX).phase;
    for (const i of holes) {
      comX[i] = NaN;
      comY[i] = NaN;
    }
    const { phase, nonFiniteCount } = integrateCom(comX, comY, obj.scanY, obj.scanX);
    expect(nonFiniteCount).toBe(holes.length);
    expect(phase.every(Number.isFinite)).toBe(true);
    // reference: first-order theory as in (2); the filled holes perturb the map only locally
    expect(pearson(phase, obj.phi)).toBeGreaterThan(0.99);
    let range = 0;
    let worst = 0;
    for (let i = 0; i < phase.length; i++) {
      range = Math.max(range, Math.abs(clean[i]));
      worst = Math.max(worst, Math.abs(phase[i] - clean[i]));
    }
    expect(worst / range).toBeLessThan(0.05);

    const detector = toDetectorFrame(comX, comY, 133, true);
    const est = estimateRotation(detector.comX, detector.comY, obj.scanY, obj.scanX);
    expect(est.flip).toBe(true);
    expect(angleDistance(est.degrees, 133)).toBeLessThan(1);
    expect(est.nonFiniteCount).toBeGreaterThanOrEqual(holes.length);
  });

  it('fillNonFinite gives interior holes of a linear field their exact value', () => {
    const scanY = 10;
    const scanX = 12;
    const f = new Float64Array(scanY * scanX);
    for (let y = 0; y < scanY; y++) for (let x = 0; x < scanX; x++) f[y * scanX + x] = 1 + 0.5 * x - 0.25 * y;
    const holes = [3 * scanX + 4, 6 * scanX + 8];
    const expected = holes.map((i) => f[i]);
    for (const i of holes) f[i] = NaN;
    const { filled, count } = fillNonFinite(f, scanY, scanX);
    expect(count).toBe(2);
    // reference: analytic — the mean of the four neighbours of a linear function is its value at the centre
    holes.forEach((i, j) => expect(filled[i]).toBeCloseTo(expected[j], 12));
    expect(() => fillNonFinite(new Float64Array(4).fill(NaN), 2, 2)).toThrow(InputError);
  });
});

describe('the rotation estimate refuses what it cannot judge', () => {
  it('a scan one position high or wide (analytic: along one line a gradient field fits every angle)', () => {
    // gx = 1 along a 1×8 line: curl-free at every rotation, since no y-derivative exists
    const n = 8;
    expect(() => estimateRotation(new Float64Array(n).fill(1), new Float64Array(n), 1, n)).toThrow(/1×8 scan has neighbouring positions along one direction at most/);
    expect(() => estimateRotation(Float64Array.from({ length: n }, (_, i) => i), new Float64Array(n), n, 1)).toThrow(/8×1 scan has neighbouring positions along one direction at most/);
  });

  it('a field that does not vary (no divergence or curl at any angle)', () => {
    const n = 6 * 7;
    expect(() => estimateRotation(new Float64Array(n).fill(3), new Float64Array(n).fill(-2), 6, 7)).toThrow(/does not change across the scan/);
  });
});
