/**
 * Virtual images from the preview cube, for the answer a detector drag gets at once.
 *
 * The cube is float32, C-order (qY, qX, pY, pX): at each binned scan position, detector-bin
 * sums averaged over the scan bin (see first-pass-types.ts). `binWeights` holds one pY × pX
 * array per detector: how much of each bin the detector covers (mostly zeros). The image of a
 * detector is Σ_bins w·cube at each of the qY × qX positions, in float64.
 *
 * Speed: only the nonzero bins are visited (a list built once per detector), and positions are
 * the outer loop, so each position's pY·pX bins are read from memory once for all detectors.
 */
export function previewImages(cube: Float32Array, qY: number, qX: number, pY: number, pX: number,
  binWeights: readonly Float64Array[]): Float64Array[] {
  for (const [name, v] of [['qY', qY], ['qX', qX], ['pY', pY], ['pX', pX]] as const) {
    if (!Number.isInteger(v) || v < 1) throw new RangeError(`preview image: ${name} must be an integer ≥ 1, got ${v}`);
  }
  const nBins = pY * pX;
  const nPositions = qY * qX;
  if (cube.length !== nPositions * nBins) {
    throw new RangeError(`preview image: cube holds ${cube.length} values, expected ${qY}×${qX}×${pY}×${pX} = ${nPositions * nBins}`);
  }
  const lists = binWeights.map((w, d) => {
    if (w.length !== nBins) throw new RangeError(`preview image: detector ${d} has ${w.length} bin weights, expected ${pY}×${pX} = ${nBins}`);
    return sparseBins(w, d);
  });
  const images = binWeights.map(() => new Float64Array(nPositions));

  for (let pos = 0, base = 0; pos < nPositions; pos++, base += nBins) {
    for (let d = 0; d < lists.length; d++) {
      const { bins, weights } = lists[d];
      let s0 = 0, s1 = 0;
      const n = bins.length;
      let k = 0;
      // Two sums so consecutive multiply-adds do not wait on each other.
      for (; k + 1 < n; k += 2) {
        s0 += weights[k] * cube[base + bins[k]];
        s1 += weights[k + 1] * cube[base + bins[k + 1]];
      }
      if (k < n) s0 += weights[k] * cube[base + bins[k]];
      images[d][pos] = s0 + s1;
    }
  }
  return images;
}

function sparseBins(w: Float64Array, d: number): { bins: Int32Array; weights: Float64Array } {
  let n = 0;
  for (let i = 0; i < w.length; i++) {
    if (!Number.isFinite(w[i])) throw new RangeError(`preview image: detector ${d} has a non-finite bin weight ${w[i]} at bin ${i}`);
    if (w[i] !== 0) n++;
  }
  const bins = new Int32Array(n);
  const weights = new Float64Array(n);
  for (let i = 0, k = 0; i < w.length; i++) {
    if (w[i] !== 0) { bins[k] = i; weights[k] = w[i]; k++; }
  }
  return { bins, weights };
}
