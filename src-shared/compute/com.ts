import { allocTyped, type DType, type NumericArray } from '../model/dtype';
import type { ComKernel, ComOptions } from './tile-kernels-types';
import { checkCompiledDetector } from './virtual-image';

export interface ComSums {
  total: Float64Array;
  sumX: Float64Array;
  sumY: Float64Array;
  nonFinite: number;
}

/**
 * The centre-of-mass sums written for clarity: the reference the WebAssembly kernel
 * (wasm-src/com.ts) is tested against, and the fallback where WebAssembly SIMD is unavailable.
 * `tile` is C-order (nPatterns, detY, detX); x is the column and y the row of a pixel.
 *
 * Per pattern, over the mask's support (every pixel; a binary mask's pixels; a weighted mask's
 * pixels with w ≠ 0) in pixel order: a non-finite value is left out and counted; with a
 * nonzero threshold a value below it counts as zero; otherwise c = w·I (w = 1 when binary) adds
 * to total, c·x to sumX and c·y to sumY. Sums run in float64, so integer data with a binary
 * mask give exact sums below 2^53.
 */
export function comSumsReference(tile: NumericArray, nPatterns: number, detY: number, detX: number, options: ComOptions): ComSums {
  checkComOptions(options, detY, detX);
  if (!Number.isInteger(nPatterns) || nPatterns < 0) throw new RangeError(`centre of mass: nPatterns must be an integer ≥ 0, got ${nPatterns}`);
  const nPix = detY * detX;
  if (tile.length < nPatterns * nPix) {
    throw new RangeError(`centre of mass: tile holds ${tile.length} elements, expected ${nPatterns * nPix}`);
  }
  const { mask, threshold } = options;
  const support: Uint32Array = mask === null
    ? Uint32Array.from({ length: nPix }, (_, i) => i)
    : mask.mode === 'indices' ? mask.indices : Uint32Array.from(nonzeroIndices(mask.weights));
  const weights = mask?.mode === 'weights' ? mask.weights : null;
  const total = new Float64Array(nPatterns);
  const sumX = new Float64Array(nPatterns);
  const sumY = new Float64Array(nPatterns);
  let nonFinite = 0;

  for (let p = 0; p < nPatterns; p++) {
    const base = p * nPix;
    let t = 0, sx = 0, sy = 0;
    for (const i of support) {
      const v = tile[base + i];
      if (!Number.isFinite(v)) { nonFinite++; continue; }
      if (threshold !== 0 && v < threshold) continue;
      const c = weights ? weights[i] * v : v;
      const x = i % detX;
      const y = (i - x) / detX;
      t += c;
      sx += c * x;
      sy += c * y;
    }
    total[p] = t;
    sumX[p] = sx;
    sumY[p] = sy;
  }
  return { total, sumX, sumY, nonFinite };
}

/** The reference as a ComKernel: the tile buffer is an ordinary typed array. */
export function createReferenceComKernel(): ComKernel {
  let buffer: NumericArray | null = null;
  let bufferDType: DType | null = null;
  let length = 0;
  let options: ComOptions | null = null;
  let shape = { detY: 0, detX: 0 };
  return {
    tileBuffer(dtype: DType, nElements: number): NumericArray {
      if (!buffer || bufferDType !== dtype || buffer.length < nElements) {
        buffer = allocTyped(dtype, nElements);
        bufferDType = dtype;
      }
      length = nElements;
      return buffer.subarray(0, nElements);
    },
    setOptions(o: ComOptions, detY: number, detX: number): void {
      checkComOptions(o, detY, detX);
      options = { mask: o.mask, threshold: o.threshold };
      shape = { detY, detX };
    },
    run(dtype: DType, nPatterns: number): ComSums {
      if (!options) throw new Error('centre of mass: setOptions must be called before run');
      if (!buffer || bufferDType !== dtype) throw new Error(`centre of mass: tileBuffer('${dtype}', …) must be called before run`);
      const needed = nPatterns * shape.detY * shape.detX;
      if (needed > length) throw new RangeError(`centre of mass: run needs ${needed} elements but tileBuffer was asked for ${length}`);
      return comSumsReference(buffer.subarray(0, needed), nPatterns, shape.detY, shape.detX, options);
    },
  };
}

/** Options come from our own engine, so a bad one is a bug, not user input. */
export function checkComOptions(options: ComOptions, detY: number, detX: number): void {
  if (!Number.isInteger(detY) || !Number.isInteger(detX) || detY < 1 || detX < 1) {
    throw new RangeError(`centre of mass: detector shape must be positive integers, got ${detY}×${detX}`);
  }
  if (!Number.isFinite(options.threshold)) throw new RangeError(`centre of mass: threshold must be a finite number, got ${options.threshold}`);
  const mask = options.mask;
  if (mask === null) return;
  const name = `centre of mass: mask (${mask.label || 'unnamed'})`;
  if (mask.detY !== detY || mask.detX !== detX) {
    throw new RangeError(`${name} is for a ${mask.detY}×${mask.detX} detector, expected ${detY}×${detX}`);
  }
  checkCompiledDetector(mask, name);
}

function nonzeroIndices(weights: Float64Array): number[] {
  const out: number[] = [];
  weights.forEach((w, i) => { if (w !== 0) out.push(i); });
  return out;
}
