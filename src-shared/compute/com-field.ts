/**
 * Centre-of-mass (differential phase contrast) field maps: descan removal, detector-to-scan
 * rotation, divergence and curl, rotation estimation, integrated COM phase and polar form.
 *
 * Every map is row-major scanY × scanX (index y·scanX + x; x = scan column, y = scan row).
 * COM components are in detector pixels (x = detector column, y = detector row) until
 * rotateCom turns them into the scan frame. Positions whose pattern summed to zero arrive as
 * NaN: descan ignores them, rotateCom / divergence / curl / magnitudeDirection carry them
 * through (a derivative next to a NaN is NaN), and the FFT-based steps fill them first
 * (fillNonFinite: mean of the already known 4-neighbours, working inwards) and report how many.
 *
 * Rotation convention, used everywhere here:
 *   scan = R(θ) · T · detector, with T = [[0, 1], [1, 0]] when `flip` (the detector axes are
 *   transposed: (x, y) → (y, x)) and T = identity otherwise, and
 *   R(θ) = [[cos θ, −sin θ], [sin θ, cos θ]] acting on (x, y) column vectors.
 * On screen, with y pointing down, a positive θ turns a vector clockwise. A transpose equals a
 * mirror x → −x followed by a −90° rotation, so data described with the mirror convention
 * converts by shifting θ by 90°.
 */
import { InputError } from '../model/errors';
import { createFft2dPlan, cropTopLeft, mirrorPad } from './fft2d';

export type DescanMode =
  | { kind: 'none' }
  | { kind: 'mean' }
  /** mask: one byte per scan position, non-zero where the beam crossed a reference area such as vacuum. */
  | { kind: 'reference'; mask: Uint8Array }
  | { kind: 'plane' };

/** value(x, y) = a + b·x + c·y, with x, y in scan positions from the top-left corner. */
export interface PlaneFit {
  a: number;
  b: number;
  c: number;
}

export interface DescanResult {
  comX: Float64Array;
  comY: Float64Array;
  /** What was subtracted from each component (b = c = 0 for 'none', 'mean', 'reference'). */
  removedX: PlaneFit;
  removedY: PlaneFit;
}

export interface VectorField {
  comX: Float64Array;
  comY: Float64Array;
}

function checkScan(scanY: number, scanX: number): void {
  if (!Number.isInteger(scanY) || !Number.isInteger(scanX) || scanY < 1 || scanX < 1) {
    throw new RangeError(`scan shape must be positive integers, got ${scanY}×${scanX}`);
  }
}

function checkMap(name: string, map: ArrayLike<number>, scanY: number, scanX: number): void {
  if (map.length !== scanY * scanX) {
    throw new RangeError(`${name}: expected a ${scanY}×${scanX} map (${scanY * scanX} values), got ${map.length}`);
  }
}

/**
 * Remove the descan (the COM shift the scan itself causes, unrelated to the specimen).
 * NaN positions are left out of every fit and stay NaN.
 */
export function descan(
  comX: Float64Array,
  comY: Float64Array,
  scanY: number,
  scanX: number,
  mode: DescanMode,
): DescanResult {
  checkScan(scanY, scanX);
  checkMap('comX', comX, scanY, scanX);
  checkMap('comY', comY, scanY, scanX);
  let removedX: PlaneFit;
  let removedY: PlaneFit;
  switch (mode.kind) {
    case 'none':
      removedX = { a: 0, b: 0, c: 0 };
      removedY = { a: 0, b: 0, c: 0 };
      break;
    case 'mean':
      removedX = { a: finiteMean(comX, null, 'centre-of-mass x', 'the scan'), b: 0, c: 0 };
      removedY = { a: finiteMean(comY, null, 'centre-of-mass y', 'the scan'), b: 0, c: 0 };
      break;
    case 'reference':
      checkMap('reference mask', mode.mask, scanY, scanX);
      removedX = { a: finiteMean(comX, mode.mask, 'centre-of-mass x', 'the reference region'), b: 0, c: 0 };
      removedY = { a: finiteMean(comY, mode.mask, 'centre-of-mass y', 'the reference region'), b: 0, c: 0 };
      break;
    case 'plane':
      removedX = fitPlane(comX, scanY, scanX, 'centre-of-mass x');
      removedY = fitPlane(comY, scanY, scanX, 'centre-of-mass y');
      break;
    default: {
      const unknown: never = mode;
      throw new InputError(`descan correction: unknown mode ${JSON.stringify(unknown)}; expected none, mean, reference or plane`);
    }
  }
  return {
    comX: subtractPlane(comX, scanY, scanX, removedX),
    comY: subtractPlane(comY, scanY, scanX, removedY),
    removedX,
    removedY,
  };
}

function finiteMean(values: Float64Array, mask: Uint8Array | null, name: string, where: string): number {
  let sum = 0;
  let count = 0;
  for (let i = 0; i < values.length; i++) {
    if ((mask === null || mask[i] !== 0) && Number.isFinite(values[i])) {
      sum += values[i];
      count++;
    }
  }
  if (count === 0) {
    throw new InputError(`descan correction: ${where} has no scan position with a finite ${name}; expected at least one`);
  }
  return sum / count;
}

/** Least squares over the finite positions, in coordinates centred on their mean so the normal equations stay well conditioned. */
function fitPlane(values: Float64Array, scanY: number, scanX: number, name: string): PlaneFit {
  let n = 0;
  let sx = 0;
  let sy = 0;
  let sz = 0;
  for (let y = 0, i = 0; y < scanY; y++) {
    for (let x = 0; x < scanX; x++, i++) {
      const v = values[i];
      if (!Number.isFinite(v)) continue;
      n++;
      sx += x;
      sy += y;
      sz += v;
    }
  }
  if (n === 0) throw new InputError(`descan correction: no scan position has a finite ${name}; expected at least one to fit a plane`);
  const mx = sx / n;
  const my = sy / n;
  const mz = sz / n;
  let sxx = 0;
  let syy = 0;
  let sxy = 0;
  let sxz = 0;
  let syz = 0;
  for (let y = 0, i = 0; y < scanY; y++) {
    for (let x = 0; x < scanX; x++, i++) {
      const v = values[i];
      if (!Number.isFinite(v)) continue;
      const dx = x - mx;
      const dy = y - my;
      const dz = v - mz;
      sxx += dx * dx;
      syy += dy * dy;
      sxy += dx * dy;
      sxz += dx * dz;
      syz += dy * dz;
    }
  }
  let b = 0;
  let c = 0;
  // A single scan row (or column) determines no slope across it: that slope is left at zero.
  if (sxx > 0 && syy > 0) {
    const det = sxx * syy - sxy * sxy;
    if (!(det > 1e-12 * sxx * syy)) {
      throw new InputError(`descan correction: the finite ${name} values lie on one line of the scan; expected positions off that line to fit a plane`);
    }
    b = (sxz * syy - syz * sxy) / det;
    c = (syz * sxx - sxz * sxy) / det;
  } else if (sxx > 0) {
    b = sxz / sxx;
  } else if (syy > 0) {
    c = syz / syy;
  }
  return { a: mz - b * mx - c * my, b, c };
}

function subtractPlane(values: Float64Array, scanY: number, scanX: number, p: PlaneFit): Float64Array {
  const out = new Float64Array(values.length);
  for (let y = 0, i = 0; y < scanY; y++) {
    for (let x = 0; x < scanX; x++, i++) out[i] = values[i] - (p.a + p.b * x + p.c * y);
  }
  return out;
}

/** Detector-frame COM to scan frame: scan = R(θ)·T·detector (see the convention at the top of this file). */
export function rotateCom(comX: Float64Array, comY: Float64Array, degrees: number, flip: boolean): VectorField {
  if (comX.length !== comY.length) throw new RangeError(`rotateCom: comX has ${comX.length} values, comY ${comY.length}`);
  const theta = (degrees * Math.PI) / 180;
  const cos = Math.cos(theta);
  const sin = Math.sin(theta);
  const u = flip ? comY : comX;
  const v = flip ? comX : comY;
  const outX = new Float64Array(comX.length);
  const outY = new Float64Array(comX.length);
  for (let i = 0; i < comX.length; i++) {
    outX[i] = cos * u[i] - sin * v[i];
    outY[i] = sin * u[i] + cos * v[i];
  }
  return { comX: outX, comY: outY };
}

/**
 * ∂f/∂x accumulated into `out` with weight `sign`: central differences inside, one-sided at
 * the first and last column (np.gradient's edge_order=1), spacing one scan position.
 */
function addDx(f: Float64Array, scanY: number, scanX: number, sign: number, out: Float64Array): void {
  if (scanX === 1) return;
  for (let y = 0; y < scanY; y++) {
    const r = y * scanX;
    out[r] += sign * (f[r + 1] - f[r]);
    for (let x = 1; x < scanX - 1; x++) out[r + x] += sign * 0.5 * (f[r + x + 1] - f[r + x - 1]);
    out[r + scanX - 1] += sign * (f[r + scanX - 1] - f[r + scanX - 2]);
  }
}

function addDy(f: Float64Array, scanY: number, scanX: number, sign: number, out: Float64Array): void {
  if (scanY === 1) return;
  const last = (scanY - 1) * scanX;
  for (let x = 0; x < scanX; x++) {
    out[x] += sign * (f[scanX + x] - f[x]);
    out[last + x] += sign * (f[last + x] - f[last - scanX + x]);
  }
  for (let y = 1; y < scanY - 1; y++) {
    const r = y * scanX;
    for (let x = 0; x < scanX; x++) out[r + x] += sign * 0.5 * (f[r + scanX + x] - f[r - scanX + x]);
  }
}

/** ∂gx/∂x + ∂gy/∂y per scan position (units of the field per scan step). */
export function divergence(gx: Float64Array, gy: Float64Array, scanY: number, scanX: number): Float64Array {
  checkScan(scanY, scanX);
  checkMap('gx', gx, scanY, scanX);
  checkMap('gy', gy, scanY, scanX);
  const out = new Float64Array(scanY * scanX);
  addDx(gx, scanY, scanX, 1, out);
  addDy(gy, scanY, scanX, 1, out);
  return out;
}

/** The out-of-plane curl ∂gy/∂x − ∂gx/∂y per scan position. */
export function curl(gx: Float64Array, gy: Float64Array, scanY: number, scanX: number): Float64Array {
  checkScan(scanY, scanX);
  checkMap('gx', gx, scanY, scanX);
  checkMap('gy', gy, scanY, scanX);
  const out = new Float64Array(scanY * scanX);
  addDx(gy, scanY, scanX, 1, out);
  addDy(gx, scanY, scanX, -1, out);
  return out;
}

/**
 * Replace NaN / ±Inf by the mean of their finite (or already filled) 4-neighbours, in layers
 * working inwards from the known values, so a hole of any size fills smoothly in one O(N) pass.
 */
export function fillNonFinite(values: Float64Array, scanY: number, scanX: number, name = 'map'): { filled: Float64Array; count: number } {
  checkScan(scanY, scanX);
  checkMap(name, values, scanY, scanX);
  const n = values.length;
  const filled = Float64Array.from(values);
  const known = new Uint8Array(n);
  let count = 0;
  for (let i = 0; i < n; i++) {
    if (Number.isFinite(values[i])) known[i] = 1;
    else count++;
  }
  if (count === 0) return { filled, count };
  if (count === n) throw new InputError(`${name}: every scan position is NaN or infinite; expected at least one finite value`);

  const queued = new Uint8Array(n);
  let layer: number[] = [];
  const enqueueUnknownNeighbours = (i: number, into: number[]) => {
    const y = Math.floor(i / scanX);
    const x = i - y * scanX;
    const visit = (j: number) => {
      if (!known[j] && !queued[j]) {
        queued[j] = 1;
        into.push(j);
      }
    };
    if (x > 0) visit(i - 1);
    if (x < scanX - 1) visit(i + 1);
    if (y > 0) visit(i - scanX);
    if (y < scanY - 1) visit(i + scanX);
  };
  for (let i = 0; i < n; i++) if (known[i]) enqueueUnknownNeighbours(i, layer);

  const layerValues: number[] = [];
  while (layer.length > 0) {
    // Each layer reads only earlier layers, so the result does not depend on visiting order.
    layerValues.length = 0;
    for (const i of layer) {
      const y = Math.floor(i / scanX);
      const x = i - y * scanX;
      let sum = 0;
      let k = 0;
      if (x > 0 && known[i - 1]) { sum += filled[i - 1]; k++; }
      if (x < scanX - 1 && known[i + 1]) { sum += filled[i + 1]; k++; }
      if (y > 0 && known[i - scanX]) { sum += filled[i - scanX]; k++; }
      if (y < scanY - 1 && known[i + scanX]) { sum += filled[i + scanX]; k++; }
      layerValues.push(sum / k);
    }
    for (let j = 0; j < layer.length; j++) {
      filled[layer[j]] = layerValues[j];
      known[layer[j]] = 1;
    }
    const next: number[] = [];
    for (const i of layer) enqueueUnknownNeighbours(i, next);
    layer = next;
  }
  return { filled, count };
}

export interface IntegrateComOptions {
  /**
   * High-pass regularisation: cutoff frequency k_c in cycles per scan step. The denominator
   * k² becomes k² + k_c², which damps variations slower than about 1/k_c positions (descan
   * residue, thickness ramps) and leaves finer detail unchanged. 0 (default) = none.
   */
  highPassCutoff?: number;
}

export interface IntegratedPhase {
  /** scanY × scanX; zero mean over the mirror-extended field. */
  phase: Float64Array;
  /** Positions where gx or gy was NaN / infinite; both were filled by fillNonFinite before the FFT. */
  nonFiniteCount: number;
}

/**
 * Integrated COM phase by Fourier integration (Lazić, Bosch & Lazar, Ultramicroscopy 160, 2016):
 *   φ = F⁻¹[ (kx·F[gx] + ky·F[gy]) / (2πi·(kx² + ky²)) ],  k = 0 term set to zero,
 * with k in cycles per scan step, so ∇φ ≈ (gx, gy) per scan step: φ has the units of g times
 * scan steps (for COM in detector pixels, multiply by the calibration to get radians).
 *
 * Before the transform, φ is assumed even-mirrored across every border; so gx is padded odd
 * in x and even in y, gy even in x and odd in y, to exactly 2·scanY × 2·scanX. That extension
 * is periodic without any seam (a Neumann boundary, the DCT-type Poisson solution), whereas
 * padding to the next power of two instead leaves a jump where the wrap-around meets, which
 * spreads a ramp over the whole map. Non-power-of-two doubled sizes use fft2d's Bluestein path.
 */
export function integrateCom(
  gx: Float64Array,
  gy: Float64Array,
  scanY: number,
  scanX: number,
  options: IntegrateComOptions = {},
): IntegratedPhase {
  checkScan(scanY, scanX);
  checkMap('gx', gx, scanY, scanX);
  checkMap('gy', gy, scanY, scanX);
  const cutoff = options.highPassCutoff ?? 0;
  if (!(cutoff >= 0) || !Number.isFinite(cutoff)) {
    throw new InputError(`integrated COM: high-pass cutoff must be a finite number ≥ 0 cycles per scan step, got ${cutoff}`);
  }
  const fx = fillNonFinite(gx, scanY, scanX, 'centre-of-mass x');
  const fy = fillNonFinite(gy, scanY, scanX, 'centre-of-mass y');
  let nonFiniteCount = 0;
  for (let i = 0; i < gx.length; i++) if (!Number.isFinite(gx[i]) || !Number.isFinite(gy[i])) nonFiniteCount++;

  const py = 2 * scanY;
  const px = 2 * scanX;
  const padX = mirrorPad(fx.filled, scanY, scanX, py, px, 1, -1);
  const padY = mirrorPad(fy.filled, scanY, scanX, py, px, -1, 1);

  // Both real fields go through one complex transform, z = gx + i·gy, and are separated by
  // Hermitian symmetry: F[gx](k) = (Z(k) + Z*(−k))/2, F[gy](k) = (Z(k) − Z*(−k))/(2i).
  const z = new Float64Array(2 * py * px);
  for (let i = 0; i < py * px; i++) {
    z[2 * i] = padX[i];
    z[2 * i + 1] = padY[i];
  }
  const plan = createFft2dPlan(py, px);
  plan.forward(z);

  const spectrum = new Float64Array(2 * py * px);
  const cutoff2 = cutoff * cutoff;
  for (let v = 0; v < py; v++) {
    const ky = (v < py - Math.floor(py / 2) ? v : v - py) / py;
    const vNeg = (py - v) % py;
    for (let u = 0; u < px; u++) {
      const i = v * px + u;
      if (i === 0) continue;
      const kx = (u < px - Math.floor(px / 2) ? u : u - px) / px;
      const iNeg = vNeg * px + ((px - u) % px);
      const zr = z[2 * i];
      const zi = z[2 * i + 1];
      const nr = z[2 * iNeg];
      const ni = -z[2 * iNeg + 1];
      const gxr = 0.5 * (zr + nr);
      const gxi = 0.5 * (zi + ni);
      const gyr = 0.5 * (zi - ni);
      const gyi = -0.5 * (zr - nr);
      const numR = kx * gxr + ky * gyr;
      const numI = kx * gxi + ky * gyi;
      const den = 2 * Math.PI * (kx * kx + ky * ky + cutoff2);
      // num / (i·den) = −i·num/den
      spectrum[2 * i] = numI / den;
      spectrum[2 * i + 1] = -numR / den;
    }
  }
  plan.inverse(spectrum);
  // The real part is the inverse of the Hermitian part of the spectrum; at the Nyquist row and
  // column, where k and −k share a bin, that drops the undefined derivative term, as it should.
  const real = new Float64Array(py * px);
  for (let i = 0; i < py * px; i++) real[i] = spectrum[2 * i];
  return { phase: cropTopLeft(real, py, px, scanY, scanX), nonFiniteCount };
}

/** |COM| and its direction atan2(y, x) in radians, (−π, π], measured from +x towards +y (clockwise on a y-down screen). */
export function magnitudeDirection(comX: Float64Array, comY: Float64Array): { magnitude: Float64Array; directionRadians: Float64Array } {
  if (comX.length !== comY.length) throw new RangeError(`magnitudeDirection: comX has ${comX.length} values, comY ${comY.length}`);
  const magnitude = new Float64Array(comX.length);
  const directionRadians = new Float64Array(comX.length);
  for (let i = 0; i < comX.length; i++) {
    magnitude[i] = Math.hypot(comX[i], comY[i]);
    directionRadians[i] = Math.atan2(comY[i], comX[i]);
  }
  return { magnitude, directionRadians };
}

export interface EstimateRotationOptions {
  /**
   * Scan positions over vacuum (non-zero bytes). When given, the half-turn is chosen so the
   * integrated phase over vacuum lies below the phase elsewhere (matter has a positive mean
   * inner potential); otherwise by positive skewness of the integrated phase.
   */
  vacuumMask?: Uint8Array;
  /**
   * With a vacuum mask: the field (same frame as comX, comY) the half-turn is judged on, when the
   * one given was descanned otherwise than against vacuum: e.g. the field before a plane through
   * the whole scan was taken out, which leaves a gradient over vacuum that integrates to a bowl
   * and can put vacuum on the wrong side. It is turned like the field and referenced to vacuum.
   */
  halfTurnField?: { comX: Float64Array; comY: Float64Array };
  /**
   * Gaussian widths (scan steps) tried on the field before its curl is measured; the one
   * leaving the least relative curl is used. Default [0, 1, 2]: counting noise is white and
   * its finite differences are as curled as they are divergent, so on a noisy scan the
   * unsmoothed estimate wanders by degrees, while the smooth part of the field carries the angle.
   */
  smoothingSigmas?: readonly number[];
}

export interface RotationEstimate {
  /** θ in [0, 360) for scan = R(θ)·T·detector (convention at the top of this file). */
  degrees: number;
  flip: boolean;
  /** RMS curl of the rotated field at θ, in the field's units per scan step. */
  curlAtBest: number;
  /** RMS divergence of the rotated field at θ. */
  divergenceAtBest: number;
  /** curlAtBest / divergenceAtBest: near 0 for a clean gradient field, near 1 when no angle is preferred. */
  curlRelative: number;
  /** The other half-turn branch, θ + 180°: exactly as curl-free, told apart only by halfTurnScore. */
  alternativeDegrees: number;
  /**
   * Evidence for the chosen half-turn (≥ 0; near 0 means the choice is a guess): the skewness
   * of the integrated phase, or with a vacuum mask, (mean phase − mean vacuum phase) / std(phase).
   * A large skewness is no proof: a specimen covering most of the view skews the phase the
   * wrong way just as clearly, which is what the vacuum mask is for.
   */
  halfTurnScore: number;
  halfTurnRule: 'positive-phase-skewness' | 'vacuum-phase-lowest';
  /**
   * The best angle (modulo 180°, half-turn not resolved) and its relative curl for the other
   * flip. Close to curlRelative means the flip is undetermined (e.g. a field varying along one axis only).
   */
  otherFlip: { degrees: number; curlRelative: number };
  /** Positions left out because the COM or a derivative there was not finite. */
  nonFiniteCount: number;
  /** Gaussian width (scan steps) of the smoothing under the chosen estimate; 0 = none. */
  smoothingSigma: number;
  /**
   * The field turned by the estimate (degrees, flip) and its integrated phase, as
   * rotateCom and integrateCom give them, so a caller using the estimate need not repeat the
   * integration (the half-turn negates both; negation is exact in floating point).
   */
  rotated: VectorField;
  phase: IntegratedPhase;
}

interface CurlDivSums {
  cc: number;
  dd: number;
  cd: number;
  count: number;
}

/**
 * Σ curl², Σ div², Σ curl·div of (u, v) and of the swapped field (v, u), from the four
 * derivative maps once: curl(u, v) = ∂v/∂x − ∂u/∂y, div(u, v) = ∂u/∂x + ∂v/∂y, and swapped,
 * curl(v, u) = ∂u/∂x − ∂v/∂y, div(v, u) = ∂v/∂x + ∂u/∂y (the same values curl and divergence give).
 */
function curlDivSums(u: Float64Array, v: Float64Array, scanY: number, scanX: number): { plain: CurlDivSums; flipped: CurlDivSums } {
  const n = scanY * scanX;
  const ux = new Float64Array(n), uy = new Float64Array(n), vx = new Float64Array(n), vy = new Float64Array(n);
  addDx(u, scanY, scanX, 1, ux);
  addDy(u, scanY, scanX, 1, uy);
  addDx(v, scanY, scanX, 1, vx);
  addDy(v, scanY, scanX, 1, vy);
  const plain = { cc: 0, dd: 0, cd: 0, count: 0 };
  const flipped = { cc: 0, dd: 0, cd: 0, count: 0 };
  for (let i = 0; i < n; i++) {
    const c = vx[i] - uy[i], d = ux[i] + vy[i];
    if (Number.isFinite(c) && Number.isFinite(d)) {
      plain.cc += c * c; plain.dd += d * d; plain.cd += c * d; plain.count++;
    }
    const cf = ux[i] - vy[i], df = vx[i] + uy[i];
    if (Number.isFinite(cf) && Number.isFinite(df)) {
      flipped.cc += cf * cf; flipped.dd += df * df; flipped.cd += cf * df; flipped.count++;
    }
  }
  return { plain, flipped };
}

/**
 * Gaussian smoothing of a map by normalised convolution (separable, truncated at 3σ): a
 * non-finite value has weight 0, and near an edge the weights are renormalised over the
 * positions inside, so the scan is neither padded nor wrapped. A non-finite position stays NaN
 * (it is left out, as without smoothing) and does not feed its neighbours.
 */
export function gaussianSmooth(values: Float64Array, scanY: number, scanX: number, sigma: number): Float64Array {
  checkScan(scanY, scanX);
  checkMap('map', values, scanY, scanX);
  if (!(sigma > 0)) throw new RangeError(`smoothing width must be > 0 scan steps, got ${sigma}`);
  const half = Math.ceil(3 * sigma);
  const kernel = new Float64Array(2 * half + 1);
  for (let k = -half; k <= half; k++) kernel[k + half] = Math.exp(-0.5 * (k / sigma) ** 2);
  let allFinite = true;
  for (let i = 0; i < values.length && allFinite; i++) allFinite = Number.isFinite(values[i]);
  // Non-finite values weigh 0: a copy with zeros there, and a 0/1 weight map. With every value
  // finite the weights separate, w(y, x) = wx(x)·wy(y): the kernel's sums clipped at the edges.
  const clean = allFinite ? values : values.map((v) => (Number.isFinite(v) ? v : 0));
  const weight = allFinite ? null : values.map((v) => (Number.isFinite(v) ? 1 : 0));
  const clippedSum = (i: number, n: number) => {
    let w = 0;
    for (let k = Math.max(-half, -i); k <= Math.min(half, n - 1 - i); k++) w += kernel[k + half];
    return w;
  };
  // Pass 1 along x; pass 2 along y, a whole row at a time.
  const sumX = new Float64Array(values.length);
  const weightX = weight ? new Float64Array(values.length) : null;
  for (let y = 0; y < scanY; y++) {
    const r = y * scanX;
    for (let x = 0; x < scanX; x++) {
      const k0 = Math.max(-half, -x), k1 = Math.min(half, scanX - 1 - x);
      let s = 0;
      for (let k = k0; k <= k1; k++) s += kernel[k + half] * clean[r + x + k];
      sumX[r + x] = s;
      if (weight && weightX) {
        let w = 0;
        for (let k = k0; k <= k1; k++) w += kernel[k + half] * weight[r + x + k];
        weightX[r + x] = w;
      }
    }
  }
  const wx = Float64Array.from({ length: scanX }, (_, x) => clippedSum(x, scanX));
  const out = new Float64Array(values.length);
  const rowS = new Float64Array(scanX);
  const rowW = new Float64Array(scanX);
  for (let y = 0; y < scanY; y++) {
    rowS.fill(0);
    rowW.fill(0);
    for (let k = Math.max(-half, -y); k <= Math.min(half, scanY - 1 - y); k++) {
      const c = kernel[k + half];
      const r = (y + k) * scanX;
      for (let x = 0; x < scanX; x++) rowS[x] += c * sumX[r + x];
      if (weightX) for (let x = 0; x < scanX; x++) rowW[x] += c * weightX[r + x];
    }
    const r = y * scanX;
    if (!weight) {
      const wy = clippedSum(y, scanY);
      for (let x = 0; x < scanX; x++) out[r + x] = rowS[x] / (wx[x] * wy);
    } else {
      for (let x = 0; x < scanX; x++) out[r + x] = rowW[x] > 0 && weight[r + x] !== 0 ? rowS[x] / rowW[x] : Number.NaN;
    }
  }
  return out;
}

/**
 * The angle minimising Σ curl² of R(θ)·w. With R(θ) = cos θ·I + sin θ·J (J the 90° turn) and
 * curl(J·w) = div(w) for the same difference operators, curl(R(θ)w) = cos θ·curl w + sin θ·div w,
 * so Σ curl² = Scc·cos²θ + 2·Scd·sin θ cos θ + Sdd·sin²θ: a quadratic form in (cos θ, sin θ)
 * whose minimum is the smaller eigenvalue, reached in closed form. This is the exact
 * minimiser a coarse scan plus refinement would approach, with period 180°.
 */
function minimiseCurl(s: CurlDivSums): { degrees: number; energy: number; total: number } {
  const half = 0.5 * (s.cc - s.dd);
  const total = s.cc + s.dd;
  const energy = Math.max(0, 0.5 * total - Math.hypot(half, s.cd));
  const radians = 0.5 * Math.atan2(-s.cd, -half);
  return { degrees: normaliseDegrees((radians * 180) / Math.PI), energy, total };
}

function normaliseDegrees(d: number): number {
  const r = ((d % 360) + 360) % 360;
  return r >= 360 ? 0 : r;
}

function skewness(values: Float64Array): number {
  let mean = 0;
  for (let i = 0; i < values.length; i++) mean += values[i];
  mean /= values.length;
  let m2 = 0;
  let m3 = 0;
  for (let i = 0; i < values.length; i++) {
    const d = values[i] - mean;
    m2 += d * d;
    m3 += d * d * d;
  }
  m2 /= values.length;
  m3 /= values.length;
  return m2 > 0 ? m3 / Math.pow(m2, 1.5) : 0;
}

/**
 * The phase the half-turn is judged on, with a vacuum mask: that of the field less its mean over
 * vacuum, where the beam is not deflected. A field descanned some other way (the scan's mean, a
 * plane through the whole scan) keeps an offset over vacuum, which integrates to a ramp across
 * the scan large enough to put vacuum on the wrong side of the specimen; the decision must not
 * depend on how the user chose to descan. `phase` (that of `field`) is reused when the offset is already nil.
 */
function vacuumReferencedPhase(field: { comX: Float64Array; comY: Float64Array }, phase: Float64Array | null, mask: Uint8Array, scanY: number, scanX: number): Float64Array {
  const referenced = descan(field.comX, field.comY, scanY, scanX, { kind: 'reference', mask });
  const ox = referenced.removedX.a, oy = referenced.removedY.a;
  let spread = 0;
  for (let i = 0; i < field.comX.length; i++) if (Number.isFinite(field.comX[i]) && Number.isFinite(field.comY[i])) spread = Math.max(spread, Math.abs(field.comX[i]), Math.abs(field.comY[i]));
  if (phase && Math.abs(ox) <= 1e-12 * spread && Math.abs(oy) <= 1e-12 * spread) return phase;
  return integrateCom(referenced.comX, referenced.comY, scanY, scanX).phase;
}

function vacuumContrast(phase: Float64Array, mask: Uint8Array): number {
  let all = 0;
  let vacuum = 0;
  let nVacuum = 0;
  for (let i = 0; i < phase.length; i++) {
    all += phase[i];
    if (mask[i] !== 0) {
      vacuum += phase[i];
      nVacuum++;
    }
  }
  if (nVacuum === 0) throw new InputError('rotation estimate: the vacuum region contains no scan position; expected at least one');
  const mean = all / phase.length;
  let m2 = 0;
  for (let i = 0; i < phase.length; i++) m2 += (phase[i] - mean) ** 2;
  const sd = Math.sqrt(m2 / phase.length);
  return sd > 0 ? (mean - vacuum / nVacuum) / sd : 0;
}

/**
 * Rotation and flip that turn the detector-frame COM into a curl-free scan-frame field
 * (common practice: the COM of a thin specimen follows the gradient of a potential).
 *
 * The flip is decided by which of the two leaves less relative curl. Curl cannot tell θ from
 * θ + 180°; the half-turn is chosen so that the COM points up the phase gradient, towards the
 * potential maxima (first-order theory: the beam is pulled towards atoms, whose projected
 * potential and phase are positive). That is judged from the integrated phase of the rotated
 * field: with a vacuum mask, vacuum must be lowest; otherwise the phase must have positive
 * skewness (sharp positive peaks — atoms, particles — over a broader, lower background).
 * Where neither holds (a field with no sign preference, e.g. magnetic domains, or positive
 * matter covering most of the view), halfTurnScore is near zero or misleading and the caller
 * should offer alternativeDegrees too. Descan should be removed first: a residual ramp adds
 * no curl but does blur the phase statistics.
 */
export function estimateRotation(
  comX: Float64Array,
  comY: Float64Array,
  scanY: number,
  scanX: number,
  options: EstimateRotationOptions = {},
): RotationEstimate {
  checkScan(scanY, scanX);
  checkMap('comX', comX, scanY, scanX);
  checkMap('comY', comY, scanY, scanX);
  if (options.vacuumMask) checkMap('vacuum mask', options.vacuumMask, scanY, scanX);
  if (scanY < 2 || scanX < 2) {
    throw new InputError(
      `rotation estimate: a ${scanY}×${scanX} scan has neighbouring positions along one direction at most, and least curl needs both ` +
      '(along one line every angle fits); expected a 2-D scan, or give the rotation and flip by hand');
  }

  const sigmas = (options.smoothingSigmas ?? [0, 1, 2]).filter((s) => s === 0 || 4 * s < Math.min(scanY, scanX));
  if (sigmas.length === 0) sigmas.push(0);
  const relative = (m: { energy: number; total: number }) => (m.total > 0 ? m.energy / m.total : 0.5);
  let chosen: { sigma: number; plain: CurlDivSums; flipped: CurlDivSums; score: number } | null = null;
  for (const sigma of sigmas) {
    const u = sigma > 0 ? gaussianSmooth(comX, scanY, scanX, sigma) : comX;
    const v = sigma > 0 ? gaussianSmooth(comY, scanY, scanX, sigma) : comY;
    const { plain, flipped } = curlDivSums(u, v, scanY, scanX);
    if (plain.count === 0) continue;
    const score = Math.min(relative(minimiseCurl(plain)), relative(minimiseCurl(flipped)));
    if (chosen === null || score < chosen.score) chosen = { sigma, plain, flipped, score };
  }
  if (chosen === null) {
    throw new InputError(
      `rotation estimate: too few scan positions have a centre of mass (none of the ${scanY}×${scanX} positions has a finite one ` +
      'with finite neighbours; patterns with zero total intensity have none), so the rotation cannot be estimated; ' +
      'expected neighbouring scan positions with a centre of mass, or give the rotation and flip by hand',
    );
  }
  const { plain, flipped } = chosen;
  const bestPlain = minimiseCurl(plain);
  const bestFlipped = minimiseCurl(flipped);
  // Derivatives at rounding level next to the field's own size: a field that does not vary.
  let scale = 0;
  for (let i = 0; i < comX.length; i++) if (Number.isFinite(comX[i]) && Number.isFinite(comY[i])) scale = Math.max(scale, Math.abs(comX[i]), Math.abs(comY[i]));
  const flat = (b: { total: number }, count: number) => !(Math.sqrt(b.total / Math.max(1, count)) > 1e-9 * scale);
  if (flat(bestPlain, plain.count) && flat(bestFlipped, flipped.count)) {
    throw new InputError(
      'rotation estimate: the centre of mass does not change across the scan (no divergence or curl to judge by), so the rotation cannot be estimated; ' +
      'expected a field that varies, or give the rotation and flip by hand');
  }
  const flip = relative(bestFlipped) < relative(bestPlain);
  const best = flip ? bestFlipped : bestPlain;
  const other = flip ? bestPlain : bestFlipped;
  const sums = flip ? flipped : plain;

  const rotated = rotateCom(comX, comY, best.degrees, flip);
  const integrated = integrateCom(rotated.comX, rotated.comY, scanY, scanX);
  const { phase } = integrated;
  const halfTurnRule = options.vacuumMask ? 'vacuum-phase-lowest' : 'positive-phase-skewness';
  let score: number;
  if (options.vacuumMask) {
    const judged = options.halfTurnField ? rotateCom(options.halfTurnField.comX, options.halfTurnField.comY, best.degrees, flip) : rotated;
    score = vacuumContrast(vacuumReferencedPhase(judged, options.halfTurnField ? null : phase, options.vacuumMask, scanY, scanX), options.vacuumMask);
  } else {
    score = skewness(phase);
  }
  let degrees = best.degrees;
  if (score < 0) {
    degrees = normaliseDegrees(degrees + 180);
    score = -score;
    for (const a of [rotated.comX, rotated.comY, phase]) for (let i = 0; i < a.length; i++) a[i] = -a[i];
  }

  const curlAtBest = Math.sqrt(best.energy / sums.count);
  const divergenceAtBest = Math.sqrt(Math.max(0, best.total - best.energy) / sums.count);
  const otherDiv = Math.max(0, other.total - other.energy);
  return {
    degrees,
    flip,
    curlAtBest,
    divergenceAtBest,
    curlRelative: divergenceAtBest > 0 ? curlAtBest / divergenceAtBest : Number.NaN,
    alternativeDegrees: normaliseDegrees(degrees + 180),
    halfTurnScore: score,
    halfTurnRule,
    otherFlip: { degrees: other.degrees, curlRelative: otherDiv > 0 ? Math.sqrt(other.energy / otherDiv) : Number.NaN },
    nonFiniteCount: scanY * scanX - sums.count,
    smoothingSigma: chosen.sigma,
    rotated,
    phase: integrated,
  };
}
