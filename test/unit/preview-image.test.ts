import { beforeAll, describe, expect, it } from 'vitest';
import type { CompiledDetector } from '../../src-shared/model/detectors';
import { previewImages } from '../../src-shared/compute/preview-image';
import { createWasmPreviewImager, previewImagesOf } from '../../src-shared/compute/preview-image-wasm';
import { virtualImagesReference } from '../../src-shared/compute/virtual-image';
import { loadWasmModule } from '../../src-main/workers/wasm-loader';
import { mulberry32 } from '../helpers/synthetic';

// Preview images against full-resolution virtual images, by an algebraic identity: when a tile
// is constant within each detector bin and each scan bin, binning loses nothing, so a detector
// with bin weights w_b = (Σ of its pixel weights in bin b) / (pixels in bin b) gives over the
// preview cube (bin sums averaged over scan bins) exactly the full-resolution image:
//   Σ_b w_b · n_b · f_b = Σ_b Σ_{p ∈ b} w_p · f_b = Σ_p w_p · I_p.
// All values below are small integers and dyadic fractions, so float64 holds every step exactly.

let wasmModule: WebAssembly.Module;
beforeAll(() => {
  wasmModule = loadWasmModule('preview-image');
});

// Scan 7 × 10 in scan bins of 2 (edge bins partial), detector 26 × 30 in detector bins of 4
// (edge bins 2 pixels wide).
const scanY = 7, scanX = 10, scanBin = 2, detY = 26, detX = 30, detBin = 4;
const qY = Math.ceil(scanY / scanBin), qX = Math.ceil(scanX / scanBin);
const pY = Math.ceil(detY / detBin), pX = Math.ceil(detX / detBin);
const nPix = detY * detX;

/** A tile constant within each (scan bin × detector bin) block, and the preview cube binned from it. */
function blockConstantTile(seed: number): { tile: Float64Array; cube: Float32Array } {
  const rand = mulberry32(seed);
  const level = Array.from({ length: qY * qX * pY * pX }, () => Math.floor(rand() * 1000));
  const tile = new Float64Array(scanY * scanX * nPix);
  for (let r = 0; r < scanY; r++) for (let c = 0; c < scanX; c++) for (let y = 0; y < detY; y++) for (let x = 0; x < detX; x++) {
    const block = ((Math.floor(r / scanBin) * qX + Math.floor(c / scanBin)) * pY + Math.floor(y / detBin)) * pX + Math.floor(x / detBin);
    tile[((r * scanX + c) * detY + y) * detX + x] = level[block];
  }
  // The preview cube as the first pass defines it: per scan position the sum over each detector
  // bin, averaged over the positions of the scan bin.
  const sums = new Float64Array(qY * qX * pY * pX);
  const positions = new Float64Array(qY * qX);
  for (let r = 0; r < scanY; r++) for (let c = 0; c < scanX; c++) {
    const q = Math.floor(r / scanBin) * qX + Math.floor(c / scanBin);
    positions[q]++;
    for (let y = 0; y < detY; y++) for (let x = 0; x < detX; x++) {
      sums[(q * pY + Math.floor(y / detBin)) * pX + Math.floor(x / detBin)] += tile[((r * scanX + c) * detY + y) * detX + x];
    }
  }
  const cube = Float32Array.from(sums, (s, i) => s / positions[Math.floor(i / (pY * pX))]);
  return { tile, cube };
}

/** w_b = (Σ of the detector's pixel weights in bin b) / (pixels in bin b). */
function binWeightsOf(det: CompiledDetector): Float64Array {
  const w = new Float64Array(pY * pX);
  const n = new Float64Array(pY * pX);
  for (let i = 0; i < nPix; i++) {
    const b = Math.floor(Math.floor(i / detX) / detBin) * pX + Math.floor((i % detX) / detBin);
    n[b]++;
  }
  const add = (i: number, v: number) => { w[Math.floor(Math.floor(i / detX) / detBin) * pX + Math.floor((i % detX) / detBin)] += v; };
  if (det.mode === 'indices') det.indices.forEach((i) => add(i, 1));
  else det.weights.forEach((v, i) => add(i, v));
  return w.map((v, b) => v / n[b]);
}

function detectors(): CompiledDetector[] {
  const annulus: number[] = [];
  for (let i = 0; i < nPix; i++) {
    const r2 = ((i % detX) - 14.5) ** 2 + (Math.floor(i / detX) - 12.5) ** 2;
    if (r2 >= 16 && r2 <= 120) annulus.push(i);
  }
  const weights = Float64Array.from({ length: nPix }, (_, i) => ((i % detX) < 9 ? ((i % 8) + 1) / 8 : 0));
  return [
    { mode: 'indices', indices: Uint32Array.from(annulus), detY, detX, label: 'annulus' },
    { mode: 'indices', indices: Uint32Array.from({ length: nPix }, (_, i) => i), detY, detX, label: 'everything' },
    { mode: 'weights', weights, detY, detX, label: 'graded band' },
  ];
}

describe('preview images', () => {
  it('equal the full-resolution images exactly when the data is constant within each bin', () => {
    const { tile, cube } = blockConstantTile(1);
    const dets = detectors();
    const full = virtualImagesReference(tile, scanY * scanX, detY, detX, dets).images;
    const binWeights = dets.map(binWeightsOf);
    const imager = createWasmPreviewImager(wasmModule, qY, qX, pY, pX);
    imager.cube().set(cube);
    const results: [string, Float64Array[]][] = [
      ['plain JS', previewImages(cube, qY, qX, pY, pX, binWeights)],
      ['WASM', imager.images(binWeights)],
    ];
    for (const [name, images] of results) {
      dets.forEach((det, d) => {
        for (let r = 0; r < scanY; r++) for (let c = 0; c < scanX; c++) {
          // reference: algebraic identity (see the top of this file) — any position of a scan bin
          // shows the full-resolution image of that bin
          const q = Math.floor(r / scanBin) * qX + Math.floor(c / scanBin);
          expect(images[d][q], `${name}, ${det.label}, scan (${r}, ${c})`).toBe(full[d * scanY * scanX + r * scanX + c]);
        }
      });
    }
  });

  it('WASM and plain JS agree on random cubes, bins not a multiple of four, many detectors', () => {
    const rand = mulberry32(2);
    for (const [qy, qx, py, px] of [[9, 11, 5, 7], [4, 4, 32, 32], [1, 1, 1, 3], [3, 2, 2, 2]]) {
      const imager = createWasmPreviewImager(wasmModule, qy, qx, py, px);
      imager.cube().set(Float32Array.from({ length: qy * qx * py * px }, () => rand() * 1e4));
      const binWeights = Array.from({ length: 19 }, () => Float64Array.from({ length: py * px }, () => (rand() < 0.6 ? 0 : rand())));
      binWeights.push(new Float64Array(py * px)); // a detector that covers nothing
      const wasm = imager.images(binWeights);
      const js = previewImagesOf(imager, binWeights);
      wasm.forEach((image, d) => image.forEach((v, i) => {
        // Positive sums in a different order: float64 rounding only.
        expect(Math.abs(v - js[d][i]), `${qy}×${qx}×${py}×${px}, detector ${d}, position ${i}`).toBeLessThanOrEqual(1e-12 * Math.max(1, js[d][i]));
      }));
      expect(wasm[19].every((v) => v === 0)).toBe(true);
    }
  });

  it('rejects weights and cubes of the wrong size', () => {
    const cube = new Float32Array(2 * 3 * 4 * 5);
    expect(() => previewImages(cube, 2, 3, 4, 5, [new Float64Array(19)])).toThrow(/20 \(|4×5 = 20/);
    expect(() => previewImages(cube, 2, 3, 4, 4, [])).toThrow(/cube holds 120 values/);
    expect(() => previewImages(cube, 2, 3, 4, 5, [new Float64Array(20).fill(NaN)])).toThrow(/non-finite/);
    const imager = createWasmPreviewImager(wasmModule, 2, 3, 4, 5);
    expect(() => imager.images([new Float64Array(21)])).toThrow(/expected 4×5 = 20/);
  });
});
