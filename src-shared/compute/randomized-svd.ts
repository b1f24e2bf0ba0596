/**
 * Randomized SVD of a matrix streamed by row blocks (Halko, Martinsson & Tropp, SIAM Review
 * 53(2), 2011), for PCA over patterns that do not fit in memory. C (N × D) is the mean-centred
 * feature matrix; it is never held whole. Each pass over the data applies C and Cᵀ once:
 *
 *   pass 1:       Y = C·Ω,  W = Cᵀ·Y                 (Ω: D × l Gaussian, l = k + oversampling)
 *   pass 2 … q+1: Z = orth(W),  Y = C·Z,  W = Cᵀ·Y    (one power iteration each)
 *   then:         Y = Q·R (Q orthonormal),  B = Qᵀ·C = (W·R⁻¹)ᵀ,  B = Ũ·Σ·Vᵀ,  U = Q·Ũ
 *
 * so q power iterations cost q + 1 passes, and B comes from W with no pass of its own. Each
 * block of rows contributes its rows of Y and a partial Cᵀ·Y; the mean is taken out exactly
 * once known (pass 1 uses the identities C·Ω = A·Ω − 1·(μᵀΩ) and
 * CᵀC·Ω = AᵀA·Ω − N·μ·(μᵀΩ), with A the uncentred matrix and μ its column mean).
 *
 * Orthonormalisation is classical Gram–Schmidt applied twice (stable to working precision for
 * full-rank blocks), tracking the map T with Q = Y·T, so B = (W·T)ᵀ needs no triangular solve
 * and columns that are linearly dependent (fewer independent directions than l) simply drop out.
 */

/** Deterministic standard normal numbers: xoshiro128** seeded from `seed`, Box–Muller pairs. */
export function gaussianMatrix(rows: number, cols: number, seed: number): Float64Array {
  let s0 = 0x9e3779b9 ^ (seed >>> 0), s1 = 0x243f6a88 ^ Math.imul(seed >>> 0, 0x85ebca6b), s2 = 0xb7e15162, s3 = 0x6a09e667 ^ (seed >>> 0);
  const next = (): number => {
    const result = Math.imul(rotl(Math.imul(s1, 5), 7), 9) >>> 0;
    const t = s1 << 9;
    s2 ^= s0; s3 ^= s1; s1 ^= s2; s0 ^= s3; s2 ^= t; s3 = rotl(s3, 11);
    return result;
  };
  for (let i = 0; i < 16; i++) next(); // leave the seed's neighbourhood
  const out = new Float64Array(rows * cols);
  for (let i = 0; i < out.length; i += 2) {
    const u1 = (next() + 1) / 4294967297; // (0, 1)
    const u2 = next() / 4294967296;
    const r = Math.sqrt(-2 * Math.log(u1));
    out[i] = r * Math.cos(2 * Math.PI * u2);
    if (i + 1 < out.length) out[i + 1] = r * Math.sin(2 * Math.PI * u2);
  }
  return out;
}

function rotl(x: number, k: number): number {
  return ((x << k) | (x >>> (32 - k))) >>> 0;
}

/**
 * Rows p0 … p1 − 1 of the co-range test matrix Ψᵀ (N × s) of the one-pass sketch: each position's
 * row drawn from its own seed (seed, p), so any blocking of the rows gives the same matrix.
 */
export function coRangeRows(p0: number, p1: number, s: number, seed: number): Float64Array {
  const out = new Float64Array((p1 - p0) * s);
  for (let p = p0; p < p1; p++) out.set(gaussianMatrix(1, s, (Math.imul(seed + 1, 0x9e3779b1) ^ Math.imul(p + 1, 0x85ebca77)) >>> 0), (p - p0) * s);
  return out;
}

/** What one block of rows adds in a pass. */
export interface RangeBlock {
  /** The block's rows of Y = C·Z (n × l, row-major). */
  y: Float64Array;
  /** Its part of W = Cᵀ·Y (D × l, row-major). */
  w: Float64Array;
  /** Column sums of the block's rows (uncentred), D values. */
  colSum: Float64Array;
  /** Σ of the squared entries of the block's rows after subtracting `centre` (or uncentred). */
  sumSq: number;
}

/**
 * One block of rows a (n × d, row-major) against Z (d × l, row-major): its rows of Y = (a − 1·centreᵀ)·Z
 * and its part of W = (a − 1·centreᵀ)ᵀ·Y. With `centre` null the block is taken as it is.
 * This is the plain reference of the hot loop.
 */
export function rangeBlock(a: Float64Array, n: number, d: number, z: Float64Array, l: number, centre: Float64Array | null,
  /** One-pass sketch: W = aᵀ·psi (psi: n × s) instead of aᵀ·Y. */
  psi?: { rows: Float64Array; s: number }): RangeBlock {
  if (a.length < n * d) throw new RangeError(`range block: ${a.length} values, expected ${n}×${d}`);
  if (z.length !== d * l) throw new RangeError(`range block: Z holds ${z.length} values, expected ${d}×${l}`);
  const y = new Float64Array(n * l);
  const wl = psi ? psi.s : l;
  const w = new Float64Array(d * wl);
  const colSum = new Float64Array(d);
  const row = new Float64Array(d);
  let sumSq = 0;
  for (let i = 0; i < n; i++) {
    const off = i * d;
    for (let j = 0; j < d; j++) {
      const v = a[off + j];
      colSum[j] += v;
      const c = centre ? v - centre[j] : v;
      row[j] = c;
      sumSq += c * c;
    }
    const yi = i * l;
    for (let j = 0; j < d; j++) {
      const c = row[j];
      if (c === 0) continue;
      const zj = j * l;
      for (let k = 0; k < l; k++) y[yi + k] += c * z[zj + k];
    }
    const right = psi ? psi.rows : y;
    const ri = i * wl;
    for (let j = 0; j < d; j++) {
      const c = row[j];
      if (c === 0) continue;
      const wj = j * wl;
      for (let k = 0; k < wl; k++) w[wj + k] += c * right[ri + k];
    }
  }
  return { y, w, colSum, sumSq };
}

/**
 * Orthonormal columns spanning those of M (rows × cols, row-major): Q = M·T, by classical
 * Gram–Schmidt applied twice per column. A column whose remainder is below `relTol` of its
 * original norm (dependent on the ones before) becomes zero in Q and in T. Returns the rank.
 */
export function orthonormalize(m: Float64Array, rows: number, cols: number, relTol = 1e-10): { q: Float64Array; t: Float64Array; rank: number } {
  const q = Float64Array.from(m);
  const t = new Float64Array(cols * cols);
  for (let c = 0; c < cols; c++) t[c * cols + c] = 1;
  const col = (c: number) => { const v = new Float64Array(rows); for (let i = 0; i < rows; i++) v[i] = q[i * cols + c]; return v; };
  const kept: Float64Array[] = [];
  let rank = 0;
  for (let c = 0; c < cols; c++) {
    const v = col(c);
    const tc = new Float64Array(cols);
    tc[c] = 1;
    let norm0 = 0;
    for (let i = 0; i < rows; i++) norm0 += v[i] * v[i];
    norm0 = Math.sqrt(norm0);
    for (let pass = 0; pass < 2; pass++) {
      for (let p = 0; p < c; p++) {
        const qp = kept[p];
        if (!qp) continue;
        let dot = 0;
        for (let i = 0; i < rows; i++) dot += qp[i] * v[i];
        if (dot === 0) continue;
        for (let i = 0; i < rows; i++) v[i] -= dot * qp[i];
        // q_p = M·t_p: subtracting dot·q_p from v subtracts dot·t_p from its coefficients.
        for (let r = 0; r < cols; r++) tc[r] -= dot * t[r * cols + p];
      }
    }
    let norm = 0;
    for (let i = 0; i < rows; i++) norm += v[i] * v[i];
    norm = Math.sqrt(norm);
    if (!(norm0 > 0) || norm <= relTol * norm0) {
      kept[c] = undefined as unknown as Float64Array;
      for (let i = 0; i < rows; i++) q[i * cols + c] = 0;
      for (let r = 0; r < cols; r++) t[r * cols + c] = 0;
      continue;
    }
    rank++;
    for (let i = 0; i < rows; i++) { v[i] /= norm; q[i * cols + c] = v[i]; }
    for (let r = 0; r < cols; r++) t[r * cols + c] = tc[r] / norm;
    kept[c] = v;
  }
  return { q, t, rank };
}

/** The rank-k SVD from the last pass: C ≈ U·diag(σ)·Vᵀ. */
export interface RandomizedSvd {
  singularValues: Float64Array;
  /** N × k, row-major: left singular vectors (unit columns). */
  u: Float64Array;
  /** D × k, row-major: right singular vectors (unit columns). */
  v: Float64Array;
  k: number;
  /** Independent directions found in the sketch (≤ l); k is at most this. */
  rank: number;
}

/**
 * From the last pass's Y = C·Z (N × l) and W = Cᵀ·Y (D × l): Q = orth(Y) = Y·T, B = Qᵀ·C = (W·T)ᵀ,
 * B = Ũ·Σ·Vᵀ, U = Q·Ũ; the top k kept. Signs are fixed so each right singular vector's
 * entry of largest magnitude is positive.
 */
export async function finishRandomizedSvd(y: Float64Array, w: Float64Array, n: number, d: number, l: number, k: number): Promise<RandomizedSvd> {
  const { q, t, rank } = orthonormalize(y, n, l);
  // Bᵀ = W·T (d × l).
  const bt = new Float64Array(d * l);
  for (let j = 0; j < d; j++) {
    for (let c = 0; c < l; c++) {
      let s = 0;
      for (let r = 0; r < l; r++) s += w[j * l + r] * t[r * l + c];
      bt[j * l + c] = s;
    }
  }
  return await svdOfProjection(q, bt, n, d, l, k, rank);
}

/**
 * The rank-k SVD of Q·B, with Q (n × l) orthonormal columns and Bᵀ given (d × l): Bᵀ = V·Σ·Ũᵀ,
 * U = Q·Ũ; signs fixed so each right singular vector's largest-magnitude entry is positive.
 */
export async function svdOfProjection(q: Float64Array, btValues: Float64Array, n: number, d: number, l: number, k: number, rank: number): Promise<RandomizedSvd> {
  // Loaded when first needed: the workers and the commands that make no PCA never load it.
  const { Matrix, SingularValueDecomposition } = await import('ml-matrix');
  const bt = new Matrix(d, l);
  for (let j = 0; j < d; j++) for (let c = 0; c < l; c++) bt.set(j, c, btValues[j * l + c]);
  const svd = new SingularValueDecomposition(bt, { computeLeftSingularVectors: true, computeRightSingularVectors: true, autoTranspose: true });
  const sigma = svd.diagonal;
  const order = sigma.map((s, i) => [s, i] as const).sort((a, b) => b[0] - a[0]).map(([, i]) => i);
  const kk = Math.min(k, rank);
  const V = svd.leftSingularVectors; // d × l
  const Ut = svd.rightSingularVectors; // l × l (Ũ)
  const singularValues = new Float64Array(kk);
  const u = new Float64Array(n * kk);
  const v = new Float64Array(d * kk);
  for (let c = 0; c < kk; c++) {
    const src = order[c];
    singularValues[c] = sigma[src];
    let big = 0, bigAbs = -1;
    for (let j = 0; j < d; j++) { const x = V.get(j, src); if (Math.abs(x) > bigAbs) { bigAbs = Math.abs(x); big = x; } }
    const sign = big < 0 ? -1 : 1;
    for (let j = 0; j < d; j++) v[j * kk + c] = sign * V.get(j, src);
    // U = Q·Ũ
    for (let i = 0; i < n; i++) {
      let s = 0;
      for (let r = 0; r < l; r++) s += q[i * l + r] * Ut.get(r, src);
      u[i * kk + c] = sign * s;
    }
  }
  return { singularValues, u, v, k: kk, rank };
}
