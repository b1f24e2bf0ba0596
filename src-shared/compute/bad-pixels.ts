import { InputError } from '../model/errors';

/**
 * Hot and dead detector pixels, found from the mean and max patterns of the first pass.
 *
 * Hot: the pixel's mean stands far above its neighbours. "Its neighbours" is the third-highest of
 * its 8 neighbours, not their median: at the edge of a bright disk (the steepest legitimate
 * gradient) a pixel may have more dark neighbours than bright ones, but for any disk of radius
 * ≳ 2 px at least three neighbours lie nearer the centre and are at least as bright, so the
 * third-highest is never far below a legitimate pixel; and one or two hot neighbours (a small
 * cluster) cannot raise it. A pixel is hot when BOTH
 *   mean > hotFactor × reference                       (a large ratio, so real peaks survive), and
 *   mean − reference > max(hotZ × spread, Poisson margin)   (well beyond the noise),
 * where spread is that of the 24 pixels of the 5×5 neighbourhood, without its two highest and
 * two lowest values so a hot or dead neighbour does not inflate it; next to an edge it includes
 * both levels and so grows, which only makes the test more cautious there. The Poisson margin is
 * what a mean of N Poisson counts at the local level (the larger of the reference and the
 * trimmed 5×5 mean) exceeds with chance below exp(−hotZ²/2), by Bernstein's inequality: unlike a
 * Gaussian z-score it stays safe at low counts, where most neighbours read 0 and their spread
 * says nothing. It assumes the mean is in counts; data scaled so one count is less than one unit
 * only get a stricter test.
 *
 * Dead: never lit (max == 0), or never gave a finite value. At low counts a live pixel may
 * simply have caught nothing, so a never-lit pixel counts as dead only when its neighbours are
 * consistently lit: all but at most two of its in-bounds 3×3 neighbours have max > 0, AND a
 * live pixel as bright as the dimmest lit neighbour (N × its mean, in counts) would have caught at
 * least `minExpectedCounts` counts, so the chance of an unlucky live pixel is below
 * e^−minExpectedCounts (2·10⁻⁹ at the default 20). The dimmest, not the median: just outside a
 * disk on a dark background the inner neighbours are bright, but the pixel itself is as dark as
 * the outer ones. Without `patternCount` the rule assumes N = 1, the most cautious choice: pass
 * the number of patterns to find dead pixels in dim areas.
 */
export interface BadPixelOptions {
  /** Hot only if mean > hotFactor × the neighbours' reference level. Default 3. */
  hotFactor?: number;
  /** Hot only if mean − reference exceeds hotZ noise units (see above). Default 8. */
  hotZ?: number;
  /** How many patterns went into `mean` and `max`. Default 1 (cautious; see above). */
  patternCount?: number;
  /** Counts a live pixel would have caught before "never lit" means dead. Default 20. */
  minExpectedCounts?: number;
}

export interface BadPixelResult {
  /** detY × detX, row-major: 1 for a hot or dead pixel, 0 otherwise. */
  mask: Uint8Array;
  /** [row, column] of each hot pixel, in row-major order. */
  hot: [number, number][];
  /** [row, column] of each dead pixel (never lit, or never finite), in row-major order. */
  dead: [number, number][];
}

const DEFAULTS = { hotFactor: 3, hotZ: 8, patternCount: 1, minExpectedCounts: 20 };

export function findBadPixels(
  mean: Float64Array,
  max: Float64Array,
  detY: number,
  detX: number,
  options: BadPixelOptions = {},
): BadPixelResult {
  validateDetector(detY, detX, 'bad-pixel search');
  validatePatternLength(mean, detY, detX, 'findBadPixels: mean pattern');
  validatePatternLength(max, detY, detX, 'findBadPixels: max pattern');
  const hotFactor = positiveOption(options.hotFactor, DEFAULTS.hotFactor, 'hotFactor');
  const hotZ = positiveOption(options.hotZ, DEFAULTS.hotZ, 'hotZ');
  const patternCount = positiveOption(options.patternCount, DEFAULTS.patternCount, 'patternCount');
  const minExpectedCounts = positiveOption(options.minExpectedCounts, DEFAULTS.minExpectedCounts, 'minExpectedCounts');

  const n = detY * detX;
  const mask = new Uint8Array(n);
  const isDead = new Uint8Array(n);
  const hot: [number, number][] = [];
  const dead: [number, number][] = [];
  const neighbourMeans = new Float64Array(8);

  for (let y = 0; y < detY; y++) {
    for (let x = 0; x < detX; x++) {
      const i = y * detX + x;
      if (!Number.isFinite(mean[i]) || !Number.isFinite(max[i])) {
        isDead[i] = 1;
        continue;
      }
      if (max[i] !== 0) continue;
      let inBounds = 0;
      let lit = 0;
      for (let dy = -1; dy <= 1; dy++) {
        const yy = y + dy;
        if (yy < 0 || yy >= detY) continue;
        for (let dx = -1; dx <= 1; dx++) {
          const xx = x + dx;
          if ((dy === 0 && dx === 0) || xx < 0 || xx >= detX) continue;
          inBounds++;
          const j = yy * detX + xx;
          if (max[j] > 0 && Number.isFinite(max[j]) && Number.isFinite(mean[j])) neighbourMeans[lit++] = mean[j];
        }
      }
      if (lit === 0 || lit < inBounds - 2) continue;
      let dimmest = Infinity;
      for (let k = 0; k < lit; k++) dimmest = Math.min(dimmest, neighbourMeans[k]);
      const expectedCounts = patternCount * dimmest;
      if (expectedCounts >= minExpectedCounts) isDead[i] = 1;
    }
  }

  for (let y = 0; y < detY; y++) {
    for (let x = 0; x < detX; x++) {
      const i = y * detX + x;
      if (isDead[i]) continue;
      const v = mean[i];
      // Third-highest of the valid 3×3 neighbours (the lowest when fewer than three exist),
      // kept as the three highest seen so far (every pixel is visited: no sorting).
      let nRing = 0;
      let h1 = -Infinity, h2 = -Infinity, h3 = -Infinity;
      for (let dy = -1; dy <= 1; dy++) {
        const yy = y + dy;
        if (yy < 0 || yy >= detY) continue;
        for (let dx = -1; dx <= 1; dx++) {
          const xx = x + dx;
          if ((dy === 0 && dx === 0) || xx < 0 || xx >= detX) continue;
          const j = yy * detX + xx;
          if (isDead[j]) continue;
          const m = mean[j];
          nRing++;
          if (m > h1) { h3 = h2; h2 = h1; h1 = m; } else if (m > h2) { h3 = h2; h2 = m; } else if (m > h3) h3 = m;
        }
      }
      if (nRing === 0) continue;
      const reference = nRing >= 3 ? h3 : nRing === 2 ? h2 : h1;
      // Cheap rejection first: most pixels are nowhere near their neighbours' level × hotFactor.
      if (reference > 0 && !(v > hotFactor * reference)) continue;
      if (!(v > reference)) continue;
      const local = trimmedStats5x5(mean, isDead, detY, detX, y, x, reference);
      const level = Math.max(reference, local.mean);
      // Bernstein: a Poisson count of mean μ exceeds μ + t with chance ≤ exp(−t² / (2(μ + t/3)));
      // t solves t² = z²(μ + t/3), i.e. chance ≤ exp(−z²/2), however small μ is.
      const expectedCounts = Math.max(0, level) * patternCount;
      const poissonMargin = (hotZ * hotZ / 6 + Math.sqrt(hotZ ** 4 / 36 + hotZ * hotZ * expectedCounts)) / patternCount;
      if (v - reference > Math.max(hotZ * local.spread, poissonMargin)) {
        mask[i] = 1;
        hot.push([y, x]);
      }
    }
  }

  for (let i = 0; i < n; i++) {
    if (isDead[i]) {
      mask[i] = 1;
      dead.push([Math.floor(i / detX), i % detX]);
    }
  }
  return { mask, hot, dead };
}

/**
 * A copy of `pattern` with every flagged pixel replaced by the median of its unflagged, finite
 * neighbours in the 3×3 window, growing to 5×5 (and further) when none is valid. Only original
 * values are used, so the result does not depend on the order pixels are visited.
 */
export function replaceBadPixels(pattern: Float64Array, detY: number, detX: number, mask: Uint8Array): Float64Array {
  validateDetector(detY, detX, 'bad-pixel repair');
  validatePatternLength(pattern, detY, detX, 'replaceBadPixels: pattern');
  if (mask.length !== detY * detX) {
    throw new InputError(`replaceBadPixels: mask has ${mask.length} elements, expected detY × detX = ${detY * detX}`);
  }
  const out = Float64Array.from(pattern);
  const maxRadius = Math.max(detY, detX);
  let scratch = new Float64Array(24);
  for (let y = 0; y < detY; y++) {
    for (let x = 0; x < detX; x++) {
      const i = y * detX + x;
      if (!mask[i]) continue;
      let found = 0;
      for (let radius = 1; radius <= maxRadius && found === 0; radius++) {
        const side = 2 * radius + 1;
        if (scratch.length < side * side) scratch = new Float64Array(side * side);
        for (let yy = Math.max(0, y - radius); yy <= Math.min(detY - 1, y + radius); yy++) {
          for (let xx = Math.max(0, x - radius); xx <= Math.min(detX - 1, x + radius); xx++) {
            const j = yy * detX + xx;
            if (!mask[j] && Number.isFinite(pattern[j])) scratch[found++] = pattern[j];
          }
        }
      }
      if (found === 0) {
        throw new InputError('bad-pixel repair: every detector pixel is flagged as bad or is not a finite number, so there is nothing to fill them from; expected at least one valid pixel');
      }
      out[i] = medianOfFirst(scratch, found);
    }
  }
  return out;
}

/** Mean and standard deviation of the 5×5 neighbourhood without its centre, two highest and two lowest values. */
function trimmedStats5x5(
  mean: Float64Array,
  isDead: Uint8Array,
  detY: number,
  detX: number,
  y: number,
  x: number,
  shift: number,
): { mean: number; spread: number } {
  // One pass: shifted sums plus the two highest and two lowest, removed afterwards.
  let count = 0;
  let sum = 0;
  let sumSq = 0;
  let hi1 = -Infinity, hi2 = -Infinity, lo1 = Infinity, lo2 = Infinity;
  for (let yy = Math.max(0, y - 2); yy <= Math.min(detY - 1, y + 2); yy++) {
    for (let xx = Math.max(0, x - 2); xx <= Math.min(detX - 1, x + 2); xx++) {
      if (yy === y && xx === x) continue;
      const j = yy * detX + xx;
      if (isDead[j]) continue;
      const d = mean[j] - shift;
      count++;
      sum += d;
      sumSq += d * d;
      if (d > hi1) { hi2 = hi1; hi1 = d; } else if (d > hi2) hi2 = d;
      if (d < lo1) { lo2 = lo1; lo1 = d; } else if (d < lo2) lo2 = d;
    }
  }
  if (count >= 9) {
    sum -= hi1 + hi2 + lo1 + lo2;
    sumSq -= hi1 * hi1 + hi2 * hi2 + lo1 * lo1 + lo2 * lo2;
    count -= 4;
  }
  if (count < 2) return { mean: count === 1 ? shift + sum : shift, spread: 0 };
  const variance = (sumSq - (sum * sum) / count) / (count - 1);
  return { mean: shift + sum / count, spread: variance > 0 ? Math.sqrt(variance) : 0 };
}

/** Median of values[0..n), averaging the middle two for even n; sorts that prefix in place. */
export function medianOfFirst(values: Float64Array, n: number): number {
  const prefix = values.subarray(0, n);
  prefix.sort();
  const mid = n >> 1;
  return n % 2 === 1 ? prefix[mid] : 0.5 * (prefix[mid - 1] + prefix[mid]);
}

function validateDetector(detY: number, detX: number, where: string): void {
  if (!Number.isInteger(detY) || !Number.isInteger(detX) || detY < 1 || detX < 1) {
    throw new InputError(`${where}: the detector is ${detY} × ${detX} pixels; expected whole numbers ≥ 1`, 'bad-shape');
  }
}

function validatePatternLength(a: Float64Array, detY: number, detX: number, what: string): void {
  if (!(a instanceof Float64Array) || a.length !== detY * detX) {
    throw new InputError(`${what} has ${a?.length} elements, expected a Float64Array of detY × detX = ${detY * detX}`, 'bad-shape');
  }
}

function positiveOption(value: number | undefined, fallback: number, name: string): number {
  if (value === undefined) return fallback;
  if (!Number.isFinite(value) || value <= 0) {
    throw new InputError(`bad-pixel search: setting ${name} = ${String(value)}; expected a finite number > 0`);
  }
  return value;
}
