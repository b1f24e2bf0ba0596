import { allocTyped, type DType, type NumericArray } from '../model/dtype';
import { previewDims, type FirstPassGeometry, type FirstPassKernel, type FirstPassOutputs, type FirstPassTileResult } from './first-pass-types';

/**
 * The first pass over one tile, written for clarity: it is the reference the WebAssembly
 * kernel (wasm-src/first-pass.ts) is tested against, and the fallback where WebAssembly SIMD
 * is unavailable. `tile` is C-order (nRows, scanX, detY, detX) and starts on a scan row that is
 * a multiple of scanBin.
 */
export function firstPassReference(tile: NumericArray, nRows: number, g: FirstPassGeometry): FirstPassTileResult {
  checkGeometry(nRows, g);
  const { scanX, detY, detX, detBin, scanBin } = g;
  const nPix = detY * detX;
  if (tile.length < nRows * scanX * nPix) {
    throw new RangeError(`first pass: tile holds ${tile.length} elements, expected ${nRows * scanX * nPix}`);
  }
  const { qY, qX, pY, pX } = previewDims(nRows, g);
  const binsPerPattern = pY * pX;
  const sum = new Float64Array(nPix);
  const max = new Float64Array(nPix).fill(-Infinity);
  const total = new Float64Array(nRows * scanX);
  // Preview bins are summed in float64 and only rounded to float32 after averaging.
  const binSums = new Float64Array(qY * qX * binsPerPattern);
  const binOfX = Int32Array.from({ length: detX }, (_, x) => Math.floor(x / detBin));
  let nonFinite = 0;

  for (let r = 0; r < nRows; r++) {
    for (let c = 0; c < scanX; c++) {
      const pattern = (r * scanX + c) * nPix;
      const binBase = (Math.floor(r / scanBin) * qX + Math.floor(c / scanBin)) * binsPerPattern;
      let patternTotal = 0;
      for (let y = 0; y < detY; y++) {
        const rowBins = binBase + Math.floor(y / detBin) * pX;
        for (let x = 0; x < detX; x++) {
          const v = tile[pattern + y * detX + x];
          if (!Number.isFinite(v)) { nonFinite++; continue; }
          const i = y * detX + x;
          sum[i] += v;
          if (v > max[i]) max[i] = v;
          patternTotal += v;
          binSums[rowBins + binOfX[x]] += v;
        }
      }
      total[r * scanX + c] = patternTotal;
    }
  }

  const preview = new Float32Array(binSums.length);
  for (let qr = 0; qr < qY; qr++) {
    const rowsInBin = Math.min(nRows, (qr + 1) * scanBin) - qr * scanBin;
    for (let qc = 0; qc < qX; qc++) {
      const positions = rowsInBin * (Math.min(scanX, (qc + 1) * scanBin) - qc * scanBin);
      const base = (qr * qX + qc) * binsPerPattern;
      for (let j = 0; j < binsPerPattern; j++) preview[base + j] = binSums[base + j] / positions;
    }
  }
  return { sum, max, total, preview, nonFinite };
}

/** The reference as a FirstPassKernel: the tile buffer is an ordinary typed array, reallocated when too small. */
export function createReferenceKernel(): FirstPassKernel {
  let buffer: NumericArray | null = null;
  let bufferDType: DType | null = null;
  let length = 0;
  return {
    tileBuffer(dtype: DType, nElements: number): NumericArray {
      if (!buffer || bufferDType !== dtype || buffer.length < nElements) {
        buffer = allocTyped(dtype, nElements);
        bufferDType = dtype;
      }
      length = nElements;
      return buffer.subarray(0, nElements);
    },
    run(dtype: DType, nRows: number, geometry: FirstPassGeometry, out?: FirstPassOutputs): FirstPassTileResult {
      if (!buffer || bufferDType !== dtype) throw new Error(`first pass: tileBuffer('${dtype}', …) must be called before run`);
      const needed = nRows * geometry.scanX * geometry.detY * geometry.detX;
      if (needed > length) throw new RangeError(`first pass: run needs ${needed} elements but tileBuffer was asked for ${length}`);
      return placeOutputs(firstPassReference(buffer.subarray(0, needed), nRows, geometry), out);
    },
    nonFiniteCounts(dtype: DType, nPatterns: number, nPix: number): Float64Array {
      const counts = new Float64Array(nPix);
      if (dtype !== 'float32' && dtype !== 'float64') return counts;
      if (!buffer || bufferDType !== dtype) throw new Error(`first pass: tileBuffer('${dtype}', …) must be called before nonFiniteCounts`);
      if (nPatterns * nPix > length) throw new RangeError(`first pass: nonFiniteCounts needs ${nPatterns * nPix} elements but tileBuffer was asked for ${length}`);
      for (let p = 0; p < nPatterns; p++) {
        const base = p * nPix;
        for (let i = 0; i < nPix; i++) if (!Number.isFinite(buffer[base + i])) counts[i]++;
      }
      return counts;
    },
  };
}

/** Copy a result's preview and totals into caller-given arrays, when given. */
export function placeOutputs(r: FirstPassTileResult, out?: FirstPassOutputs): FirstPassTileResult {
  if (!out) return r;
  const placed = { ...r };
  if (out.preview) {
    if (out.preview.length !== r.preview.length) throw new RangeError(`first pass: preview output holds ${out.preview.length} values, expected ${r.preview.length}`);
    out.preview.set(r.preview);
    placed.preview = out.preview;
  }
  if (out.total) {
    if (out.total.length !== r.total.length) throw new RangeError(`first pass: total output holds ${out.total.length} values, expected ${r.total.length}`);
    out.total.set(r.total);
    placed.total = out.total;
  }
  return placed;
}

/** Geometry comes from a validated dataset descriptor; a bad one here is a caller's bug. */
export function checkGeometry(nRows: number, g: FirstPassGeometry): void {
  const fields: [string, number, number][] = [
    ['nRows', nRows, 0], ['scanX', g.scanX, 1], ['detY', g.detY, 1], ['detX', g.detX, 1],
    ['detBin', g.detBin, 1], ['scanBin', g.scanBin, 1],
  ];
  for (const [name, value, least] of fields) {
    if (!Number.isInteger(value) || value < least) {
      throw new RangeError(`first pass: ${name} must be an integer ≥ ${least}, got ${value}`);
    }
  }
}
