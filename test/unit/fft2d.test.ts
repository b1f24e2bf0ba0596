import fs from 'node:fs';
import path from 'node:path';
import { beforeAll, describe, expect, it } from 'vitest';
import { createFft2dPlan, fft2d, ifft2d, isPowerOfTwo, mirrorPad, nextPowerOfTwo, realToComplex } from '../../src-shared/compute/fft2d';
import { makeFixtures, readNpyF64 } from '../helpers/fixtures';
import { mulberry32 } from '../helpers/synthetic';

function randomComplex(n: number, seed: number): Float64Array {
  const rand = mulberry32(seed);
  const out = new Float64Array(2 * n);
  for (let i = 0; i < out.length; i++) out[i] = 2 * rand() - 1;
  return out;
}

/** The DFT written straight from its definition, X[ky,kx] = Σ x[y,x]·exp(−2πi(ky·y/ny + kx·x/nx)), O(N²). */
function directDft2(data: Float64Array, ny: number, nx: number, inverse: boolean): Float64Array {
  const out = new Float64Array(data.length);
  const sign = inverse ? 1 : -1;
  const scale = inverse ? 1 / (ny * nx) : 1;
  for (let ky = 0; ky < ny; ky++) {
    for (let kx = 0; kx < nx; kx++) {
      let re = 0;
      let im = 0;
      for (let y = 0; y < ny; y++) {
        for (let x = 0; x < nx; x++) {
          const angle = sign * 2 * Math.PI * (((ky * y) % ny) / ny + ((kx * x) % nx) / nx);
          const c = Math.cos(angle);
          const s = Math.sin(angle);
          const xr = data[2 * (y * nx + x)];
          const xi = data[2 * (y * nx + x) + 1];
          re += xr * c - xi * s;
          im += xr * s + xi * c;
        }
      }
      out[2 * (ky * nx + kx)] = re * scale;
      out[2 * (ky * nx + kx) + 1] = im * scale;
    }
  }
  return out;
}

/** max |a − b| relative to the largest |b|, so one tolerance serves arrays of any scale. */
function peakRelativeError(a: ArrayLike<number>, b: ArrayLike<number>): number {
  expect(a.length).toBe(b.length);
  let worst = 0;
  let peak = 0;
  for (let i = 0; i < b.length; i++) {
    worst = Math.max(worst, Math.abs(a[i] - b[i]));
    peak = Math.max(peak, Math.abs(b[i]));
  }
  return worst / Math.max(peak, 1e-300);
}

const SMALL_SHAPES: Array<[number, number]> = [[1, 1], [2, 2], [4, 8], [16, 2], [3, 5], [6, 6], [1, 7], [7, 12]];

describe('fft2d against the DFT definition (analytic)', () => {
  it.each(SMALL_SHAPES)('forward and inverse %i×%i match the direct sum', (ny, nx) => {
    const data = randomComplex(ny * nx, 1000 * ny + nx);
    // reference: the DFT's defining sum, evaluated directly
    expect(peakRelativeError(fft2d(data, ny, nx), directDft2(data, ny, nx, false))).toBeLessThan(1e-12);
    expect(peakRelativeError(ifft2d(data, ny, nx), directDft2(data, ny, nx, true))).toBeLessThan(1e-12);
  });

  it.each([[32, 32], [30, 50], [1, 64], [45, 1]] as Array<[number, number]>)('Parseval holds on %i×%i', (ny, nx) => {
    const data = randomComplex(ny * nx, 7 * ny + nx);
    const spectrum = fft2d(data, ny, nx);
    let energy = 0;
    let spectralEnergy = 0;
    for (let i = 0; i < data.length; i++) {
      energy += data[i] * data[i];
      spectralEnergy += spectrum[i] * spectrum[i];
    }
    // reference: Parseval's theorem for the unnormalised DFT, Σ|x|² = Σ|X|² / N
    expect(Math.abs(spectralEnergy / (ny * nx) - energy) / energy).toBeLessThan(1e-12);
  });

  it.each([[64, 64], [75, 90], [128, 3]] as Array<[number, number]>)('round trip on %i×%i returns the input', (ny, nx) => {
    const data = randomComplex(ny * nx, 31 * ny + nx);
    const plan = createFft2dPlan(ny, nx);
    const work = Float64Array.from(data);
    plan.forward(work);
    plan.inverse(work);
    // reference: ifft(fft(x)) = x by definition of the inverse
    expect(peakRelativeError(work, data)).toBeLessThan(1e-12);
    // The plan's scratch buffers must not leak state from one call into the next.
    const again = Float64Array.from(data);
    plan.forward(again);
    expect(peakRelativeError(again, fft2d(data, ny, nx))).toBe(0);
  });

  it('a single complex exponential lands in one bin (analytic)', () => {
    const ny = 12;
    const nx = 16;
    const fy = 5;
    const fx = 3;
    const data = new Float64Array(2 * ny * nx);
    for (let y = 0; y < ny; y++) {
      for (let x = 0; x < nx; x++) {
        const angle = 2 * Math.PI * (fy * y / ny + fx * x / nx);
        data[2 * (y * nx + x)] = Math.cos(angle);
        data[2 * (y * nx + x) + 1] = Math.sin(angle);
      }
    }
    const spectrum = fft2d(data, ny, nx);
    const expected = new Float64Array(2 * ny * nx);
    // reference: DFT of exp(2πi(fy·y/ny + fx·x/nx)) is N at bin (fy, fx) and 0 elsewhere
    expected[2 * (fy * nx + fx)] = ny * nx;
    expect(peakRelativeError(spectrum, expected)).toBeLessThan(1e-12);
  });

  it('helpers: powers of two', () => {
    expect([1, 2, 3, 64, 100].map(isPowerOfTwo)).toEqual([true, true, false, true, false]);
    expect([1, 2, 3, 75, 128, 129].map(nextPowerOfTwo)).toEqual([2, 2, 4, 128, 128, 256]);
  });
});

interface FftCase { name: string; ny: number; nx: number }
interface PadCase { name: string; ny: number; nx: number; outY: number; outX: number }

describe('fft2d and mirrorPad against NumPy', () => {
  let dir: string;
  let cases: { fft: FftCase[]; pad: PadCase[]; numpy: string };
  const load = (name: string) => readNpyF64(path.join(dir, `${name}.npy`)).data;
  const interleave = (re: Float64Array, im: Float64Array) => {
    const out = new Float64Array(2 * re.length);
    for (let i = 0; i < re.length; i++) {
      out[2 * i] = re[i];
      out[2 * i + 1] = im[i];
    }
    return out;
  };

  beforeAll(() => {
    dir = makeFixtures('make_fft_fixture.py');
    cases = JSON.parse(fs.readFileSync(path.join(dir, 'cases.json'), 'utf8'));
  });

  it('np.fft.fft2 and np.fft.ifft2 on every fixture shape (power of two or not)', () => {
    expect(cases.fft.length).toBeGreaterThanOrEqual(8);
    for (const c of cases.fft) {
      const input = interleave(load(`fft_${c.name}_in_re`), load(`fft_${c.name}_in_im`));
      // reference: NumPy np.fft.fft2 / np.fft.ifft2 on the same input (version in cases.json)
      expect(peakRelativeError(fft2d(input, c.ny, c.nx), interleave(load(`fft_${c.name}_fwd_re`), load(`fft_${c.name}_fwd_im`))), c.name).toBeLessThan(1e-9);
      expect(peakRelativeError(ifft2d(input, c.ny, c.nx), interleave(load(`fft_${c.name}_inv_re`), load(`fft_${c.name}_inv_im`))), c.name).toBeLessThan(1e-9);
    }
  });

  it("even mirrorPad equals np.pad(mode='symmetric'), including pads longer than the data", () => {
    for (const c of cases.pad) {
      const padded = mirrorPad(load(`pad_${c.name}_in`), c.ny, c.nx, c.outY, c.outX);
      // reference: NumPy np.pad(a, ((0, outY−ny), (0, outX−nx)), mode='symmetric')
      expect(Array.from(padded), c.name).toEqual(Array.from(load(`pad_${c.name}_out`)));
    }
  });

  it('odd mirrorPad to twice the size is antisymmetric about each border (analytic)', () => {
    const ny = 5;
    const nx = 7;
    const src = Float64Array.from(randomComplex(ny * nx, 5).subarray(0, ny * nx));
    const oddX = mirrorPad(src, ny, nx, 2 * ny, 2 * nx, 1, -1);
    const oddY = mirrorPad(src, ny, nx, 2 * ny, 2 * nx, -1, 1);
    const even = mirrorPad(src, ny, nx, 2 * ny, 2 * nx);
    for (let y = 0; y < 2 * ny; y++) {
      for (let x = 0; x < 2 * nx; x++) {
        const i = y * 2 * nx + x;
        // reference: an odd half-sample reflection f(2n−1−x) = −f(x), an even one f(2n−1−x) = f(x)
        expect(oddX[y * 2 * nx + (2 * nx - 1 - x)]).toBe(-oddX[i]);
        expect(oddX[(2 * ny - 1 - y) * 2 * nx + x]).toBe(oddX[i]);
        expect(oddY[(2 * ny - 1 - y) * 2 * nx + x]).toBe(-oddY[i]);
        expect(Math.abs(oddX[i])).toBe(Math.abs(even[i]));
      }
    }
  });

  it('realToComplex puts values in the real slots', () => {
    expect(Array.from(realToComplex([1, 2]))).toEqual([1, 0, 2, 0]);
  });
});
