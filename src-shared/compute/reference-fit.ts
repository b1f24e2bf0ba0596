/**
 * Reference fit (multiple linear regression with chosen references): every pattern's feature
 * vector f (D values) is fitted as a least-squares combination Σ c_i · r_i of r reference vectors
 * (the rows of R, r × D): c minimises ‖f − Rᵀc‖², optionally with c ≥ 0. Both are solved on the
 * normal equations G·c = b with G = R·Rᵀ (r × r, once) and b = R·f (per pattern): the plain fit
 * by a Cholesky factor of G, the non-negative one by the active-set method of Lawson & Hanson
 * (Solving Least Squares Problems, 1974) on the same small system. The residual is reported
 * relative to the pattern: ‖f − Rᵀc‖ / ‖f‖, where no reference explains what is there.
 */
import { InputError } from '../model/errors';

export interface FitPlan {
  r: number;
  d: number;
  /** r × D, row-major. */
  references: Float64Array;
  gram: Float64Array;
  /** Lower Cholesky factor of the Gram matrix, r × r. */
  chol: Float64Array;
}

/** Cholesky factor L (lower, row-major) of a symmetric positive definite n × n matrix, or null when it is not (numerically). */
export function cholesky(a: Float64Array, n: number, relTol = 1e-12): Float64Array | null {
  const l = new Float64Array(n * n);
  let maxDiag = 0;
  for (let i = 0; i < n; i++) maxDiag = Math.max(maxDiag, a[i * n + i]);
  for (let i = 0; i < n; i++) {
    for (let j = 0; j <= i; j++) {
      let s = a[i * n + j];
      for (let k = 0; k < j; k++) s -= l[i * n + k] * l[j * n + k];
      if (i === j) {
        if (!(s > relTol * maxDiag)) return null;
        l[i * n + i] = Math.sqrt(s);
      } else {
        l[i * n + j] = s / l[j * n + j];
      }
    }
  }
  return l;
}

/** Solve L·Lᵀ·x = b. */
function cholSolve(l: Float64Array, n: number, b: Float64Array): Float64Array {
  const y = new Float64Array(n);
  for (let i = 0; i < n; i++) { let s = b[i]; for (let k = 0; k < i; k++) s -= l[i * n + k] * y[k]; y[i] = s / l[i * n + i]; }
  const x = new Float64Array(n);
  for (let i = n - 1; i >= 0; i--) { let s = y[i]; for (let k = i + 1; k < n; k++) s -= l[k * n + i] * x[k]; x[i] = s / l[i * n + i]; }
  return x;
}

export function planFit(references: Float64Array, r: number, d: number): FitPlan {
  if (references.length !== r * d) throw new RangeError(`reference fit: ${references.length} values, expected ${r}×${d}`);
  for (let i = 0; i < references.length; i++) {
    if (!Number.isFinite(references[i])) throw new InputError('reference fit: a reference pattern holds NaN or ±Inf values; expected finite references', 'bad-input');
  }
  const gram = new Float64Array(r * r);
  for (let i = 0; i < r; i++) {
    for (let j = 0; j <= i; j++) {
      let s = 0;
      for (let x = 0; x < d; x++) s += references[i * d + x] * references[j * d + x];
      gram[i * r + j] = s;
      gram[j * r + i] = s;
    }
  }
  for (let i = 0; i < r; i++) {
    if (!(gram[i * r + i] > 0)) throw new InputError(`reference fit: reference ${i + 1} is all zero; expected references with counts`, 'bad-input');
  }
  const chol = cholesky(gram, r, 1e-10);
  if (!chol) {
    throw new InputError('reference fit: the references are linearly dependent (one is, or nearly is, a combination of the others), so their weights are not determined; expected references that differ', 'bad-input');
  }
  return { r, d, references, gram, chol };
}

/**
 * Non-negative least squares on the normal equations: minimise cᵀGc − 2bᵀc with c ≥ 0, by
 * Lawson & Hanson's active set. r is small, so each step solves a small system directly.
 */
export function nnlsNormal(g: Float64Array, b: Float64Array, r: number): Float64Array {
  const x = new Float64Array(r);
  const passive = new Uint8Array(r);
  // Gradient tolerance in b's units; coefficients leave the passive set only when they reach 0.
  const tol = 1e-12 * Math.max(1, ...Array.from(b, Math.abs));
  const skip = new Uint8Array(r);
  for (let outer = 0; outer < 3 * r + 10; outer++) {
    // Gradient of the objective's negative half: w = b − G·x.
    const w = new Float64Array(r);
    for (let i = 0; i < r; i++) { let s = b[i]; for (let j = 0; j < r; j++) s -= g[i * r + j] * x[j]; w[i] = s; }
    let pick = -1, best = tol;
    for (let i = 0; i < r; i++) if (!passive[i] && !skip[i] && w[i] > best) { best = w[i]; pick = i; }
    if (pick < 0) break;
    passive[pick] = 1;
    for (let inner = 0; inner < 3 * r + 10; inner++) {
      const idx = [...passive.keys()].filter((i) => passive[i]);
      const m = idx.length;
      const gp = new Float64Array(m * m), bp = new Float64Array(m);
      idx.forEach((i, a) => { bp[a] = b[i]; idx.forEach((j, c) => { gp[a * m + c] = g[i * r + j]; }); });
      const lp = cholesky(gp, m, 0);
      const z = lp ? cholSolve(lp, m, bp) : new Float64Array(m);
      if (z.every((v) => v > 0)) { x.fill(0); idx.forEach((i, a) => { x[i] = z[a]; }); break; }
      // The variable just added cannot rise (rounding): leave it out of this round.
      const justAdded = idx.indexOf(pick);
      if (inner === 0 && justAdded >= 0 && z[justAdded] <= 0) { passive[pick] = 0; skip[pick] = 1; break; }
      // Step towards z until a passive variable reaches zero; it leaves the passive set.
      let alpha = 1;
      idx.forEach((i, a) => { if (z[a] <= 0) alpha = Math.min(alpha, x[i] / (x[i] - z[a])); });
      // A coefficient that reached zero (to rounding, in the coefficients' own scale) leaves.
      let scale = 0;
      idx.forEach((i, a) => { scale = Math.max(scale, Math.abs(x[i]), Math.abs(z[a])); });
      idx.forEach((i, a) => { x[i] += alpha * (z[a] - x[i]); if (z[a] <= 0 && x[i] <= 1e-12 * scale) { x[i] = 0; passive[i] = 0; } });
    }
  }
  return x;
}

/**
 * Fit n feature rows (n × D): coefficients (n × r) and the relative residual ‖f − Rᵀc‖ / ‖f‖
 * (NaN for an all-zero pattern: 0/0, nothing to explain; 0 would read as fully explained).
 */
export function fitRows(features: Float64Array, n: number, plan: FitPlan, nonnegative: boolean): { coefficients: Float64Array; residual: Float64Array } {
  const { r, d, references, gram, chol } = plan;
  const coefficients = new Float64Array(n * r);
  const residual = new Float64Array(n);
  const b = new Float64Array(r);
  for (let p = 0; p < n; p++) {
    const off = p * d;
    let ff = 0;
    for (let x = 0; x < d; x++) ff += features[off + x] * features[off + x];
    for (let i = 0; i < r; i++) {
      let s = 0;
      for (let x = 0; x < d; x++) s += references[i * d + x] * features[off + x];
      b[i] = s;
    }
    const c = nonnegative ? nnlsNormal(gram, b, r) : cholSolve(chol, r, b);
    coefficients.set(c, p * r);
    // ‖f − Rᵀc‖² = ‖f‖² − 2cᵀb + cᵀGc, which can round below zero for a near-perfect fit: then
    // compute the residual vector itself.
    let cb = 0, cgc = 0;
    for (let i = 0; i < r; i++) { cb += c[i] * b[i]; for (let j = 0; j < r; j++) cgc += c[i] * gram[i * r + j] * c[j]; }
    let rr = ff - 2 * cb + cgc;
    if (!(rr > 1e-9 * ff)) {
      rr = 0;
      for (let x = 0; x < d; x++) {
        let v = features[off + x];
        for (let i = 0; i < r; i++) v -= c[i] * references[i * d + x];
        rr += v * v;
      }
    }
    residual[p] = ff > 0 ? Math.sqrt(rr / ff) : NaN;
  }
  return { coefficients, residual };
}
