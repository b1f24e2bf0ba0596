/**
 * Patterns made into feature vectors for the statistics over all patterns (PCA, k-means,
 * reference fit): the detector cropped to a rectangle, binned by 1, 2, 4 or 8, bins holding a
 * bad pixel left out, then optionally each pattern divided by its total, then scaled:
 *   none     the binned counts;
 *   sqrt     √max(v, 0), which makes Poisson noise about equally strong at every level
 *            (common practice, variance-stabilising);
 *   poisson  v / √(g_i · h_j), g_i the mean of pattern i and h_j the mean of feature j over all
 *            patterns (Keenan & Kotula, Surf. Interface Anal. 36 (2004)), which weights every
 *            element by its expected Poisson noise.
 * Feature j is binned pixel (fy, fx) of the cropped detector, in row-major order, skipping the
 * bins left out; `binOf` maps back.
 */
import { InputError } from '../model/errors';
import type { NumericArray } from '../model/dtype';

export type FeatureScaling = 'none' | 'sqrt' | 'poisson';

export interface FeatureRequest {
  /** Detector binning, 1, 2, 4 or 8. */
  bin: number;
  /** Detector pixels kept, inclusive (x column, y row); default the whole detector. */
  crop?: { x0: number; y0: number; x1: number; y1: number };
  scaling: FeatureScaling;
  /** Divide each pattern by its total (after binning) before scaling. */
  normalize: boolean;
}

export interface FeaturePlan {
  detY: number;
  detX: number;
  bin: number;
  /** The crop actually used: the request's, trimmed to whole bins. */
  crop: { x0: number; y0: number; x1: number; y1: number };
  /** Binned size of the cropped detector. */
  outY: number;
  outX: number;
  /** Feature index of every detector pixel, −1 where it is outside the crop or in a bin left out. */
  pixelFeature: Int32Array;
  /** Binned pixel (fy · outX + fx) of every feature. */
  binOf: Int32Array;
  nFeatures: number;
  /** Bins left out because they hold a bad pixel. */
  binsLeftOut: number;
  scaling: FeatureScaling;
  normalize: boolean;
  /** Poisson scaling: 1 / √h_j per feature; null otherwise. */
  columnScale: Float64Array | null;
}

export const FEATURE_BINS = [1, 2, 4, 8] as const;

/**
 * The plan for a detector of detY × detX. `bad` (one byte per pixel) marks pixels whose bin is
 * left out; `meanPattern` (the mean over all positions, per pixel) is needed for Poisson scaling.
 */
export function planFeatures(req: FeatureRequest, detY: number, detX: number, bad: Uint8Array | null, meanPattern: ArrayLike<number> | null): FeaturePlan {
  if (!(FEATURE_BINS as readonly number[]).includes(req.bin)) throw new InputError(`binning: expected 1, 2, 4 or 8, got ${req.bin}`, 'bad-request');
  const c = req.crop ?? { x0: 0, y0: 0, x1: detX - 1, y1: detY - 1 };
  for (const [name, v, hi] of [['x0', c.x0, detX - 1], ['x1', c.x1, detX - 1], ['y0', c.y0, detY - 1], ['y1', c.y1, detY - 1]] as const) {
    if (!Number.isInteger(v) || v < 0 || v > hi) {
      throw new InputError(`crop: ${name} = ${v} is ${Number.isInteger(v) ? `outside the ${detY}×${detX} detector` : 'not a whole pixel index'}; expected a whole pixel index from 0 to ${hi}`, 'bad-request');
    }
  }
  if (c.x1 < c.x0 || c.y1 < c.y0) throw new InputError(`crop: x0..x1 = ${c.x0}..${c.x1}, y0..y1 = ${c.y0}..${c.y1} is empty; expected x0 ≤ x1 and y0 ≤ y1`, 'bad-request');
  const bin = req.bin;
  const outX = Math.floor((c.x1 - c.x0 + 1) / bin);
  const outY = Math.floor((c.y1 - c.y0 + 1) / bin);
  if (outX < 1 || outY < 1) {
    throw new InputError(`crop: ${c.x1 - c.x0 + 1}×${c.y1 - c.y0 + 1} px holds no whole ${bin}×${bin} bin; expected a larger crop or a smaller binning`, 'bad-request');
  }
  const crop = { x0: c.x0, y0: c.y0, x1: c.x0 + outX * bin - 1, y1: c.y0 + outY * bin - 1 };
  if (req.scaling === 'poisson' && req.normalize) {
    throw new InputError('scaling: Poisson weighting divides by the expected counts, which dividing each pattern by its total no longer are; expected --normalize or --scaling poisson, not both', 'bad-request');
  }
  const dropped = new Uint8Array(outY * outX);
  if (bad) {
    for (let y = crop.y0; y <= crop.y1; y++) {
      for (let x = crop.x0; x <= crop.x1; x++) if (bad[y * detX + x]) dropped[Math.floor((y - crop.y0) / bin) * outX + Math.floor((x - crop.x0) / bin)] = 1;
    }
  }
  const featureOfBin = new Int32Array(outY * outX).fill(-1);
  const binOfList: number[] = [];
  for (let b = 0; b < outY * outX; b++) if (!dropped[b]) { featureOfBin[b] = binOfList.length; binOfList.push(b); }
  const nFeatures = binOfList.length;
  if (nFeatures === 0) throw new InputError('every detector bin in the crop holds a bad pixel; expected at least one good bin (a larger crop, a smaller binning, or leave bad pixels in)', 'bad-request');
  const pixelFeature = new Int32Array(detY * detX).fill(-1);
  for (let y = crop.y0; y <= crop.y1; y++) {
    for (let x = crop.x0; x <= crop.x1; x++) pixelFeature[y * detX + x] = featureOfBin[Math.floor((y - crop.y0) / bin) * outX + Math.floor((x - crop.x0) / bin)];
  }
  let columnScale: Float64Array | null = null;
  if (req.scaling === 'poisson') {
    if (!meanPattern) throw new Error('planFeatures: Poisson scaling needs the mean pattern');
    const h = new Float64Array(nFeatures);
    for (let i = 0; i < pixelFeature.length; i++) if (pixelFeature[i] >= 0) h[pixelFeature[i]] += meanPattern[i];
    columnScale = h.map((v) => (v > 0 ? 1 / Math.sqrt(v) : 0));
  }
  return {
    detY, detX, bin, crop, outY, outX, pixelFeature, binOf: Int32Array.from(binOfList), nFeatures,
    binsLeftOut: outY * outX - nFeatures, scaling: req.scaling, normalize: req.normalize, columnScale,
  };
}

/**
 * Feature vectors of `nPatterns` patterns of a tile (C-order patterns × detY × detX) into `out`
 * (nPatterns × nFeatures, row-major). Non-finite values are counted and left out (the caller
 * refuses data that has any); a pattern of zero total stays all zero.
 */
export function patternFeatures(tile: NumericArray, nPatterns: number, p: FeaturePlan, out: FeatureRows): { nonFinite: number; zeroPatterns: number } {
  const nPix = p.detY * p.detX;
  const d = p.nFeatures;
  if (out.length < nPatterns * d) throw new RangeError(`pattern features: output holds ${out.length} values, expected ${nPatterns * d}`);
  if (tile.length < nPatterns * nPix) throw new RangeError(`pattern features: tile holds ${tile.length} values, expected ${nPatterns * nPix}`);
  // Each pattern is binned densely (a column → bin table, no per-pixel branch for integer data),
  // then its kept bins are gathered: a bin holding a bad pixel is simply never gathered.
  const { x0, y0, x1, y1 } = p.crop;
  const width = x1 - x0 + 1;
  const colBin = new Int32Array(width);
  for (let x = 0; x < width; x++) colBin[x] = Math.floor(x / p.bin);
  const dense = new Float64Array(p.outY * p.outX);
  const binOf = p.binOf;
  const integer = !(tile instanceof Float32Array || tile instanceof Float64Array);
  let nonFinite = 0;
  let zeroPatterns = 0;
  const row = new Float64Array(d);
  for (let k = 0; k < nPatterns; k++) {
    dense.fill(0);
    const base = k * nPix;
    for (let y = y0; y <= y1; y++) {
      const binRow = Math.floor((y - y0) / p.bin) * p.outX;
      const src = base + y * p.detX + x0;
      if (integer) {
        for (let x = 0; x < width; x++) dense[binRow + colBin[x]] += tile[src + x];
      } else {
        for (let x = 0; x < width; x++) {
          const v = tile[src + x];
          if (v - v !== 0) { if (p.pixelFeature[y * p.detX + x0 + x] >= 0) nonFinite++; continue; }
          dense[binRow + colBin[x]] += v;
        }
      }
    }
    for (let j = 0; j < d; j++) row[j] = dense[binOf[j]];
    if (finishFeatureRow(row, p)) zeroPatterns++;
    out.set(row, k * d);
  }
  return { nonFinite, zeroPatterns };
}

/**
 * Normalisation and scaling of one pattern's binned features, in place (see the top of this
 * file). Returns true when the pattern's features sum to zero (it is left all zero).
 */
function finishFeatureRow(row: Float64Array, p: FeaturePlan): boolean {
  const d = row.length;
  let total = 0;
  for (let j = 0; j < d; j++) total += row[j];
  if (total === 0) return true;
  if (p.normalize) for (let j = 0; j < d; j++) row[j] /= total;
  if (p.scaling === 'sqrt') {
    for (let j = 0; j < d; j++) row[j] = row[j] > 0 ? Math.sqrt(row[j]) : 0;
  } else if (p.scaling === 'poisson') {
    const g = total / d;
    if (!(g > 0)) { row.fill(0); return false; }
    const s = 1 / Math.sqrt(g);
    const h = p.columnScale!;
    for (let j = 0; j < d; j++) row[j] *= s * h[j];
  }
  return false;
}

/**
 * Rows of feature vectors: float64 for the plain reference, float32 for the products' kernel
 * (sketch-wasm.ts). Each vector is made in float64 and rounded once as it is stored.
 */
export type FeatureRows = Float64Array | Float32Array;

/**
 * Whether `featuresFromBins` can take this plan's features from detector-bin sums of the whole
 * detector binned from pixel (0, 0) (the first-pass kernel's preview rows): the crop must start
 * on that bin grid.
 */
export function binsAlignWithCrop(p: FeaturePlan): boolean {
  return p.crop.x0 % p.bin === 0 && p.crop.y0 % p.bin === 0;
}

/**
 * The same features as patternFeatures, from per-pattern sums of bin × bin detector pixels
 * (nPatterns × pY × pX, the whole detector binned from pixel (0, 0), as exact sums).
 */
export function featuresFromBins(bins: ArrayLike<number>, nPatterns: number, pY: number, pX: number, p: FeaturePlan, out: FeatureRows): { zeroPatterns: number } {
  if (!binsAlignWithCrop(p)) throw new Error('featuresFromBins: the crop does not start on the bin grid');
  const d = p.nFeatures;
  const by0 = p.crop.y0 / p.bin, bx0 = p.crop.x0 / p.bin;
  const src = new Int32Array(d);
  for (let j = 0; j < d; j++) {
    const b = p.binOf[j];
    src[j] = (by0 + Math.floor(b / p.outX)) * pX + bx0 + (b % p.outX);
  }
  // Every bin kept, in order (no crop, no bin left out): each pattern's bins are its features.
  let contiguous = true;
  for (let j = 0; j < d && contiguous; j++) contiguous = src[j] === src[0] + j;
  let zeroPatterns = 0;
  const row = new Float64Array(d);
  for (let k = 0; k < nPatterns; k++) {
    const base = k * pY * pX;
    if (contiguous && ArrayBuffer.isView(bins) && !(bins instanceof DataView)) row.set((bins as Float32Array).subarray(base + src[0], base + src[0] + d));
    else for (let j = 0; j < d; j++) row[j] = bins[base + src[j]];
    if (finishFeatureRow(row, p)) zeroPatterns++;
    out.set(row, k * d);
  }
  return { zeroPatterns };
}

/** A feature vector (or component) laid back on the binned, cropped detector; bins left out are NaN. */
export function featuresToImage(values: ArrayLike<number>, p: FeaturePlan): Float64Array {
  const img = new Float64Array(p.outY * p.outX).fill(Number.NaN);
  for (let j = 0; j < p.nFeatures; j++) img[p.binOf[j]] = values[j];
  return img;
}
