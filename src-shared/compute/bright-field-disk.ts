import { InputError } from '../model/errors';
import { replaceBadPixels } from './bad-pixels';
import { median3, selectKth } from './select';

/**
 * Centre and radius of the bright-field disk on a mean pattern, to sub-pixel accuracy.
 *
 * Coordinates are detector pixels: x is the column, y the row, and pixel (y, x) has its centre at
 * the integer point (x, y), as for detectors (src-shared/model/detectors.ts).
 *
 * Method, and why: segmentation is good to a few tenths of a pixel only, so it seeds an area
 * measurement, which in turn seeds a least-squares fit of an exactly pixel-integrated disk to
 * the edge pixels, because only they carry the geometry (in synthetic tests with 50 counts/px
 * the fit halves the moments' error at radius 5 px). Edge positions found along rays would
 * need interpolation, which biases them by up to ~0.09 px at some sub-pixel phases.
 *  1. Flagged (`excludePixels`) and non-finite pixels are replaced by their neighbours' median;
 *     pixels that differ from the 3×3 median by more than 3/4 of the disk's contrast (isolated
 *     hot or dead pixels; no legitimate pixel steps that far from its own neighbourhood median)
 *     are replaced by it and left out of the fit.
 *  2. The 3×3-median-filtered pattern is thresholded halfway between its 10th percentile and its
 *     maximum. Halfway, not Otsu: Otsu's threshold drifts when the disk is a small fraction of the
 *     detector. The connected region with the largest summed signal is the disk (Bragg disks are
 *     weaker, hot pixels are gone after the median), and gives a first centre and radius.
 *  3. Around that circle, pixels nearer than r − w are taken as fully covered (coverage 1), pixels
 *     beyond r + w as empty (0), and band pixels by their level, c = (I − bg) / (plateau − bg),
 *     unclamped so that noise averages out instead of being rectified. The plateau is the
 *     trimmed mean of a ring just inside the band, the background that of a ring just outside
 *     it, so a smooth diffuse background is taken at the edge itself. Then πr² = Σc and the
 *     centre is the first moment of c. Three rounds (w = 3, 2, 1.5 px) converge; w stays wider
 *     than the previous error plus half a pixel diagonal, so the coverage 0/1 assumptions hold.
 *  4. The edge fit (see fitEdge) refines centre and radius, unless the edge is soft: the fit's
 *     model is a sharp edge, and a blurred one misfits it (measured: σ = 1 px Gaussian blur
 *     moves the fitted radius out by 0.1 px). The area is conserved by blur, so when the edge
 *     pixels misfit by more than twice what shot noise explains, the moments are kept (then
 *     within 0.01 px at σ ≤ 1 px; at σ = 2 px neither test nor fit is reliable: up to 0.13 px).
 *  5. Quality: `stepOverNoise` is the disk's step over the rms misfit of the pixels beside the
 *     edge (a noise level); `edgeConsistency` is the fraction of rays from the centre whose
 *     half-level crossing nearest the circle lies within 1 px of it. Too little of either means
 *     there is no disk (InputError).
 */
export interface BrightFieldDiskOptions {
  /** detY × detX, non-zero for pixels to ignore (e.g. the mask from findBadPixels). */
  excludePixels?: Uint8Array;
  /**
   * 'auto' (default): the edge fit, or the moments when the edge is soft. 'edge-fit': always the
   * fit (least noise, for a sharp edge). 'moments': always the area measurement, which blur does
   * not bias (blur conserves the area).
   */
  refine?: 'auto' | 'edge-fit' | 'moments';
}

export interface BrightFieldDisk {
  /** Centre column, detector px. */
  cx: number;
  /** Centre row, detector px. */
  cy: number;
  /** Radius, detector px. */
  r: number;
  /** Mean level just inside the edge, in pattern units. */
  plateau: number;
  /** Mean level just outside the edge, in pattern units. */
  background: number;
  /** Fraction (0–1) of radial edge samples whose half-level crossing lies within 1 px of the circle. */
  edgeConsistency: number;
  /** Root-mean-square distance (px) of the consistent edge crossings from the circle. */
  edgeRmsPx: number;
  /** Number of radial edge samples behind edgeConsistency. */
  edgeSamples: number;
  /** Fitted step (plateau − background) over the rms misfit of the pixels beside the edge (coverage 0 or 1), a signal-to-noise ratio: about 10 for a 50 counts/px plateau. */
  stepOverNoise: number;
  /** Which estimate is returned: 'edge-fit', or 'moments' when asked for, when the edge is soft, or when the fit did not converge. */
  method: 'edge-fit' | 'moments';
}

const PERCENTILE_LOW = 0.1;
const OUTLIER_FRACTION_OF_CONTRAST = 0.75;
const BAND_HALF_WIDTHS_PX = [3, 2, 1.5];
const LEVEL_RING_WIDTH_PX = 4;
const MIN_DISK_AREA_PX = 9;
const MIN_EDGE_CONSISTENCY = 0.5;
/** Shot noise alone gives a step of about one noise unit on a flat pattern; a real disk gives several. */
const MIN_STEP_OVER_NOISE = 3;
/** Edge pixels misfit by twice the variance shot noise explains mean a soft edge (a sharp one gives ~1). */
const SOFT_EDGE_MISFIT_OVER_NOISE = 2;
/** ...provided the misfit is also this fraction of the step, so noiseless data never count as soft. */
const SOFT_EDGE_MIN_MISFIT_OF_STEP = 0.02;
const EDGE_TOLERANCE_PX = 1;

export function findBrightFieldDisk(
  pattern: Float64Array,
  detY: number,
  detX: number,
  options: BrightFieldDiskOptions = {},
): BrightFieldDisk {
  if (!Number.isInteger(detY) || !Number.isInteger(detX) || detY < 3 || detX < 3) {
    throw new InputError(`bright-field disk: the detector is ${detY} × ${detX} pixels; expected whole numbers ≥ 3`, 'bad-shape');
  }
  const n = detY * detX;
  if (!(pattern instanceof Float64Array) || pattern.length !== n) {
    throw new InputError(`findBrightFieldDisk: pattern has ${pattern?.length} elements, expected a Float64Array of detY × detX = ${n}`, 'bad-shape');
  }
  if (options.refine !== undefined && !['auto', 'edge-fit', 'moments'].includes(options.refine)) {
    throw new InputError(`bright-field disk: unknown refinement method ${String(options.refine)}; expected 'auto', 'edge-fit' or 'moments'`);
  }
  const exclude = options.excludePixels;
  if (exclude !== undefined && exclude.length !== n) {
    throw new InputError(`findBrightFieldDisk: excludePixels has ${exclude.length} elements, expected detY × detX = ${n}`, 'bad-shape');
  }

  // 1. Bad pixels.
  const flagged = new Uint8Array(n);
  let nFlagged = 0;
  for (let i = 0; i < n; i++) {
    if ((exclude !== undefined && exclude[i]) || !Number.isFinite(pattern[i])) { flagged[i] = 1; nFlagged++; }
  }
  if (nFlagged === n) throw noDisk('every pixel is marked bad or is not a finite number');
  const image = nFlagged > 0 ? replaceBadPixels(pattern, detY, detX, flagged) : Float64Array.from(pattern);
  const smooth = median3x3(image, detY, detX);
  let high = -Infinity;
  for (let i = 0; i < n; i++) if (smooth[i] > high) high = smooth[i];
  const low = quantile(smooth, PERCENTILE_LOW);
  const contrast = high - low;
  if (!(contrast > 0)) throw noDisk('the mean pattern is flat (every pixel about the same)');
  const outlierStep = OUTLIER_FRACTION_OF_CONTRAST * contrast;
  for (let i = 0; i < n; i++) {
    if (Math.abs(image[i] - smooth[i]) > outlierStep) { image[i] = smooth[i]; flagged[i] = 1; }
  }

  // 2. Segmentation → first estimate.
  const seed = brightestRegion(smooth, detY, detX, low + 0.5 * contrast, low);
  if (seed.area < MIN_DISK_AREA_PX) throw noDisk(`the brightest region covers only ${seed.area} px`);
  let cx = seed.sumX / seed.area;
  let cy = seed.sumY / seed.area;
  let r = Math.sqrt(seed.area / Math.PI);

  // 3. Area and first moment of the coverage.
  let plateau = NaN;
  let background = NaN;
  for (const w of BAND_HALF_WIDTHS_PX) {
    const rOuter = r + w;
    if (cx - rOuter < -0.5 || cy - rOuter < -0.5 || cx + rOuter > detX - 0.5 || cy + rOuter > detY - 0.5) {
      throw new InputError(
        `bright-field disk: the disk (centre ${cx.toFixed(1)}, ${cy.toFixed(1)}, radius ${r.toFixed(1)} px) ` +
        `reaches the detector edge; expected the whole disk and a ${w} px margin inside the ${detY} × ${detX} detector`,
      );
    }
    const rInner = Math.max(0, r - w);
    plateau = ringTrimmedMean(image, detY, detX, cx, cy, Math.max(0, rInner - LEVEL_RING_WIDTH_PX), rInner);
    background = ringTrimmedMean(image, detY, detX, cx, cy, rOuter, rOuter + LEVEL_RING_WIDTH_PX);
    const step = plateau - background;
    if (!(step > 0)) throw noDisk('the disk is not brighter than its surroundings');
    const m = coverageMoments(image, detY, detX, cx, cy, rInner, rOuter, background, step);
    if (!(m.area > 0)) throw noDisk('the edge measurement found no area');
    cx = m.sumX / m.area;
    cy = m.sumY / m.area;
    r = Math.sqrt(m.area / Math.PI);
  }

  // 4. Edge fit, unless the edge turns out soft.
  const refine = options.refine ?? 'auto';
  const step = plateau - background;
  const fromMoments: EdgeModel = { cx, cy, r, bg: background, step, slope: 0, originX: cx, originY: cy, originR: r };
  const fitted = refine === 'moments' ? null : fitEdge(image, flagged, detY, detX, fromMoments);
  const skipForStats = flagged.slice();
  if (fitted) for (const i of fitted.rejected) skipForStats[i] = 1;
  const stats = residualStats(image, skipForStats, detY, detX, fitted ?? fromMoments);
  const soft = fitted !== null && stats.edgeMisfitOverNoise > SOFT_EDGE_MISFIT_OVER_NOISE &&
    stats.edgeRms > SOFT_EDGE_MIN_MISFIT_OF_STEP * fitted.step;
  const useFit = fitted !== null && (refine === 'edge-fit' || !soft);
  if (useFit) ({ cx, cy, r } = fitted);

  // 5. Quality.
  const stepOverNoise = stats.flatRms > 0 ? (fitted ?? fromMoments).step / stats.flatRms : Infinity;
  if (!(stepOverNoise >= MIN_STEP_OVER_NOISE)) {
    throw noDisk(`the brightest edge stands only ${stepOverNoise.toFixed(1)} noise units above its surroundings`);
  }
  const edge = edgeAgreement(image, detY, detX, cx, cy, r, 0.5 * (plateau + background));
  if (edge.consistency < MIN_EDGE_CONSISTENCY) {
    throw noDisk(`only ${(100 * edge.consistency).toFixed(0)} % of the edge samples follow a circle`);
  }
  return {
    cx, cy, r, plateau, background,
    edgeConsistency: edge.consistency,
    edgeRmsPx: edge.rmsPx,
    edgeSamples: edge.samples,
    stepOverNoise,
    method: useFit ? 'edge-fit' : 'moments',
  };
}

function noDisk(why: string): InputError {
  return new InputError(`bright-field disk: no disk found — ${why}; expected a mean pattern with a bright central disk`);
}

/**
 * 3×3 median. Inside, each column triple is sorted once and the median of nine is
 * med(max of the lows, med of the middles, min of the highs), an exact identity that avoids a
 * sort per pixel; on the border, the median of the in-bounds neighbourhood (lower middle).
 */
function median3x3(image: Float64Array, detY: number, detX: number): Float64Array {
  const out = new Float64Array(image.length);
  const lows = new Float64Array(detX), mids = new Float64Array(detX), highs = new Float64Array(detX);
  for (let y = 1; y < detY - 1; y++) {
    const above = (y - 1) * detX, here = y * detX, below = (y + 1) * detX;
    for (let x = 0; x < detX; x++) {
      let a = image[above + x], b = image[here + x], c = image[below + x], t: number;
      if (a > b) { t = a; a = b; b = t; }
      if (b > c) { t = b; b = c; c = t; }
      if (a > b) { t = a; a = b; b = t; }
      lows[x] = a; mids[x] = b; highs[x] = c;
    }
    for (let x = 1; x < detX - 1; x++) {
      const maxLow = Math.max(lows[x - 1], lows[x], lows[x + 1]);
      const minHigh = Math.min(highs[x - 1], highs[x], highs[x + 1]);
      out[here + x] = median3(maxLow, median3(mids[x - 1], mids[x], mids[x + 1]), minHigh);
    }
  }
  const w = new Float64Array(9);
  const border = (y: number, x: number) => {
    let k = 0;
    for (let yy = Math.max(0, y - 1); yy <= Math.min(detY - 1, y + 1); yy++) {
      for (let xx = Math.max(0, x - 1); xx <= Math.min(detX - 1, x + 1); xx++) w[k++] = image[yy * detX + xx];
    }
    const filled = w.subarray(0, k).sort();
    out[y * detX + x] = filled[(k - 1) >> 1];
  };
  for (let x = 0; x < detX; x++) { border(0, x); border(detY - 1, x); }
  for (let y = 1; y < detY - 1; y++) { border(y, 0); border(y, detX - 1); }
  return out;
}

/** The q-quantile (nearest rank) of the values, by selection on a copy. */
function quantile(values: Float64Array, q: number): number {
  const a = Float64Array.from(values);
  return selectKth(a, Math.min(a.length - 1, Math.max(0, Math.floor(q * (a.length - 1)))));
}

interface Region { area: number; sumX: number; sumY: number }

/** The 4-connected region above `threshold` with the largest Σ(value − base). */
function brightestRegion(image: Float64Array, detY: number, detX: number, threshold: number, base: number): Region {
  const n = image.length;
  const seen = new Uint8Array(n);
  const stack = new Int32Array(n);
  let best: Region = { area: 0, sumX: 0, sumY: 0 };
  let bestSignal = -Infinity;
  for (let start = 0; start < n; start++) {
    if (seen[start] || !(image[start] > threshold)) continue;
    let top = 0;
    stack[top++] = start;
    seen[start] = 1;
    let area = 0, sumX = 0, sumY = 0, signal = 0;
    while (top > 0) {
      const i = stack[--top];
      const y = Math.floor(i / detX), x = i - y * detX;
      area++; sumX += x; sumY += y; signal += image[i] - base;
      if (x > 0 && !seen[i - 1] && image[i - 1] > threshold) { seen[i - 1] = 1; stack[top++] = i - 1; }
      if (x < detX - 1 && !seen[i + 1] && image[i + 1] > threshold) { seen[i + 1] = 1; stack[top++] = i + 1; }
      if (y > 0 && !seen[i - detX] && image[i - detX] > threshold) { seen[i - detX] = 1; stack[top++] = i - detX; }
      if (y < detY - 1 && !seen[i + detX] && image[i + detX] > threshold) { seen[i + detX] = 1; stack[top++] = i + detX; }
    }
    if (signal > bestSignal) { bestSignal = signal; best = { area, sumX, sumY }; }
  }
  return best;
}

/** Mean of the pixels whose centres lie at distance [r0, r1) from (cx, cy), dropping the lowest and highest 10 %. */
function ringTrimmedMean(image: Float64Array, detY: number, detX: number, cx: number, cy: number, r0: number, r1: number): number {
  const values: number[] = [];
  const y0 = Math.max(0, Math.floor(cy - r1)), y1 = Math.min(detY - 1, Math.ceil(cy + r1));
  const x0 = Math.max(0, Math.floor(cx - r1)), x1 = Math.min(detX - 1, Math.ceil(cx + r1));
  const r0Sq = r0 * r0, r1Sq = r1 * r1;
  for (let y = y0; y <= y1; y++) {
    const dy = y - cy;
    for (let x = x0; x <= x1; x++) {
      const dx = x - cx;
      const dSq = dx * dx + dy * dy;
      if (dSq >= r0Sq && dSq < r1Sq) values.push(image[y * detX + x]);
    }
  }
  if (values.length === 0) return NaN;
  values.sort((a, b) => a - b);
  const drop = Math.floor(0.1 * values.length);
  let sum = 0;
  for (let k = drop; k < values.length - drop; k++) sum += values[k];
  return sum / (values.length - 2 * drop);
}

/** Σc, Σxc, Σyc of the coverage c: 1 inside rInner, the normalised level in the band, 0 beyond rOuter. */
function coverageMoments(
  image: Float64Array, detY: number, detX: number,
  cx: number, cy: number, rInner: number, rOuter: number, background: number, step: number,
): Region {
  let area = 0, sumX = 0, sumY = 0;
  const y0 = Math.max(0, Math.floor(cy - rOuter)), y1 = Math.min(detY - 1, Math.ceil(cy + rOuter));
  const x0 = Math.max(0, Math.floor(cx - rOuter)), x1 = Math.min(detX - 1, Math.ceil(cx + rOuter));
  const rInnerSq = rInner * rInner, rOuterSq = rOuter * rOuter;
  for (let y = y0; y <= y1; y++) {
    const dy = y - cy;
    for (let x = x0; x <= x1; x++) {
      const dx = x - cx;
      const dSq = dx * dx + dy * dy;
      if (dSq >= rOuterSq) continue;
      const c = dSq < rInnerSq ? 1 : (image[y * detX + x] - background) / step;
      area += c; sumX += x * c; sumY += y * c;
    }
  }
  return { area, sumX, sumY };
}

/** Bilinear interpolation between pixel centres, clamped at the border. */
function bilinear(image: Float64Array, detY: number, detX: number, x: number, y: number): number {
  const xc = Math.min(detX - 1, Math.max(0, x)), yc = Math.min(detY - 1, Math.max(0, y));
  const x0 = Math.min(detX - 2, Math.floor(xc)), y0 = Math.min(detY - 2, Math.floor(yc));
  const fx = xc - x0, fy = yc - y0;
  const i = y0 * detX + x0;
  return (1 - fy) * ((1 - fx) * image[i] + fx * image[i + 1]) + fy * ((1 - fx) * image[i + detX] + fx * image[i + detX + 1]);
}

function edgeAgreement(
  image: Float64Array, detY: number, detX: number, cx: number, cy: number, r: number, halfLevel: number,
): { consistency: number; rmsPx: number; samples: number } {
  const rays = Math.min(360, Math.max(32, Math.round(2 * Math.PI * r)));
  const reach = Math.max(3, 0.5 * r);
  const stepPx = 0.1;
  let consistent = 0;
  let sumSq = 0;
  for (let k = 0; k < rays; k++) {
    const angle = (2 * Math.PI * k) / rays;
    const ux = Math.cos(angle), uy = Math.sin(angle);
    let bestDistance = Infinity;
    let prevRadius = Math.max(0, r - reach);
    let prev = bilinear(image, detY, detX, cx + prevRadius * ux, cy + prevRadius * uy) - halfLevel;
    for (let rho = prevRadius + stepPx; rho <= r + reach; rho += stepPx) {
      const cur = bilinear(image, detY, detX, cx + rho * ux, cy + rho * uy) - halfLevel;
      if (prev > 0 && cur <= 0) {
        const crossing = prevRadius + (stepPx * prev) / (prev - cur);
        if (Math.abs(crossing - r) < Math.abs(bestDistance)) bestDistance = crossing - r;
      }
      prev = cur;
      prevRadius = rho;
    }
    if (Math.abs(bestDistance) <= EDGE_TOLERANCE_PX) {
      consistent++;
      sumSq += bestDistance * bestDistance;
    }
  }
  return { consistency: consistent / rays, rmsPx: consistent > 0 ? Math.sqrt(sumSq / consistent) : NaN, samples: rays };
}

const FIT_HALF_WIDTH_PX = 3;
const FIT_MAX_ITERATIONS = 12;
const FIT_MAX_MOVE_PX = 1;
const FIT_REJECTION_ROUNDS = 2;
const FIT_REJECT_Z = 5;
const FIT_REJECT_FRACTION_OF_STEP = 0.1;
/** Variance floor of the weights, as a fraction of the disk's step: keeps near-zero background from dominating. */
const FIT_VARIANCE_FLOOR_OF_STEP = 0.02;

/**
 * Least-squares fit of I = bg + slope·(d − r₀) + step · coverage(cx, cy, r) to the pixels within
 * FIT_HALF_WIDTH_PX of the edge, with the exact area of each pixel inside the circle. Only pixels
 * that straddle the edge carry the geometry, so this weighs them as the moments cannot. Weights
 * 1 / model (shot noise, whose variance grows with the level; the gain does not matter); the
 * slope takes up a smooth diffuse background across the edge. Gauss–Newton, with the coverage's
 * derivatives by central differences; pixels more than FIT_REJECT_Z robust deviations off the
 * model (a dead or hot pixel on the edge, which the median test cannot tell from the edge) are
 * dropped and the fit repeated. Null if it does not converge near the start.
 */
function fitEdge(
  image: Float64Array, skip: Uint8Array, detY: number, detX: number, start: EdgeModel,
): (EdgeModel & { rejected: number[] }) | null {
  const { cx: cx0, cy: cy0, r: r0, bg: bg0, step: step0 } = start;
  const xs: number[] = [], ys: number[] = [], vs: number[] = [], ds: number[] = [];
  const rMin = Math.max(0, r0 - FIT_HALF_WIDTH_PX), rMax = r0 + FIT_HALF_WIDTH_PX;
  const y0 = Math.max(0, Math.floor(cy0 - rMax)), y1 = Math.min(detY - 1, Math.ceil(cy0 + rMax));
  const x0 = Math.max(0, Math.floor(cx0 - rMax)), x1 = Math.min(detX - 1, Math.ceil(cx0 + rMax));
  for (let y = y0; y <= y1; y++) {
    for (let x = x0; x <= x1; x++) {
      const d = Math.hypot(x - cx0, y - cy0);
      if (d >= rMin && d < rMax && !skip[y * detX + x]) { xs.push(x); ys.push(y); vs.push(image[y * detX + x]); ds.push(d - r0); }
    }
  }
  const m = xs.length;
  const used = new Uint8Array(m).fill(1);
  const nPar = 6;
  const p = [cx0, cy0, r0, bg0, step0, 0];
  const h = 1e-4;
  const jtj = new Float64Array(nPar * nPar);
  const jtr = new Float64Array(nPar);
  const row = new Float64Array(nPar);
  const z = new Float64Array(m);
  for (let round = 0; round <= FIT_REJECTION_ROUNDS; round++) {
    for (let iter = 0; iter < FIT_MAX_ITERATIONS; iter++) {
      jtj.fill(0); jtr.fill(0);
      const [cx, cy, r, bg, step, slope] = p;
      const varianceFloor = FIT_VARIANCE_FLOOR_OF_STEP * step;
      for (let k = 0; k < m; k++) {
        if (!used[k]) continue;
        const ax = xs[k] - cx, ay = ys[k] - cy;
        const cov = pixelCoverage(ax, ay, r);
        let dcx = 0, dcy = 0, dr = 0;
        // Pixels within a step h of the edge have non-zero derivatives even when cov is exactly 0 or 1.
        if (Math.abs(Math.hypot(ax, ay) - r) < 0.75) {
          dcx = (pixelCoverage(ax - h, ay, r) - pixelCoverage(ax + h, ay, r)) / (2 * h);
          dcy = (pixelCoverage(ax, ay - h, r) - pixelCoverage(ax, ay + h, r)) / (2 * h);
          dr = (pixelCoverage(ax, ay, r + h) - pixelCoverage(ax, ay, r - h)) / (2 * h);
        }
        const model = bg + step * cov + slope * ds[k];
        const res = vs[k] - model;
        const weight = 1 / Math.max(model, varianceFloor);
        row[0] = step * dcx; row[1] = step * dcy; row[2] = step * dr; row[3] = 1; row[4] = cov; row[5] = ds[k];
        for (let a = 0; a < nPar; a++) {
          jtr[a] += weight * row[a] * res;
          for (let b = 0; b <= a; b++) jtj[a * nPar + b] += weight * row[a] * row[b];
        }
      }
      for (let a = 0; a < nPar; a++) for (let b = a + 1; b < nPar; b++) jtj[a * nPar + b] = jtj[b * nPar + a];
      const delta = solveSymmetric(jtj, jtr, nPar);
      if (!delta) return null;
      for (let a = 0; a < nPar; a++) p[a] += delta[a];
      if (!(p[4] > 0) || !(p[2] > 0) || Math.hypot(p[0] - cx0, p[1] - cy0, p[2] - r0) > FIT_MAX_MOVE_PX) return null;
      if (Math.abs(delta[0]) + Math.abs(delta[1]) + Math.abs(delta[2]) < 1e-7) break;
    }
    if (round === FIT_REJECTION_ROUNDS) break;
    // Normalised residuals; their median absolute value sets the scale, whatever the detector's gain.
    // Only pixels above the variance floor count there: a background of exact zeros fits perfectly
    // and would shrink the scale until ordinary shot noise looked like an outlier.
    const [cx, cy, r, bg, step, slope] = p;
    const varianceFloor = FIT_VARIANCE_FLOOR_OF_STEP * step;
    const absResidual = new Float64Array(m);
    const lit: number[] = [];
    for (let k = 0; k < m; k++) {
      const model = bg + step * pixelCoverage(xs[k] - cx, ys[k] - cy, r) + slope * ds[k];
      absResidual[k] = Math.abs(vs[k] - model);
      z[k] = absResidual[k] / Math.sqrt(Math.max(model, varianceFloor));
      if (used[k] && model > varianceFloor) lit.push(z[k]);
    }
    if (lit.length < 10) break;
    const scale = 1.4826 * quantile(Float64Array.from(lit), 0.5);
    let rejected = 0;
    for (let k = 0; k < m; k++) {
      // Gross only: also a tenth of the step off, so noiseless data never lose pixels.
      const keep = z[k] <= FIT_REJECT_Z * scale || absResidual[k] <= FIT_REJECT_FRACTION_OF_STEP * step;
      if (used[k] && !keep) rejected++;
      used[k] = keep ? 1 : 0;
    }
    if (rejected === 0) break;
  }
  const rejected: number[] = [];
  for (let k = 0; k < m; k++) if (!used[k]) rejected.push(ys[k] * detX + xs[k]);
  return { cx: p[0], cy: p[1], r: p[2], bg: p[3], step: p[4], slope: p[5], originX: cx0, originY: cy0, originR: r0, rejected };
}

/** bg + step · coverage + slope · (distance from the origin − originR): the level the fit models. */
interface EdgeModel {
  cx: number; cy: number; r: number; bg: number; step: number; slope: number;
  originX: number; originY: number; originR: number;
}

function modelLevel(mdl: EdgeModel, x: number, y: number): number {
  const d = Math.hypot(x - mdl.originX, y - mdl.originY);
  return mdl.bg + mdl.step * pixelCoverage(x - mdl.cx, y - mdl.cy, mdl.r) + mdl.slope * (d - mdl.originR);
}

/**
 * How well the model fits near its edge. `flatRms`: rms misfit of the pixels within
 * FIT_HALF_WIDTH_PX of the edge that it does not cross (coverage 0 or 1), a noise level.
 * `edgeMisfitOverNoise`: Σ res² over the pixels the edge crosses, divided by what shot noise
 * alone would give there, g · Σ level, where the gain g = variance / mean of the fully covered
 * interior (a level-free reference, unaffected by the edge's shape). About 1 for a sharp edge;
 * a blurred edge, which the sharp model cannot follow, gives more.
 */
function residualStats(image: Float64Array, skip: Uint8Array, detY: number, detX: number, mdl: EdgeModel) {
  const rMin = Math.max(0, mdl.r - FIT_HALF_WIDTH_PX), rMax = mdl.r + FIT_HALF_WIDTH_PX;
  const varianceFloor = FIT_VARIANCE_FLOOR_OF_STEP * mdl.step;
  const rInteriorSq = Math.max(0, mdl.r - 1.5) ** 2;
  let flatSumSq = 0, flatCount = 0, edgeSumSq = 0, edgeLevelSum = 0, edgeCount = 0;
  let interiorSum = 0, interiorSumSq = 0, interiorCount = 0;
  for (let y = Math.max(0, Math.floor(mdl.cy - rMax)); y <= Math.min(detY - 1, Math.ceil(mdl.cy + rMax)); y++) {
    for (let x = Math.max(0, Math.floor(mdl.cx - rMax)); x <= Math.min(detX - 1, Math.ceil(mdl.cx + rMax)); x++) {
      const i = y * detX + x;
      if (skip[i]) continue;
      const dSq = (x - mdl.cx) ** 2 + (y - mdl.cy) ** 2;
      if (dSq < rInteriorSq) { interiorSum += image[i]; interiorSumSq += image[i] * image[i]; interiorCount++; }
      const d = Math.sqrt(dSq);
      if (d < rMin || d >= rMax) continue;
      const level = modelLevel(mdl, x, y);
      const res = image[i] - level;
      const cov = pixelCoverage(x - mdl.cx, y - mdl.cy, mdl.r);
      if (cov > 0 && cov < 1) { edgeSumSq += res * res; edgeLevelSum += Math.max(level, varianceFloor); edgeCount++; }
      else { flatSumSq += res * res; flatCount++; }
    }
  }
  const interiorMean = interiorSum / interiorCount;
  const interiorVariance = (interiorSumSq - interiorCount * interiorMean * interiorMean) / (interiorCount - 1);
  const gain = interiorCount > 1 ? Math.max(0, interiorVariance) / Math.max(interiorMean, varianceFloor) : NaN;
  return {
    flatRms: flatCount > 0 ? Math.sqrt(flatSumSq / flatCount) : NaN,
    edgeRms: edgeCount > 0 ? Math.sqrt(edgeSumSq / edgeCount) : NaN,
    edgeMisfitOverNoise: edgeSumSq / (gain * edgeLevelSum),
  };
}

/** Gaussian elimination with partial pivoting on a copy; null if singular. */
function solveSymmetric(matrix: Float64Array, rhs: Float64Array, n: number): number[] | null {
  const a = Float64Array.from(matrix);
  const b = Float64Array.from(rhs);
  for (let c = 0; c < n; c++) {
    let piv = c;
    for (let r = c + 1; r < n; r++) if (Math.abs(a[r * n + c]) > Math.abs(a[piv * n + c])) piv = r;
    if (!(Math.abs(a[piv * n + c]) > 1e-300)) return null;
    if (piv !== c) {
      for (let k = 0; k < n; k++) { const t = a[c * n + k]; a[c * n + k] = a[piv * n + k]; a[piv * n + k] = t; }
      const t = b[c]; b[c] = b[piv]; b[piv] = t;
    }
    for (let r = c + 1; r < n; r++) {
      const f = a[r * n + c] / a[c * n + c];
      if (f === 0) continue;
      for (let k = c; k < n; k++) a[r * n + k] -= f * a[c * n + k];
      b[r] -= f * b[c];
    }
  }
  const x = new Array<number>(n).fill(0);
  for (let r = n - 1; r >= 0; r--) {
    let s = b[r];
    for (let k = r + 1; k < n; k++) s -= a[r * n + k] * x[k];
    x[r] = s / a[r * n + r];
  }
  return x;
}

/** Area of the unit pixel centred at (ax, ay) (relative to the circle's centre) inside the circle of radius r. */
function pixelCoverage(ax: number, ay: number, r: number): number {
  const nx = Math.max(0, Math.abs(ax) - 0.5), ny = Math.max(0, Math.abs(ay) - 0.5);
  if (nx * nx + ny * ny >= r * r) return 0;
  const fx = Math.abs(ax) + 0.5, fy = Math.abs(ay) + 0.5;
  if (fx * fx + fy * fy <= r * r) return 1;
  return quadrantArea(ax + 0.5, ay + 0.5, r) - quadrantArea(ax - 0.5, ay + 0.5, r)
    - quadrantArea(ax + 0.5, ay - 0.5, r) + quadrantArea(ax - 0.5, ay - 0.5, r);
}

/** ∫ sqrt(r² − X²) dX. */
function chordIntegral(X: number, r: number): number {
  const s = Math.sqrt(Math.max(0, r * r - X * X));
  return 0.5 * (X * s + r * r * Math.asin(Math.max(-1, Math.min(1, X / r))));
}

/** Area of the disk of radius r at the origin with X ≤ x and Y ≤ y. */
function quadrantArea(x: number, y: number, r: number): number {
  if (y <= -r || x <= -r) return 0;
  const xc = Math.min(x, r);
  if (y >= r) return 2 * (chordIntegral(xc, r) - chordIntegral(-r, r));
  const a = Math.sqrt(r * r - y * y);
  let area = 0;
  // Where |X| < a the circle's upper arc is above y: the strip runs from the lower arc to y.
  const lo = -a, hi = Math.min(xc, a);
  if (hi > lo) area += y * (hi - lo) + chordIntegral(hi, r) - chordIntegral(lo, r);
  if (y >= 0) {
    // Where |X| ≥ a (and y ≥ 0) the whole chord lies below y.
    const leftEnd = Math.min(xc, -a);
    if (leftEnd > -r) area += 2 * (chordIntegral(leftEnd, r) - chordIntegral(-r, r));
    if (xc > a) area += 2 * (chordIntegral(xc, r) - chordIntegral(a, r));
  }
  return area;
}
