import { checkPreviewShape, previewImages } from './preview-image';
import { MAX_PAGES, PAGE_BYTES, pagesFor, roundUp, TILE_OFFSET } from './wasm-memory';

/**
 * Virtual images from the preview cube with WebAssembly SIMD (built from
 * wasm-src/preview-image.ts to dist/wasm/preview-image.wasm). Plain JavaScript reads a 256 MiB
 * cube at about 6 GB/s on one thread, so previewImages (preview-image.ts) needs some 50 ms
 * for a large annulus; this kernel streams it at memory speed. It cannot take the cube as an
 * argument without a copy as slow as the answer, so the cube lives in the kernel's memory:
 * fill `cube()` once (say, from the first pass) and ask for images as often as needed.
 *
 * Memory layout: [0, 64 KiB) is left to the module's own static data; the cube starts at
 * 64 KiB; detector lists and images follow it. The memory grows only when images() is asked
 * for more detectors than any call before (past the 16 reserved); that detaches earlier views,
 * so take `cube()` afresh rather than keeping it across images(). The cube's contents survive.
 */
export interface PreviewImager {
  readonly qY: number;
  readonly qX: number;
  readonly pY: number;
  readonly pX: number;
  /** The cube, qY × qX × pY × pX float32 in the kernel's memory. Values must be finite. */
  cube(): Float32Array;
  /**
   * The kernel's memory, a SharedArrayBuffer, and where the cube starts in it: other threads
   * (the first pass's workers) write preview rows straight into the cube.
   */
  readonly sharedBuffer: SharedArrayBuffer;
  readonly cubeByteOffset: number;
  /** One qY × qX image per detector: Σ over bins of weight × cube, weights pY × pX (mostly zeros). */
  images(binWeights: readonly Float64Array[]): Float64Array[];
}

export function createWasmPreviewImager(wasmModule: WebAssembly.Module, qY: number, qX: number, pY: number, pX: number): PreviewImager {
  checkPreviewShape(qY, qX, pY, pX);
  const nBins = pY * pX;
  const nPositions = qY * qX;
  const cubeBytes = nPositions * nBins * 4;
  const groupsPerPosition = Math.ceil(nBins / 4);
  // Per detector at worst: every group its own run (8 bytes) with four weights (32 bytes).
  const detectorBytes = groupsPerPosition * 40 + nPositions * 8 + 64;
  let reserved = RESERVED_DETECTORS;
  const regionStart = roundUp(TILE_OFFSET + cubeBytes + OVER_READ_SLACK, 16);
  const bytesFor = (nDet: number) => regionStart + nDet * (16 + detectorBytes);
  const pages = pagesFor(bytesFor(reserved));
  if (pages > MAX_PAGES) throw new RangeError(`preview image: a ${qY}×${qX}×${pY}×${pX} cube needs more than the 4 GiB a 32-bit module can address`);
  // Shared, so the cube can be filled from other threads without a copy (the module is built
  // with shared memory, see scripts/build.mjs). A shared memory never detaches its views.
  const memory = new WebAssembly.Memory({ initial: pages, maximum: MAX_PAGES, shared: true });
  const instance = new WebAssembly.Instance(wasmModule, {
    env: {
      memory,
      abort: () => { throw new Error('preview image: WebAssembly kernel aborted'); },
    },
  });
  const run = instance.exports.previewImages as (cube: number, nPositions: number, nBins: number, table: number, nDet: number, out: number) => void;

  return {
    qY, qX, pY, pX,
    cube: () => new Float32Array(memory.buffer, TILE_OFFSET, nPositions * nBins),
    get sharedBuffer() { return memory.buffer as unknown as SharedArrayBuffer; },
    cubeByteOffset: TILE_OFFSET,

    images(binWeights: readonly Float64Array[]): Float64Array[] {
      const nDet = binWeights.length;
      binWeights.forEach((w, d) => {
        if (w.length !== nBins) throw new RangeError(`preview image: detector ${d} has ${w.length} bin weights, expected ${pY}×${pX} = ${nBins}`);
      });
      if (nDet === 0) return [];
      if (nDet > reserved) {
        const pagesNow = memory.buffer.byteLength / PAGE_BYTES;
        const wanted = pagesFor(bytesFor(nDet));
        if (wanted > MAX_PAGES) throw new RangeError(`preview image: ${nDet} detectors need more than 4 GiB of WebAssembly memory`);
        if (wanted > pagesNow) memory.grow(wanted - pagesNow);
        reserved = nDet;
      }
      const buf = memory.buffer;
      let cursor = regionStart;
      const take = (bytes: number) => { const at = cursor; cursor = roundUp(cursor + bytes, 16); return at; };
      const table = new Uint32Array(buf, take(nDet * 16), nDet * 4);
      binWeights.forEach((w, d) => {
        const { runs, weights } = groupRuns(w, d);
        const runsAt = take(runs.length * 4);
        const weightsAt = take(weights.length * 8);
        new Uint32Array(buf, runsAt, runs.length).set(runs);
        new Float64Array(buf, weightsAt, weights.length).set(weights);
        table.set([runs.length / 2, runsAt, weightsAt, 0], d * 4);
      });
      const out = take(nDet * nPositions * 8);
      run(TILE_OFFSET, nPositions, nBins, table.byteOffset, nDet, out);
      return binWeights.map((_, d) => new Float64Array(buf, out + d * nPositions * 8, nPositions).slice());
    },
  };
}

/** The plain JavaScript images from the same imager's cube (for tests and comparisons). */
export function previewImagesOf(imager: PreviewImager, binWeights: readonly Float64Array[]): Float64Array[] {
  return previewImages(imager.cube(), imager.qY, imager.qX, imager.pY, imager.pX, binWeights);
}

/**
 * The groups of four bins holding a nonzero weight, as runs (first group, groups), and the
 * weights of all their bins (zero where the detector does not reach).
 */
function groupRuns(w: Float64Array, d: number): { runs: number[]; weights: number[] } {
  const runs: number[] = [];
  const weights: number[] = [];
  const groups = Math.ceil(w.length / 4);
  for (let g = 0; g < groups; g++) {
    let used = false;
    for (let k = 4 * g; k < Math.min(w.length, 4 * g + 4); k++) {
      if (!Number.isFinite(w[k])) throw new RangeError(`preview image: detector ${d} has a non-finite bin weight ${w[k]} at bin ${k}`);
      if (w[k] !== 0) used = true;
    }
    if (!used) continue;
    const last = runs.length - 2;
    if (last >= 0 && runs[last] + runs[last + 1] === g) runs[last + 1]++;
    else runs.push(g, 1);
    for (let k = 4 * g; k < 4 * g + 4; k++) weights.push(k < w.length ? w[k] : 0);
  }
  return { runs, weights };
}

/** The last group of the last position may reach 3 bins past the cube. */
const OVER_READ_SLACK = 64;
const RESERVED_DETECTORS = 16;

