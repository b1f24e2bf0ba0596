/**
 * Virtual images from the preview cube, for the answer a detector drag gets at once.
 *
 * The cube is float32, C-order (qY, qX, pY, pX): at each binned scan position, detector-bin
 * sums averaged over the scan bin (see first-pass-types.ts). `binWeights` holds one pY × pX
 * array per detector: how much of each bin the detector covers (mostly zeros). The image of a
 * detector is Σ_bins w·cube at each of the qY × qX positions, in float64.
 *
 * Only the nonzero bins are visited — runs of consecutive ones, listed once per detector — and
 * positions are the outer loop, so each position's bins are read from memory once for all
 * detectors. This is the reference and the fallback: plain JavaScript streams a 256 MiB cube
 * at a few GB/s, so the engine answers drags with the WebAssembly version
 * (preview-image-wasm.ts), which keeps the cube in its own memory.
 */
export function previewImages(cube: Float32Array, qY: number, qX: number, pY: number, pX: number,
  binWeights: readonly Float64Array[]): Float64Array[] {
  checkPreviewShape(qY, qX, pY, pX);
  const nBins = pY * pX;
  const nPositions = qY * qX;
  if (cube.length !== nPositions * nBins) {
    throw new RangeError(`preview image: cube holds ${cube.length} values, expected ${qY}×${qX}×${pY}×${pX} = ${nPositions * nBins}`);
  }
  const lists = binWeights.map((w, d) => {
    if (w.length !== nBins) throw new RangeError(`preview image: detector ${d} has ${w.length} bin weights, expected ${pY}×${pX} = ${nBins}`);
    return binRuns(w, d);
  });
  const images = binWeights.map(() => new Float64Array(nPositions));

  for (let pos = 0, base = 0; pos < nPositions; pos++, base += nBins) {
    for (let d = 0; d < lists.length; d++) {
      const { first, length, weights } = lists[d];
      // Four sums, so that consecutive multiply-adds do not wait on each other.
      let s0 = 0, s1 = 0, s2 = 0, s3 = 0;
      for (let r = 0, k = 0; r < first.length; r++) {
        let i = base + first[r];
        const end = i + length[r];
        for (; i + 3 < end; i += 4, k += 4) {
          s0 += weights[k] * cube[i];
          s1 += weights[k + 1] * cube[i + 1];
          s2 += weights[k + 2] * cube[i + 2];
          s3 += weights[k + 3] * cube[i + 3];
        }
        for (; i < end; i++, k++) s0 += weights[k] * cube[i];
      }
      images[d][pos] = (s0 + s1) + (s2 + s3);
    }
  }
  return images;
}

export function checkPreviewShape(qY: number, qX: number, pY: number, pX: number): void {
  for (const [name, v] of [['qY', qY], ['qX', qX], ['pY', pY], ['pX', pX]] as const) {
    if (!Number.isInteger(v) || v < 1) throw new RangeError(`preview image: ${name} must be an integer ≥ 1, got ${v}`);
  }
}

/** Runs of consecutive nonzero bins (first bin, length) and their weights, packed in order. */
function binRuns(w: Float64Array, d: number): { first: Int32Array; length: Int32Array; weights: Float64Array } {
  const first: number[] = [];
  const length: number[] = [];
  const weights: number[] = [];
  for (let i = 0; i < w.length; i++) {
    if (!Number.isFinite(w[i])) throw new RangeError(`preview image: detector ${d} has a non-finite bin weight ${w[i]} at bin ${i}`);
    if (w[i] === 0) continue;
    if (i > 0 && w[i - 1] !== 0) length[length.length - 1]++;
    else { first.push(i); length.push(1); }
    weights.push(w[i]);
  }
  return { first: Int32Array.from(first), length: Int32Array.from(length), weights: Float64Array.from(weights) };
}
