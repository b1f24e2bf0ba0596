/**
 * PCA of N feature vectors (rows) by randomized SVD of the mean-centred matrix (see
 * randomized-svd.ts), with the data supplied pass by pass: `pass(Z, centre)` must stream every
 * row block through rangeBlock (or its fast twin) and return the stacked rows of Y, the summed
 * W, column sums and sum of squares. The same driver runs over the preview cube in memory and
 * over a dataset on disk through the worker pool.
 */
import { finishRandomizedSvd, gaussianMatrix, orthonormalize, rangeBlock, type RangeBlock } from './randomized-svd';

export interface PcaOptions {
  /** Components wanted (k). */
  components: number;
  /** Extra sketch columns (p): l = k + p. */
  oversample: number;
  /** Power iterations (q): the data are read q + 1 times. */
  powerIterations: number;
  seed: number;
}

/** The whole-data sums of one pass: Y stacked over all rows (N × l), W summed (D × l). */
export type PassSums = RangeBlock;

export interface PcaResult {
  singularValues: Float64Array;
  /** σ² over the total variance Σ‖row − mean‖². */
  explainedVarianceRatio: Float64Array;
  totalVariance: number;
  /** k × D, row-major: component c is the unit vector of feature weights (largest entry positive). */
  components: Float64Array;
  /** k × N, row-major: each row's coordinate along component c (U·σ, the scores). */
  loadings: Float64Array;
  /** D: the mean feature vector, which was taken out. */
  mean: Float64Array;
  k: number;
  /** Sketch width l = k + oversampling (capped at min(N, D)). */
  sketch: number;
  passes: number;
  /** How the total variance was obtained. */
  totalVarianceFrom: 'a centred pass' | 'the uncentred sums of the only pass';
}

export async function randomizedPca(pass: (z: Float64Array, centre: Float64Array | null) => Promise<PassSums>, n: number, d: number, o: PcaOptions): Promise<PcaResult> {
  const k = o.components;
  const l = Math.min(k + o.oversample, n, d);
  let z = gaussianMatrix(d, l, o.seed);
  let r = await pass(z, null);
  const mean = r.colSum.map((s) => s / n);
  // Take the mean out of the uncentred pass: C·Ω = A·Ω − 1·(μᵀΩ), CᵀC·Ω = AᵀA·Ω − N·μ·(μᵀΩ).
  const muZ = new Float64Array(l);
  for (let j = 0; j < d; j++) for (let c = 0; c < l; c++) muZ[c] += mean[j] * z[j * l + c];
  for (let i = 0; i < n; i++) for (let c = 0; c < l; c++) r.y[i * l + c] -= muZ[c];
  for (let j = 0; j < d; j++) for (let c = 0; c < l; c++) r.w[j * l + c] -= n * mean[j] * muZ[c];
  let meanSq = 0;
  for (let j = 0; j < d; j++) meanSq += mean[j] * mean[j];
  let totalVariance = r.sumSq - n * meanSq;
  let totalVarianceFrom: PcaResult['totalVarianceFrom'] = 'the uncentred sums of the only pass';
  let passes = 1;
  for (let it = 0; it < o.powerIterations; it++) {
    z = orthonormalize(r.w, d, l).q;
    r = await pass(z, mean);
    passes++;
    totalVariance = r.sumSq;
    totalVarianceFrom = 'a centred pass';
  }
  const svd = finishRandomizedSvd(r.y, r.w, n, d, l, k);
  const kk = svd.k;
  const components = new Float64Array(kk * d);
  const loadings = new Float64Array(kk * n);
  for (let c = 0; c < kk; c++) {
    for (let j = 0; j < d; j++) components[c * d + j] = svd.v[j * kk + c];
    for (let i = 0; i < n; i++) loadings[c * n + i] = svd.u[i * kk + c] * svd.singularValues[c];
  }
  return {
    singularValues: svd.singularValues,
    explainedVarianceRatio: svd.singularValues.map((s) => (totalVariance > 0 ? (s * s) / totalVariance : 0)),
    totalVariance, components, loadings, mean, k: kk, sketch: l, passes, totalVarianceFrom,
  };
}

/** The pass over rows held in memory (n × d, row-major), in blocks of `blockRows`: the preview cube, tests. */
export function inMemoryPass(a: Float64Array, n: number, d: number, blockRows = 256): (z: Float64Array, centre: Float64Array | null) => Promise<PassSums> {
  return async (z, centre) => {
    const l = z.length / d;
    const y = new Float64Array(n * l);
    const w = new Float64Array(d * l);
    const colSum = new Float64Array(d);
    let sumSq = 0;
    for (let i0 = 0; i0 < n; i0 += blockRows) {
      const m = Math.min(blockRows, n - i0);
      const b = rangeBlock(a.subarray(i0 * d, (i0 + m) * d), m, d, z, l, centre);
      y.set(b.y, i0 * l);
      for (let x = 0; x < w.length; x++) w[x] += b.w[x];
      for (let j = 0; j < d; j++) colSum[j] += b.colSum[j];
      sumSq += b.sumSq;
    }
    return { y, w, colSum, sumSq };
  };
}
