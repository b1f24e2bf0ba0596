/**
 * Vacuum in a scan: probe positions where the beam met no specimen. There the whole pattern is
 * the bright-field disk plus the detector's background, so the fraction of the counts outside
 * the disk is at its lowest, the same at every such position, and clearly below any position
 * over matter, which scatters some of the beam out of the disk (common practice).
 *
 * The rule: sort the scattered fractions; the vacuum group is the lowest run of values that is
 * separated from the next value by a gap of at least GAP_SIGMAS standard deviations of the
 * group (robust, and at least its Poisson noise), and holds at least MIN_FRACTION of the
 * positions (and MIN_POSITIONS). A specimen
 * that covers the whole scan has no such gap, and then no vacuum is reported.
 */
export const GAP_SIGMAS = 5;
export const MIN_FRACTION = 0.01;
export const MIN_POSITIONS = 8;
/** How many of the widest steps in the sorted fractions are scored as a vacuum edge. */
export const CANDIDATE_STEPS = 32;

export interface VacuumFinding {
  /** One byte per position, 1 over vacuum; null when none was found. */
  mask: Uint8Array | null;
  positions: number;
  /** Scattered fraction at or below which a position counts as vacuum (NaN when none). */
  threshold: number;
  /** The gap above the vacuum group, in robust standard deviations of the group (0 when none). */
  gapSigmas: number;
}

/**
 * @param scattered counts outside the bright-field disk, per position
 * @param total all counts, per position (same length)
 */
export function findVacuum(scattered: ArrayLike<number>, total: ArrayLike<number>): VacuumFinding {
  if (scattered.length !== total.length) throw new RangeError(`findVacuum: ${scattered.length} scattered values but ${total.length} totals`);
  const n = total.length;
  const fraction = new Float64Array(n).fill(NaN);
  const order: number[] = [];
  for (let i = 0; i < n; i++) {
    if (total[i] > 0 && Number.isFinite(total[i]) && Number.isFinite(scattered[i])) {
      fraction[i] = Math.max(0, scattered[i]) / total[i];
      order.push(i);
    }
  }
  const none: VacuumFinding = { mask: null, positions: 0, threshold: NaN, gapSigmas: 0 };
  const m = order.length;
  const minCount = Math.max(MIN_POSITIONS, Math.ceil(MIN_FRACTION * m));
  if (m < 2 * minCount) return none;
  order.sort((a, b) => fraction[a] - fraction[b]);
  const v = Float64Array.from(order, (i) => fraction[i]);
  let best = { k: 0, score: 0 };
  // Candidate groups: the lowest k values, k up to half the positions. A vacuum edge is one of
  // the widest steps, so only the widest CANDIDATE_STEPS are scored (each score sorts k values).
  const steps: number[] = [];
  for (let k = minCount; k <= Math.floor(m / 2); k++) if (v[k] > v[k - 1]) steps.push(k);
  steps.sort((a, b) => (v[b] - v[b - 1]) - (v[a] - v[a - 1]));
  for (const k of steps.slice(0, CANDIDATE_STEPS)) {
    const score = (v[k] - v[k - 1]) / groupSigma(v, k, order, scattered, total);
    if (score > best.score) best = { k, score };
  }
  if (best.score < GAP_SIGMAS) return { ...none, gapSigmas: best.score };
  const threshold = v[best.k - 1];
  const mask = new Uint8Array(n);
  let positions = 0;
  for (let i = 0; i < n; i++) if (fraction[i] <= threshold) { mask[i] = 1; positions++; }
  return { mask, positions, threshold, gapSigmas: best.score };
}

/**
 * The spread of the group's scattered fraction: 1.4826 × the median absolute deviation (a
 * normal distribution's σ), but never below the Poisson noise of its counts, √(s + 1) / t with
 * the scattered counts s and total t of the group's median position. Over clean vacuum nearly
 * every value is exactly 0, where the deviation alone would be 0 and any step would look
 * infinitely clear. O(k): v is sorted, so the deviations on either side of the median are too,
 * and their median is found by walking outwards from it.
 */
function groupSigma(v: Float64Array, k: number, order: number[], scattered: ArrayLike<number>, total: ArrayLike<number>): number {
  const mid = order[k >> 1];
  const poisson = Math.sqrt(Math.max(0, scattered[mid]) + 1) / total[mid];
  return Math.max(1.4826 * sortedMad(v, k), poisson);
}

/**
 * The median absolute deviation from the median of the sorted values v[0..k), in O(k): the
 * deviations below and above the median are each sorted, so the smallest are merged outwards.
 */
export function sortedMad(v: ArrayLike<number>, k: number): number {
  if (k < 1) return NaN;
  const m = k >> 1;
  const med = k % 2 ? v[m] : (v[m - 1] + v[m]) / 2;
  let lo = m - 1, hi = m;
  let taken = 0, last = 0, before = 0;
  // Take the deviations in increasing order until the one at index m (0-based) is reached.
  while (taken <= m) {
    const dl = lo >= 0 ? med - v[lo] : Infinity;
    const dh = hi < k ? v[hi] - med : Infinity;
    before = last;
    if (dl <= dh) { last = dl; lo--; } else { last = dh; hi++; }
    taken++;
  }
  return k % 2 ? last : (before + last) / 2;
}
