import { allocTyped, type DType, type NumericArray } from '../model/dtype';
import type { CompiledDetector } from '../model/detectors';
import type { VirtualImageKernel } from './tile-kernels-types';

/**
 * Virtual images written for clarity: the reference the WebAssembly kernel
 * (wasm-src/virtual-image.ts) is tested against, and the fallback where WebAssembly SIMD is
 * unavailable. `tile` is C-order (nPatterns, detY, detX).
 *
 * A binary detector sums the values at its pixels; a weighted one sums w·I over the pixels
 * with w ≠ 0. Non-finite values (float data) are left out of every sum and counted once per
 * pattern and pixel of the union of the detectors' supports — the values some image lost.
 * Sums run in float64 in pixel order, so integer data give exact sums below 2^53.
 */
export function virtualImagesReference(tile: NumericArray, nPatterns: number, detY: number, detX: number,
  detectors: readonly CompiledDetector[]): { images: Float64Array; nonFinite: number } {
  checkDetectors(detectors, detY, detX);
  const nPix = detY * detX;
  if (!Number.isInteger(nPatterns) || nPatterns < 0) throw new RangeError(`virtual image: nPatterns must be an integer ≥ 0, got ${nPatterns}`);
  if (tile.length < nPatterns * nPix) {
    throw new RangeError(`virtual image: tile holds ${tile.length} elements, expected ${nPatterns * nPix}`);
  }
  const images = new Float64Array(detectors.length * nPatterns);
  const inUnion = supportUnion(detectors, nPix);
  let nonFinite = 0;

  for (let p = 0; p < nPatterns; p++) {
    const base = p * nPix;
    for (let i = 0; i < nPix; i++) {
      if (inUnion[i] && !Number.isFinite(tile[base + i])) nonFinite++;
    }
    detectors.forEach((det, d) => {
      let sum = 0;
      if (det.mode === 'indices') {
        for (const i of det.indices) {
          const v = tile[base + i];
          if (Number.isFinite(v)) sum += v;
        }
      } else {
        const w = det.weights;
        for (let i = 0; i < nPix; i++) {
          if (w[i] === 0) continue;
          const v = tile[base + i];
          if (Number.isFinite(v)) sum += w[i] * v;
        }
      }
      images[d * nPatterns + p] = sum;
    });
  }
  return { images, nonFinite };
}

/** The reference as a VirtualImageKernel: the tile buffer is an ordinary typed array. */
export function createReferenceVirtualImageKernel(): VirtualImageKernel {
  let buffer: NumericArray | null = null;
  let bufferDType: DType | null = null;
  let length = 0;
  let detectors: CompiledDetector[] = [];
  return {
    tileBuffer(dtype: DType, nElements: number): NumericArray {
      if (!buffer || bufferDType !== dtype || buffer.length < nElements) {
        buffer = allocTyped(dtype, nElements);
        bufferDType = dtype;
      }
      length = nElements;
      return buffer.subarray(0, nElements);
    },
    setDetectors(list: CompiledDetector[]): void {
      checkDetectors(list);
      detectors = list.slice();
    },
    run(dtype: DType, nPatterns: number) {
      if (!buffer || bufferDType !== dtype) throw new Error(`virtual image: tileBuffer('${dtype}', …) must be called before run`);
      if (detectors.length === 0) return { images: new Float64Array(0), nonFinite: 0 };
      const { detY, detX } = detectors[0];
      const needed = nPatterns * detY * detX;
      if (needed > length) throw new RangeError(`virtual image: run needs ${needed} elements but tileBuffer was asked for ${length}`);
      return virtualImagesReference(buffer.subarray(0, needed), nPatterns, detY, detX, detectors);
    },
  };
}

/**
 * Compiled detectors come from our own compile step, so a bad one is a bug, not user input:
 * all of one geometry (detY × detX, optionally the one given), binary indices strictly
 * increasing inside the pattern, weights one finite value per pixel.
 */
export function checkDetectors(detectors: readonly CompiledDetector[], detY?: number, detX?: number): void {
  const first = detectors[0];
  const wantY = detY ?? first?.detY;
  const wantX = detX ?? first?.detX;
  detectors.forEach((det, d) => {
    const name = `virtual image: detector ${d} (${det.label || 'unnamed'})`;
    if (det.detY !== wantY || det.detX !== wantX) {
      throw new RangeError(`${name} is for a ${det.detY}×${det.detX} detector, expected ${wantY}×${wantX}`);
    }
    checkCompiledDetector(det, name);
  });
}

/** One compiled detector: geometry, sorted in-range indices or one finite weight per pixel. */
export function checkCompiledDetector(det: CompiledDetector, name: string): void {
  if (!Number.isInteger(det.detY) || !Number.isInteger(det.detX) || det.detY < 1 || det.detX < 1) {
    throw new RangeError(`${name}: detector shape must be positive integers, got ${det.detY}×${det.detX}`);
  }
  const nPix = det.detY * det.detX;
  if (det.mode === 'indices') {
    let previous = -1;
    for (const i of det.indices) {
      if (i <= previous || i >= nPix) {
        throw new RangeError(`${name}: pixel indices must be strictly increasing and below ${nPix}, got ${i} after ${previous}`);
      }
      previous = i;
    }
  } else {
    if (det.weights.length !== nPix) throw new RangeError(`${name}: expected ${nPix} weights, got ${det.weights.length}`);
    for (const w of det.weights) {
      if (!Number.isFinite(w)) throw new RangeError(`${name}: weights must be finite, got ${w}`);
    }
  }
}

/**
 * Whether two compiled detectors read the same pixels with the same weights (labels aside): a
 * kernel handed the same detectors again, as every tile of a pass is, keeps what it prepared.
 */
export function sameCompiledDetector(a: CompiledDetector | null, b: CompiledDetector | null): boolean {
  if (a === b) return true;
  if (!a || !b || a.mode !== b.mode || a.detY !== b.detY || a.detX !== b.detX) return false;
  const u = a.mode === 'indices' ? a.indices : a.weights;
  const v = b.mode === 'indices' ? b.indices : (b as { weights: Float64Array }).weights;
  if (u.length !== v.length) return false;
  for (let i = 0; i < u.length; i++) if (u[i] !== v[i]) return false;
  return true;
}

/** 1 where some detector reads the pixel (a listed index, or a nonzero weight). */
export function supportUnion(detectors: readonly CompiledDetector[], nPix: number): Uint8Array {
  const inUnion = new Uint8Array(nPix);
  for (const det of detectors) {
    if (det.mode === 'indices') {
      for (const i of det.indices) inUnion[i] = 1;
    } else {
      det.weights.forEach((w, i) => { if (w !== 0) inUnion[i] = 1; });
    }
  }
  return inUnion;
}
