/**
 * k-means of n points in f dimensions (row-major n × f): k-means++ seeding (Arthur &
 * Vassilvitskii, SODA 2007: each next centre drawn with probability proportional to the squared
 * distance to the nearest centre so far; greedily, as that paper suggests and common practice
 * does: of 2 + ⌊ln k⌋ such draws, the one that leaves the least total squared distance), then Lloyd iterations (assign each point to its nearest
 * centre, move each centre to the mean of its points) until no point changes cluster or the
 * centres move less than `tol` × the data's total variance; the restart with the lowest inertia
 * (Σ squared distances to the assigned centres) is kept. A cluster left empty takes the point
 * farthest from its centre. Deterministic for a given seed.
 */
import { InputError } from '../model/errors';

export interface KmeansOptions {
  restarts: number;
  seed: number;
  maxIterations: number;
  /** Stop when Σ of the squared centre shifts falls below tol × the mean per-point variance (default 1e-4). */
  tol: number;
}

export interface KmeansResult {
  labels: Int32Array;
  /** k × f */
  centers: Float64Array;
  inertia: number;
  sizes: Int32Array;
  iterations: number;
  /** Which restart won (0-based). */
  restart: number;
}

/** A small deterministic generator (mulberry32), enough for seeding choices. */
function generator(seed: number): () => number {
  let a = (seed >>> 0) ^ 0x5bd1e995;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

function sqDist(p: Float64Array, i: number, c: Float64Array, j: number, f: number): number {
  let s = 0;
  for (let x = 0; x < f; x++) { const d = p[i * f + x] - c[j * f + x]; s += d * d; }
  return s;
}

/**
 * Greedy k-means++ seeding: k centres chosen among the points. Plain k-means++ (one draw per
 * centre) left a 30-point 1-D case in a worse minimum on every one of 10 restarts for some seeds.
 */
export function kmeansPlusPlus(points: Float64Array, n: number, f: number, k: number, random: () => number): Float64Array {
  const centers = new Float64Array(k * f);
  const first = Math.min(n - 1, Math.floor(random() * n));
  centers.set(points.subarray(first * f, (first + 1) * f), 0);
  const nearest = new Float64Array(n);
  for (let i = 0; i < n; i++) nearest[i] = sqDist(points, i, centers, 0, f);
  const trials = 2 + Math.floor(Math.log(k));
  const candidate = new Float64Array(n);
  const bestNearest = new Float64Array(n);
  for (let c = 1; c < k; c++) {
    let total = 0;
    for (let i = 0; i < n; i++) total += nearest[i];
    let pick = n - 1;
    let bestPotential = Infinity;
    for (let t = 0; t < trials; t++) {
      let draw = n - 1;
      if (total > 0) {
        let r = random() * total;
        for (let i = 0; i < n; i++) { r -= nearest[i]; if (r < 0) { draw = i; break; } }
      } else {
        draw = Math.min(n - 1, Math.floor(random() * n));
      }
      // The total squared distance if this point became the next centre.
      let potential = 0;
      for (let i = 0; i < n; i++) {
        candidate[i] = Math.min(nearest[i], sqDist(points, i, points, draw, f));
        potential += candidate[i];
      }
      if (t === 0 || potential < bestPotential) { bestPotential = potential; pick = draw; bestNearest.set(candidate); }
    }
    centers.set(points.subarray(pick * f, (pick + 1) * f), c * f);
    nearest.set(bestNearest);
  }
  return centers;
}

/** Lloyd iterations from the given centres (modified in place). */
export function lloyd(points: Float64Array, n: number, f: number, k: number, centers: Float64Array, maxIterations: number, shiftLimit: number):
  { labels: Int32Array; inertia: number; sizes: Int32Array; iterations: number } {
  const labels = new Int32Array(n).fill(-1);
  const dist = new Float64Array(n);
  const sums = new Float64Array(k * f);
  const sizes = new Int32Array(k);
  let iterations = 0;
  for (; iterations < maxIterations; iterations++) {
    let changed = 0;
    for (let i = 0; i < n; i++) {
      // The nearest centre, inlined: this loop is most of k-means' time.
      const pi = i * f;
      let best = 0, bestD = Infinity;
      for (let c = 0; c < k; c++) {
        const ci = c * f;
        let d = 0;
        for (let x = 0; x < f && d < bestD; x++) { const t = points[pi + x] - centers[ci + x]; d += t * t; }
        if (d < bestD) { bestD = d; best = c; }
      }
      if (labels[i] !== best) { labels[i] = best; changed++; }
      dist[i] = bestD;
    }
    sums.fill(0);
    sizes.fill(0);
    for (let i = 0; i < n; i++) {
      const c = labels[i];
      sizes[c]++;
      for (let x = 0; x < f; x++) sums[c * f + x] += points[i * f + x];
    }
    // An empty cluster takes the point farthest from its centre, from a cluster that keeps another.
    for (let c = 0; c < k; c++) {
      if (sizes[c] > 0) continue;
      let far = -1;
      for (let i = 0; i < n; i++) if (sizes[labels[i]] > 1 && (far < 0 || dist[i] > dist[far])) far = i;
      if (far < 0) break;
      const old = labels[far];
      sizes[old]--;
      for (let x = 0; x < f; x++) { sums[old * f + x] -= points[far * f + x]; sums[c * f + x] = points[far * f + x]; }
      sizes[c] = 1;
      labels[far] = c;
      dist[far] = 0;
      changed++;
    }
    let shift = 0;
    for (let c = 0; c < k; c++) {
      for (let x = 0; x < f; x++) {
        const m = sums[c * f + x] / sizes[c];
        shift += (m - centers[c * f + x]) ** 2;
        centers[c * f + x] = m;
      }
    }
    if (changed === 0 || shift <= shiftLimit) { iterations++; break; }
  }
  let inertia = 0;
  for (let i = 0; i < n; i++) {
    labels[i] = nearestCenter(points, i, centers, k, f);
    inertia += sqDist(points, i, centers, labels[i], f);
  }
  sizes.fill(0);
  for (let i = 0; i < n; i++) sizes[labels[i]]++;
  return { labels, inertia, sizes, iterations };
}

function nearestCenter(points: Float64Array, i: number, centers: Float64Array, k: number, f: number): number {
  let best = 0, bestD = Infinity;
  for (let c = 0; c < k; c++) { const d = sqDist(points, i, centers, c, f); if (d < bestD) { bestD = d; best = c; } }
  return best;
}

/** What k-means cannot do, refused with a message: no clusters, more clusters than points or distinct points, non-finite features. */
function checkKmeansInput(points: Float64Array, n: number, f: number, k: number): void {
  if (!Number.isInteger(k) || k < 1) throw new InputError(`clusters: expected a whole number ≥ 1, got ${k}`, 'bad-request');
  if (k > n) throw new InputError(`${k} clusters asked for, but there are only ${n} points; expected at most ${n}`, 'bad-request');
  for (let i = 0; i < n * f; i++) {
    if (!Number.isFinite(points[i])) throw new InputError('k-means: the features hold NaN or ±Inf values; expected finite features', 'bad-input');
  }
  // More clusters than distinct points cannot all be filled.
  const distinct = new Set<string>();
  for (let i = 0; i < n && distinct.size < k; i++) distinct.add(Array.from(points.subarray(i * f, (i + 1) * f)).join(','));
  if (distinct.size < k) throw new InputError(`${k} clusters asked for, but the features take only ${distinct.size} distinct value(s); expected at most ${distinct.size} clusters`, 'bad-request');
}

export function kmeans(points: Float64Array, n: number, f: number, k: number, o: KmeansOptions): KmeansResult {
  checkKmeansInput(points, n, f, k);
  // Stop threshold relative to the data's variance (as common k-means implementations do).
  let variance = 0;
  for (let x = 0; x < f; x++) {
    let m = 0;
    for (let i = 0; i < n; i++) m += points[i * f + x];
    m /= n;
    for (let i = 0; i < n; i++) variance += (points[i * f + x] - m) ** 2;
  }
  const shiftLimit = o.tol * (variance / n);
  const random = generator(o.seed);
  let best: KmeansResult | null = null;
  for (let r = 0; r < Math.max(1, o.restarts); r++) {
    const centers = kmeansPlusPlus(points, n, f, k, random);
    const run = lloyd(points, n, f, k, centers, o.maxIterations, shiftLimit);
    if (!best || run.inertia < best.inertia) best = { ...run, centers, restart: r };
  }
  return best!;
}

export interface MiniBatchOptions {
  batch: number;
  iterations: number;
  seed: number;
}

/**
 * Mini-batch k-means (Sculley, WWW 2010) for scans too large for full Lloyd iterations: from
 * k-means++ centres on a first batch, each iteration draws `batch` points, assigns each to its
 * nearest centre and moves that centre towards it with a per-centre rate 1 / (points it has
 * seen). Labels and inertia are then taken over all points. Deterministic for a given seed.
 */
export function kmeansMiniBatch(points: Float64Array, n: number, f: number, k: number, o: MiniBatchOptions): KmeansResult {
  checkKmeansInput(points, n, f, k);
  const random = generator(o.seed);
  const b = Math.min(n, Math.max(k, o.batch));
  const pick = () => Math.min(n - 1, Math.floor(random() * n));
  // Seed on a sample of the points.
  const sampleIdx = Array.from({ length: Math.min(n, Math.max(b, 10 * k)) }, pick);
  const sample = new Float64Array(sampleIdx.length * f);
  sampleIdx.forEach((p, i) => sample.set(points.subarray(p * f, (p + 1) * f), i * f));
  const centers = kmeansPlusPlus(sample, sampleIdx.length, f, k, random);
  const seen = new Float64Array(k);
  for (let it = 0; it < o.iterations; it++) {
    for (let q = 0; q < b; q++) {
      const p = pick();
      const c = nearestCenter(points, p, centers, k, f);
      seen[c]++;
      const eta = 1 / seen[c];
      for (let x = 0; x < f; x++) centers[c * f + x] += eta * (points[p * f + x] - centers[c * f + x]);
    }
  }
  const labels = new Int32Array(n);
  const sizes = new Int32Array(k);
  let inertia = 0;
  for (let i = 0; i < n; i++) {
    labels[i] = nearestCenter(points, i, centers, k, f);
    sizes[labels[i]]++;
    inertia += sqDist(points, i, centers, labels[i], f);
  }
  // A centre that ended up nearest to no point is given one by a full Lloyd step.
  if (sizes.some((x) => x === 0)) {
    const r = lloyd(points, n, f, k, centers, 1, 0);
    return { ...r, centers, iterations: o.iterations + 1, restart: 0 };
  }
  return { labels, centers, inertia, sizes, iterations: o.iterations, restart: 0 };
}
