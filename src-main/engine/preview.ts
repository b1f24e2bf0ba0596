import type { CompiledDetector } from '../../src-shared/model/detectors';
import { binDetectorWeights } from '../../src-shared/compute/detector-masks';
import { previewImages } from '../../src-shared/compute/preview-image';
import type { PreviewCube } from './first-pass';

/**
 * Instant answers while a detector is dragged: virtual images from the preview cube (on this
 * thread, no pass over the data). The detector is mapped onto the detector bins; each value is
 * in the same units as the exact image (detector-bin sums), at the preview's scan binning.
 */
export function previewDetectorImages(cube: PreviewCube, detectors: CompiledDetector[]): { images: Float64Array[]; qY: number; qX: number; scanBin: number } {
  const weights = detectors.map((d) => binDetectorWeights(d, cube.detBin));
  const images = cube.imager ? cube.imager.images(weights) : previewImages(cube.data, cube.qY, cube.qX, cube.pY, cube.pX, weights);
  return { images, qY: cube.qY, qX: cube.qX, scanBin: cube.scanBin };
}
