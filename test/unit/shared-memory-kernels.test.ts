import { beforeAll, describe, expect, it } from 'vitest';
import { isFloatDType, type DType } from '../../src-shared/model/dtype';
import type { CompiledDetector } from '../../src-shared/model/detectors';
import type { FirstPassGeometry } from '../../src-shared/compute/first-pass-types';
import { firstPassReference } from '../../src-shared/compute/first-pass';
import { createWasmFirstPassKernel } from '../../src-shared/compute/first-pass-wasm';
import { comSumsReference } from '../../src-shared/compute/com';
import { createWasmComKernel } from '../../src-shared/compute/com-wasm';
import { virtualImagesReference } from '../../src-shared/compute/virtual-image';
import { createWasmVirtualImageKernel } from '../../src-shared/compute/virtual-image-wasm';
import { loadWasmModule } from '../../src-main/workers/wasm-loader';
import { mulberry32, randomTile, binary, weighted, absTile, expectAll } from '../helpers/synthetic';

// A worker hands one WebAssembly memory to all its kernels, and a first-pass tile runs three of
// them on the same tile: the first pass, the COM sums, the default images. Every tile of a pass
// sends the same mask and detectors again (a fresh copy, as a message does); the COM and image
// kernels then keep what they prepared and write it back before each run, because the kernel
// that ran before them used the same space after the tile. Each tile's results must still equal
// the TypeScript twins (themselves held to NumPy in test/reference/).

let modules: Record<'first-pass' | 'com' | 'virtual-image', WebAssembly.Module>;
beforeAll(() => {
  modules = { 'first-pass': loadWasmModule('first-pass'), com: loadWasmModule('com'), 'virtual-image': loadWasmModule('virtual-image') };
});

/** A message's copy of a detector: equal contents, new arrays. */
function copied(det: CompiledDetector): CompiledDetector {
  return det.mode === 'indices' ? { ...det, indices: det.indices.slice() } : { ...det, weights: det.weights.slice() };
}

describe('kernels sharing one memory, tile after tile with the same options', () => {
  for (const dtype of ['uint16', 'float32'] as DType[]) {
    it(`${dtype}: first pass, COM sums and images on every tile equal the twins`, () => {
      const detY = 24, detX = 29, scanX = 5, nRows = 2, nPatterns = nRows * scanX;
      const g: FirstPassGeometry = { scanX, detY, detX, detBin: 2, scanBin: 1 };
      const memory = new WebAssembly.Memory({ initial: 1 });
      const fp = createWasmFirstPassKernel(modules['first-pass'], 0, memory);
      const ck = createWasmComKernel(modules.com, 0, {}, memory);
      const vk = createWasmVirtualImageKernel(modules['virtual-image'], 0, {}, memory);
      const rand = mulberry32(7);
      const cx = detX / 2, cy = detY / 2;
      // The COM mask: the whole detector less scattered pixels (as the pass's, less suspect pixels).
      const comMask = binary(detY, detX, () => rand() > 0.05, 'detector less suspect pixels');
      const detectors = [
        binary(detY, detX, (x, y) => (x - cx) ** 2 + (y - cy) ** 2 <= 36, 'bright field'),
        binary(detY, detX, (x, y) => { const r2 = (x - cx) ** 2 + (y - cy) ** 2; return r2 > 49 && r2 <= 121; }, 'annulus'),
        weighted(detY, detX, (x) => (x < 10 ? 0.5 : 0), 'weighted strip'),
      ];
      for (let t = 0; t < 4; t++) {
        const tile = randomTile(dtype, nPatterns * detY * detX, 100 + t);
        // Tile 2 changes the mask and drops a detector, tile 3 returns to the first ones.
        const mask = t === 2 ? binary(detY, detX, (x) => x > 3, 'other mask') : comMask;
        const dets = t === 2 ? detectors.slice(1) : detectors;

        fp.tileBuffer(dtype, tile.length).set(tile as never);
        const f = fp.run(dtype, nRows, g);
        const fWant = firstPassReference(tile, nRows, g);
        expectAll(`tile ${t}: first-pass sum`, f.sum, fWant.sum, (a, b) => (isFloatDType(dtype) ? Math.abs(a - b) <= 1e-9 * Math.abs(b) : a === b));

        ck.setOptions({ mask: copied(mask), threshold: 0 }, detY, detX);
        ck.tileBuffer(dtype, tile.length);
        const c = ck.run(dtype, nPatterns);
        const cWant = comSumsReference(tile, nPatterns, detY, detX, { mask, threshold: 0 });
        const scale = comSumsReference(absTile(tile), nPatterns, detY, detX, { mask, threshold: 0 });
        for (const key of ['total', 'sumX', 'sumY'] as const) {
          expectAll(`tile ${t}: COM ${key}`, c[key], cWant[key], (a, b, i) => Math.abs(a - b) <= 1e-12 * scale[key][i]);
        }

        vk.setDetectors(dets.map(copied));
        vk.tileBuffer(dtype, tile.length);
        const v = vk.run(dtype, nPatterns);
        const vWant = virtualImagesReference(tile, nPatterns, detY, detX, dets);
        expect(v.images.length).toBe(vWant.images.length);
        const vScale = virtualImagesReference(absTile(tile), nPatterns, detY, detX, dets);
        expectAll(`tile ${t}: images`, v.images, vWant.images, (a, b, i) => Math.abs(a - b) <= 1e-12 * vScale.images[i]);
      }
    });
  }
});
