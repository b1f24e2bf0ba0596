/**
 * PCA of N feature vectors (rows) by randomized SVD of the mean-centred matrix (see
 * randomized-svd.ts), with the data supplied pass by pass: `pass(Z, centre)` must stream every
 * row block through rangeBlock (or its fast twin) and return the stacked rows of Y, the summed
 * W, column sums and sum of squares. The same driver runs over the preview cube in memory and
 * over a dataset on disk through the worker pool.
 */
import { coRangeRows, finishRandomizedSvd, gaussianMatrix, orthonormalize, rangeBlock, svdOfProjection, type RandomizedSvd, type RangeBlock } from './randomized-svd';

export interface PcaOptions {
  /** Components wanted (k). */
  components: number;
  /** Extra sketch columns (p): l = k + p. */
  oversample: number;
  /** Power iterations (q): the data are read q + 1 times. */
  powerIterations: number;
  seed: number;
  /**
   * One pass only: the range sketch Y = C·Ω and a co-range sketch W = Ψ·C (Ψ: s × N, s = 2l + 1)
   * are formed together and the approximation C ≈ Q·X, X = (Ψ·Q)⁺·W, is taken from them (Tropp,
   * Yurtsever, Udell & Cevher, SIAM J. Matrix Anal. Appl. 38(4), 2017); powerIterations is ignored.
   */
  onePass?: boolean;
  /** false: the SVD of the data as they are, the mean left in (default true: mean-centred). */
  centre?: boolean;
  /**
   * A centre known before the first pass (e.g. the mean of a sample of rows), taken out of the
   * rows during it, so that its products (float32 in the WebAssembly kernel) work on rows near
   * the mean rather than on rows the mean dominates; the exact mean, known only after that pass,
   * then corrects the provisional one (see randomizedPca). Ignored when not centring.
   */
  provisionalCentre?: Float64Array | null;
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

/** A pass: Y = C·Z, and W = Cᵀ·Y, or with `coRange` W = Cᵀ·Ψᵀ (Ψᵀ rows from coRangeRows(…, s, seed)). */
export type PcaPass = (z: Float64Array, centre: Float64Array | null, coRange?: { s: number; seed: number }) => Promise<PassSums>;

export async function randomizedPca(pass: PcaPass, n: number, d: number, o: PcaOptions): Promise<PcaResult> {
  if (o.onePass) return onePassPca(pass, n, d, o);
  const k = o.components;
  const l = Math.min(k + o.oversample, n, d);
  const centred = o.centre !== false;
  let z = gaussianMatrix(d, l, o.seed);
  const provisional = provisionalCentreOf(o, d);
  let r = await pass(z, provisional);
  const mean = r.colSum.map((s) => s / n);
  let meanSq = 0;
  if (centred) {
    // The first pass took out the provisional centre μ̂ (or none: μ̂ = 0), B = A − 1·μ̂ᵀ; with
    // δ = μ − μ̂ the centred matrix is C = B − 1·δᵀ, and since Bᵀ·1 = N·δ:
    // C·Ω = B·Ω − 1·(δᵀΩ), CᵀC·Ω = BᵀB·Ω − N·δ·(δᵀΩ), Σ‖C_i‖² = Σ‖B_i‖² − N·‖δ‖².
    const delta = leftToCentre(mean, provisional);
    const muZ = new Float64Array(l);
    for (let j = 0; j < d; j++) for (let c = 0; c < l; c++) muZ[c] += delta[j] * z[j * l + c];
    for (let i = 0; i < n; i++) for (let c = 0; c < l; c++) r.y[i * l + c] -= muZ[c];
    for (let j = 0; j < d; j++) for (let c = 0; c < l; c++) r.w[j * l + c] -= n * delta[j] * muZ[c];
    for (let j = 0; j < d; j++) meanSq += delta[j] * delta[j];
  }
  // Uncentred, the "total variance" is the total sum of squares the components share.
  let totalVariance = r.sumSq - n * meanSq;
  let totalVarianceFrom: PcaResult['totalVarianceFrom'] = 'the uncentred sums of the only pass';
  let passes = 1;
  for (let it = 0; it < o.powerIterations; it++) {
    z = orthonormalize(r.w, d, l).q;
    r = await pass(z, centred ? mean : null);
    passes++;
    totalVariance = r.sumSq;
    totalVarianceFrom = centred ? 'a centred pass' : 'the uncentred sums of the only pass';
  }
  const svd = await finishRandomizedSvd(r.y, r.w, n, d, l, k);
  return pcaFromSvd(svd, n, d, mean, totalVariance, { sketch: l, passes, totalVarianceFrom });
}

/** Components (k × D), loadings U·σ (k × N) and explained variance from the rank-k SVD. */
function pcaFromSvd(svd: RandomizedSvd, n: number, d: number, mean: Float64Array, totalVariance: number,
  how: Pick<PcaResult, 'sketch' | 'passes' | 'totalVarianceFrom'>): PcaResult {
  const kk = svd.k;
  const components = new Float64Array(kk * d);
  const loadings = new Float64Array(kk * n);
  for (let c = 0; c < kk; c++) {
    for (let j = 0; j < d; j++) components[c * d + j] = svd.v[j * kk + c];
    for (let i = 0; i < n; i++) loadings[c * n + i] = svd.u[i * kk + c] * svd.singularValues[c];
  }
  return {
    singularValues: svd.singularValues,
    explainedVarianceRatio: svd.singularValues.map((x) => (totalVariance > 0 ? (x * x) / totalVariance : 0)),
    totalVariance, components, loadings, mean, k: kk, ...how,
  };
}

async function onePassPca(pass: PcaPass, n: number, d: number, o: PcaOptions): Promise<PcaResult> {
  const k = o.components;
  const l = Math.min(k + o.oversample, n, d);
  const s = Math.min(2 * l + 1, n);
  const z = gaussianMatrix(d, l, o.seed);
  const provisional = provisionalCentreOf(o, d);
  const r = await pass(z, provisional, { s, seed: o.seed });
  const mean = r.colSum.map((v) => v / n);
  const centred = o.centre !== false;
  // As in randomizedPca: the pass took out μ̂; δ = μ − μ̂ is what is left to take out.
  const delta = leftToCentre(mean, provisional);
  const muZ = new Float64Array(l);
  if (centred) {
    for (let j = 0; j < d; j++) for (let c = 0; c < l; c++) muZ[c] += delta[j] * z[j * l + c];
    for (let i = 0; i < n; i++) for (let c = 0; c < l; c++) r.y[i * l + c] -= muZ[c];
  }
  const { q, rank } = orthonormalize(r.y, n, l);
  // Ψ·1 (s) and Ψ·Q (s × l), regenerating Ψ's rows position by position.
  const psiSum = new Float64Array(s);
  const psiQ = new Float64Array(s * l);
  const CHUNK = 4096;
  for (let p0 = 0; p0 < n; p0 += CHUNK) {
    const p1 = Math.min(n, p0 + CHUNK);
    const rows = coRangeRows(p0, p1, s, o.seed);
    for (let p = p0; p < p1; p++) {
      const pr = (p - p0) * s;
      for (let a = 0; a < s; a++) {
        const v = rows[pr + a];
        psiSum[a] += v;
        for (let c = 0; c < l; c++) psiQ[a * l + c] += v * q[p * l + c];
      }
    }
  }
  // Centred co-range sketch, transposed: Wc (d × s) = W − μ·(Ψ·1)ᵀ.
  const wc = r.w;
  if (centred) for (let j = 0; j < d; j++) for (let a = 0; a < s; a++) wc[j * s + a] -= delta[j] * psiSum[a];
  // X = (Ψ·Q)⁺·Wcᵀ: with Ψ·Q·T = Qψ orthonormal, X = T·Qψᵀ·Wcᵀ; we need Xᵀ = Wc·Qψ·Tᵀ (d × l).
  const { q: qpsi, t } = orthonormalize(psiQ, s, l);
  const wq = new Float64Array(d * l);
  for (let j = 0; j < d; j++) for (let c = 0; c < l; c++) { let acc = 0; for (let a = 0; a < s; a++) acc += wc[j * s + a] * qpsi[a * l + c]; wq[j * l + c] = acc; }
  const xt = new Float64Array(d * l);
  for (let j = 0; j < d; j++) for (let c = 0; c < l; c++) { let acc = 0; for (let e = 0; e < l; e++) acc += wq[j * l + e] * t[c * l + e]; xt[j * l + c] = acc; }
  const svd = await svdOfProjection(q, xt, n, d, l, k, rank);
  let meanSq = 0;
  if (centred) for (let j = 0; j < d; j++) meanSq += delta[j] * delta[j];
  const totalVariance = r.sumSq - n * meanSq;
  return pcaFromSvd(svd, n, d, mean, totalVariance, { sketch: l, passes: 1, totalVarianceFrom: 'the uncentred sums of the only pass' });
}

/** δ = μ − μ̂: what is left to take out of a pass that took out μ̂ (μ itself after none). */
function leftToCentre(mean: Float64Array, provisional: Float64Array | null): Float64Array {
  return provisional ? mean.map((m, j) => m - provisional[j]) : mean;
}

/** The provisional centre of the first pass: only when centring, checked for its length. */
function provisionalCentreOf(o: PcaOptions, d: number): Float64Array | null {
  if (o.centre === false || !o.provisionalCentre) return null;
  if (o.provisionalCentre.length !== d) throw new RangeError(`PCA: the provisional centre holds ${o.provisionalCentre.length} values, expected ${d}`);
  return o.provisionalCentre;
}

/**
 * Positions on a grid of at most side × side over a scanY × scanX scan (row-major indices): where
 * to sample rows for a provisional centre, spread over both scan directions.
 */
export function sampleGrid(scanY: number, scanX: number, side = 8): number[] {
  const sy = Math.min(side, scanY), sx = Math.min(side, scanX);
  const out: number[] = [];
  for (let i = 0; i < sy; i++) for (let j = 0; j < sx; j++) out.push(Math.floor(((i + 0.5) * scanY) / sy) * scanX + Math.floor(((j + 0.5) * scanX) / sx));
  return out;
}

/** The mean of the feature vectors of `rows` (`features(i, out)` writes row i's): a provisional centre. */
export function meanOfRows(rows: number[], d: number, features: (i: number, out: Float64Array) => void): Float64Array {
  const mean = new Float64Array(d);
  const row = new Float64Array(d);
  for (const i of rows) {
    features(i, row);
    for (let j = 0; j < d; j++) mean[j] += row[j];
  }
  for (let j = 0; j < d; j++) mean[j] /= Math.max(1, rows.length);
  return mean;
}

/** The pass over rows held in memory (n × d, row-major), in blocks of `blockRows`: the preview cube, tests. */
export function inMemoryPass(a: Float64Array, n: number, d: number, blockRows = 256): PcaPass {
  return async (z, centre, coRange) => {
    const l = z.length / d;
    const wl = coRange ? coRange.s : l;
    const y = new Float64Array(n * l);
    const w = new Float64Array(d * wl);
    const colSum = new Float64Array(d);
    let sumSq = 0;
    for (let i0 = 0; i0 < n; i0 += blockRows) {
      const m = Math.min(blockRows, n - i0);
      const b = rangeBlock(a.subarray(i0 * d, (i0 + m) * d), m, d, z, l, centre,
        coRange ? { rows: coRangeRows(i0, i0 + m, coRange.s, coRange.seed), s: coRange.s } : undefined);
      y.set(b.y, i0 * l);
      for (let x = 0; x < w.length; x++) w[x] += b.w[x];
      for (let j = 0; j < d; j++) colSum[j] += b.colSum[j];
      sumSq += b.sumSq;
    }
    return { y, w, colSum, sumSq };
  };
}
