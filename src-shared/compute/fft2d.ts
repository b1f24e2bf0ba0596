/**
 * 2-D discrete Fourier transforms over row-major, interleaved complex Float64Arrays
 * ([re0, im0, re1, im1, …], index (y·nx + x)·2), and mirror padding.
 *
 * Sign and scale follow NumPy's np.fft.fft2 / ifft2: forward X[k] = Σ x[n]·exp(−2πi·k·n/N),
 * inverse divides by N. Power-of-two lengths go straight to fft.js (radix-4); any other length
 * uses Bluestein's chirp-z identity on top of power-of-two fft.js transforms, because the COM
 * integration needs transforms of exactly twice the scan size (see mirrorPad) and scan sizes
 * are not always powers of two.
 */
import FFT from 'fft.js';

export function isPowerOfTwo(n: number): boolean {
  return Number.isInteger(n) && n > 0 && (n & (n - 1)) === 0;
}

/** Smallest power of two ≥ n (and ≥ 2, the smallest length fft.js accepts). */
export function nextPowerOfTwo(n: number): number {
  let p = 2;
  while (p < n) p *= 2;
  return p;
}

/** One transform length; `out` and `input` are distinct interleaved complex arrays of 2·n values. */
interface Fft1d {
  readonly n: number;
  forward(out: Float64Array, input: Float64Array): void;
  inverse(out: Float64Array, input: Float64Array): void;
}

class PowerOfTwoFft implements Fft1d {
  private readonly fft: FFT;
  constructor(readonly n: number) {
    this.fft = new FFT(n);
  }
  forward(out: Float64Array, input: Float64Array): void {
    this.fft.transform(out, input);
  }
  inverse(out: Float64Array, input: Float64Array): void {
    this.fft.inverseTransform(out, input);
  }
}

class LengthOneFft implements Fft1d {
  readonly n = 1;
  forward(out: Float64Array, input: Float64Array): void {
    out[0] = input[0];
    out[1] = input[1];
  }
  inverse(out: Float64Array, input: Float64Array): void {
    this.forward(out, input);
  }
}

/**
 * Bluestein: with k·n = (k² + n² − (k−n)²)/2, the length-N DFT becomes a convolution with the
 * chirp exp(iπm²/N), done as a cyclic convolution of power-of-two length M ≥ 2N−1.
 */
class BluesteinFft implements Fft1d {
  private readonly m: number;
  private readonly inner: PowerOfTwoFft;
  /** exp(−iπ n²/N), n = 0…N−1. */
  private readonly chirp: Float64Array;
  /** Forward transform of the conjugate chirp, wrapped to length M. */
  private readonly kernelSpectrum: Float64Array;
  private readonly work: Float64Array;
  private readonly workSpectrum: Float64Array;

  constructor(readonly n: number) {
    this.m = nextPowerOfTwo(2 * n - 1);
    this.inner = new PowerOfTwoFft(this.m);
    this.chirp = new Float64Array(2 * n);
    for (let j = 0; j < n; j++) {
      // n² mod 2N keeps the angle small, so large lengths lose no precision in the phase.
      const angle = (Math.PI * ((j * j) % (2 * n))) / n;
      this.chirp[2 * j] = Math.cos(angle);
      this.chirp[2 * j + 1] = -Math.sin(angle);
    }
    const kernel = new Float64Array(2 * this.m);
    for (let j = 0; j < n; j++) {
      const re = this.chirp[2 * j];
      const im = -this.chirp[2 * j + 1];
      kernel[2 * j] = re;
      kernel[2 * j + 1] = im;
      if (j > 0) {
        kernel[2 * (this.m - j)] = re;
        kernel[2 * (this.m - j) + 1] = im;
      }
    }
    this.kernelSpectrum = new Float64Array(2 * this.m);
    this.inner.forward(this.kernelSpectrum, kernel);
    this.work = new Float64Array(2 * this.m);
    this.workSpectrum = new Float64Array(2 * this.m);
  }

  forward(out: Float64Array, input: Float64Array): void {
    this.transform(out, input, false);
  }

  inverse(out: Float64Array, input: Float64Array): void {
    this.transform(out, input, true);
    const scale = 1 / this.n;
    for (let i = 0; i < 2 * this.n; i++) out[i] *= scale;
  }

  /** The inverse runs the forward chirp on conjugated data: ifft(x)·N = conj(fft(conj(x))). */
  private transform(out: Float64Array, input: Float64Array, conjugate: boolean): void {
    const { n, m, chirp, work, workSpectrum, kernelSpectrum } = this;
    const sign = conjugate ? -1 : 1;
    work.fill(0);
    for (let j = 0; j < n; j++) {
      const xr = input[2 * j];
      const xi = sign * input[2 * j + 1];
      const cr = chirp[2 * j];
      const ci = chirp[2 * j + 1];
      work[2 * j] = xr * cr - xi * ci;
      work[2 * j + 1] = xr * ci + xi * cr;
    }
    this.inner.forward(workSpectrum, work);
    for (let j = 0; j < m; j++) {
      const ar = workSpectrum[2 * j];
      const ai = workSpectrum[2 * j + 1];
      const br = kernelSpectrum[2 * j];
      const bi = kernelSpectrum[2 * j + 1];
      workSpectrum[2 * j] = ar * br - ai * bi;
      workSpectrum[2 * j + 1] = ar * bi + ai * br;
    }
    this.inner.inverse(work, workSpectrum);
    for (let j = 0; j < n; j++) {
      const yr = work[2 * j];
      const yi = work[2 * j + 1];
      const cr = chirp[2 * j];
      const ci = chirp[2 * j + 1];
      out[2 * j] = yr * cr - yi * ci;
      out[2 * j + 1] = sign * (yr * ci + yi * cr);
    }
  }
}

function createFft1d(n: number): Fft1d {
  if (!Number.isInteger(n) || n < 1) throw new RangeError(`FFT length must be a positive integer, got ${n}`);
  if (n === 1) return new LengthOneFft();
  return isPowerOfTwo(n) ? new PowerOfTwoFft(n) : new BluesteinFft(n);
}

/** A reusable 2-D transform of one shape; it owns its scratch buffers, so one plan serves one caller at a time. */
export interface Fft2dPlan {
  readonly ny: number;
  readonly nx: number;
  /** In place: `data` (2·ny·nx interleaved values) becomes its forward transform. */
  forward(data: Float64Array): void;
  /** In place inverse, scaled by 1/(ny·nx) like np.fft.ifft2. */
  inverse(data: Float64Array): void;
}

export function createFft2dPlan(ny: number, nx: number): Fft2dPlan {
  const rowFft = createFft1d(nx);
  const colFft = nx === ny ? rowFft : createFft1d(ny);
  const rowScratch = new Float64Array(2 * nx);
  const colIn = new Float64Array(2 * ny);
  const colOut = new Float64Array(2 * ny);

  function run(data: Float64Array, inverse: boolean): void {
    if (data.length !== 2 * ny * nx) {
      throw new RangeError(`2-D FFT of ${ny}×${nx} expects ${2 * ny * nx} interleaved values, got ${data.length}`);
    }
    for (let y = 0; y < ny; y++) {
      const row = data.subarray(2 * y * nx, 2 * (y + 1) * nx);
      rowScratch.set(row);
      if (inverse) rowFft.inverse(row, rowScratch);
      else rowFft.forward(row, rowScratch);
    }
    for (let x = 0; x < nx; x++) {
      for (let y = 0, i = 2 * x; y < ny; y++, i += 2 * nx) {
        colIn[2 * y] = data[i];
        colIn[2 * y + 1] = data[i + 1];
      }
      if (inverse) colFft.inverse(colOut, colIn);
      else colFft.forward(colOut, colIn);
      for (let y = 0, i = 2 * x; y < ny; y++, i += 2 * nx) {
        data[i] = colOut[2 * y];
        data[i + 1] = colOut[2 * y + 1];
      }
    }
  }

  return {
    ny,
    nx,
    forward: (data) => run(data, false),
    inverse: (data) => run(data, true),
  };
}

/** Forward 2-D FFT of an interleaved complex array; returns a new array. */
export function fft2d(data: Float64Array, ny: number, nx: number): Float64Array {
  const out = Float64Array.from(data);
  createFft2dPlan(ny, nx).forward(out);
  return out;
}

/** Inverse 2-D FFT (scaled by 1/(ny·nx)); returns a new array. */
export function ifft2d(data: Float64Array, ny: number, nx: number): Float64Array {
  const out = Float64Array.from(data);
  createFft2dPlan(ny, nx).inverse(out);
  return out;
}

/** Interleaved complex copy of a real array. */
export function realToComplex(real: ArrayLike<number>): Float64Array {
  const out = new Float64Array(2 * real.length);
  for (let i = 0; i < real.length; i++) out[2 * i] = real[i];
  return out;
}

/** +1: the reflected copy keeps its sign (even function); −1: it is negated (odd function). */
export type MirrorParity = 1 | -1;

/**
 * Index into an axis of length n extended by half-sample-symmetric reflection
 * (… x1 x0 | x0 x1 … x(n−1) | x(n−1) x(n−2) …, period 2n, the edge sample repeated —
 * NumPy's np.pad mode 'symmetric'), and whether that index lies in a reflected copy.
 */
function reflectIndex(i: number, n: number): { source: number; reflected: boolean } {
  const period = 2 * n;
  const r = ((i % period) + period) % period;
  return r < n ? { source: r, reflected: false } : { source: period - 1 - r, reflected: true };
}

/**
 * Extend a real ny×nx array to outY×outX (≥ ny×nx) by even-symmetric reflection across the
 * bottom and right edges, repeating with period 2n when the padding is longer than the data.
 * With a parity of −1 along an axis, reflected copies along that axis are negated: the
 * derivative along x of an even-reflected function is odd-reflected along x and
 * even-reflected along y, so gradient components pad with parities (y: +1, x: −1) and (y: −1, x: +1).
 *
 * Padding to exactly twice the size makes the result periodic with no jump anywhere, which is
 * what Fourier integration needs; any other size leaves a seam where the wrap-around meets.
 */
export function mirrorPad(
  src: ArrayLike<number>,
  ny: number,
  nx: number,
  outY: number,
  outX: number,
  parityY: MirrorParity = 1,
  parityX: MirrorParity = 1,
): Float64Array {
  if (src.length !== ny * nx) throw new RangeError(`mirrorPad: expected ${ny}×${nx} = ${ny * nx} values, got ${src.length}`);
  if (outY < ny || outX < nx) throw new RangeError(`mirrorPad: output ${outY}×${outX} is smaller than input ${ny}×${nx}`);
  const columnSource = new Int32Array(outX);
  const columnSign = new Float64Array(outX);
  for (let x = 0; x < outX; x++) {
    const r = reflectIndex(x, nx);
    columnSource[x] = r.source;
    columnSign[x] = r.reflected ? parityX : 1;
  }
  const out = new Float64Array(outY * outX);
  for (let y = 0; y < outY; y++) {
    const r = reflectIndex(y, ny);
    const rowSign = r.reflected ? parityY : 1;
    const srcRow = r.source * nx;
    const outRow = y * outX;
    for (let x = 0; x < outX; x++) out[outRow + x] = rowSign * columnSign[x] * src[srcRow + columnSource[x]];
  }
  return out;
}

/** The top-left ny×nx block of a real outY×outX array. */
export function cropTopLeft(src: ArrayLike<number>, outY: number, outX: number, ny: number, nx: number): Float64Array {
  const out = new Float64Array(ny * nx);
  for (let y = 0; y < ny; y++) {
    for (let x = 0; x < nx; x++) out[y * nx + x] = src[y * outX + x];
  }
  return out;
}
