// The centre-of-mass field from the per-pattern sums: COM = Σ I·x / Σ I → descan → rotation
// and flip (given, or by least curl) → magnitude, direction, divergence, curl → integrated
// phase → calibrated units. One result object, whatever asks for it (CLI, app, session).
import type { ComCalibration, ComFieldRequest, ComFieldResult, ComMap } from '../../src-shared/contract/service';
import type { DatasetDescriptor } from '../../src-shared/model/dataset';
import { InputError } from '../../src-shared/model/errors';
import { compileRegion } from '../../src-shared/compute/region-masks';
import { curl, descan, divergence, estimateRotation, integrateCom, magnitudeDirection, rotateCom, type DescanMode } from '../../src-shared/compute/com-field';
import { electronWavelengthPm } from '../../src-shared/compute/wavelength';
import type { ComSumsResult } from './analyses';
import type { FirstPassComSums } from './first-pass';
import type { VacuumFinding } from '../../src-shared/compute/vacuum';

export interface ComDefaults {
  mode: DescanMode;
  /** How the descan came about, for the result. */
  descan: string;
  vacuum: ComFieldResult['vacuum'];
  /** Vacuum positions that settle the half-turn, when any. */
  vacuumMask: Uint8Array | null;
}

/**
 * The descan and vacuum a request gets. Unless the request says otherwise, vacuum found in the
 * scan is the descan reference (and settles the half-turn); without vacuum the mean COM is
 * removed. Rotation always acts on shifts: with 'none', shifts are taken from the bright-field
 * disk centre (`origin`).
 */
export function comDefaults(req: ComFieldRequest, scanY: number, scanX: number, found: VacuumFinding | null): ComDefaults {
  const vacuumFound = found?.mask ? found : null;
  if (req.descan?.kind === 'reference') {
    const mask = compileRegion({ kind: 'rectangle', ...req.descan.region }, scanY, scanX);
    let positions = 0;
    for (const b of mask) positions += b ? 1 : 0;
    return { mode: { kind: 'reference', mask }, descan: 'reference (region given)', vacuum: { source: 'given', positions }, vacuumMask: mask };
  }
  const vacuum: ComFieldResult['vacuum'] = vacuumFound
    ? { source: 'found', positions: vacuumFound.positions, gapSigmas: vacuumFound.gapSigmas }
    : { source: 'none', positions: 0, ...(found ? { gapSigmas: found.gapSigmas } : {}) };
  const vacuumMask = vacuumFound?.mask ?? null;
  if (req.descan === undefined) {
    if (vacuumMask) return { mode: { kind: 'reference', mask: vacuumMask }, descan: 'reference (vacuum found)', vacuum, vacuumMask };
    return { mode: { kind: 'mean' }, descan: 'mean (no vacuum found)', vacuum, vacuumMask };
  }
  const kind = req.descan.kind;
  return { mode: { kind }, descan: kind === 'none' ? 'none (positions on the detector, turned about the bright-field disk centre)' : kind, vacuum, vacuumMask };
}

export function comFieldFromSums(
  sums: Pick<ComSumsResult, 'descriptor' | 'total' | 'sumX' | 'sumY' | 'nonFinite'>,
  req: ComFieldRequest,
  context: { defaults: ComDefaults; origin: { x: number; y: number }; comMask: string; badPixelsLeftOut: number; seconds: number; sumsFrom: ComFieldResult['sumsFrom'] },
): Omit<ComFieldResult, 'dataset'> {
  const d: DatasetDescriptor = sums.descriptor;
  const { scanY, scanX } = d.shape;
  const n = scanY * scanX;
  const threshold = req.threshold ?? 0;
  const comX = new Float64Array(n), comY = new Float64Array(n);
  let zeroTotal = 0;
  for (let i = 0; i < n; i++) {
    const t = sums.total[i];
    if (t === 0) { comX[i] = NaN; comY[i] = NaN; zeroTotal++; continue; }
    comX[i] = sums.sumX[i] / t;
    comY[i] = sums.sumY[i] / t;
  }
  if (zeroTotal === n) {
    throw new InputError(`${d.path}: every pattern has zero total intensity${req.maskDisk || threshold ? ' inside the COM mask above the threshold' : ''}, so no centre of mass can be computed; expected patterns with counts`);
  }
  const notes: string[] = [];
  const { mode, vacuumMask } = context.defaults;
  if (mode.kind === 'none') {
    // Rotation turns shifts, never absolute positions: measure them from the disk centre.
    for (let i = 0; i < n; i++) { comX[i] -= context.origin.x; comY[i] -= context.origin.y; }
  }
  const ds = descan(comX, comY, scanY, scanX, mode);
  let degrees: number, flip: boolean, estimate: ReturnType<typeof estimateRotation> | null = null;
  const rotation = req.rotation ?? 'auto';
  if (rotation === 'auto') {
    // Vacuum (found, or the reference region given) settles the 180° ambiguity: a specimen's
    // phase lies above vacuum's, its mean inner potential being positive (common practice).
    // The half-turn is judged on the field referenced to vacuum whatever the descan asked for
    // (a plane through the whole scan leaves a gradient over vacuum that can turn the decision).
    estimate = estimateRotation(ds.comX, ds.comY, scanY, scanX, vacuumMask
      ? { vacuumMask, ...(mode.kind === 'reference' ? {} : { halfTurnField: { comX, comY } }) } : {});
    degrees = estimate.degrees;
    flip = estimate.flip;
    if (!vacuumMask) {
      notes.push(`no vacuum in the scan, so the half-turn is undetermined by curl: ${degrees.toFixed(1)}° was chosen over ${estimate.alternativeDegrees.toFixed(1)}° ` +
        `because the integrated phase is then skewed positive (score ${estimate.halfTurnScore.toFixed(2)}; near 0 is a guess); give a vacuum region or the rotation by hand to be sure`);
    }
    if (estimate.curlRelative > 0.5) {
      notes.push(`the COM field has about as much curl at every angle (relative curl ${estimate.curlRelative.toFixed(2)}), so the rotation estimate is weak; give the rotation and flip by hand if you know them`);
    }
  } else {
    degrees = rotation.degrees;
    flip = rotation.flip;
  }
  // The estimate turned the field and integrated it already; with no descan the turn is about the disk centre, added back below.
  const reuse = estimate !== null && mode.kind !== 'none';
  const rotated = reuse ? estimate!.rotated : rotateCom(ds.comX, ds.comY, degrees, flip);
  if (mode.kind === 'none') {
    // No descan asked for: positions on the detector, turned about the disk centre (with no
    // rotation, exactly the plain Σ I·x / Σ I).
    for (let i = 0; i < n; i++) { rotated.comX[i] += context.origin.x; rotated.comY[i] += context.origin.y; }
  }
  const md = magnitudeDirection(rotated.comX, rotated.comY);
  const phase = reuse ? estimate!.phase : integrateCom(rotated.comX, rotated.comY, scanY, scanX);
  const maps: Record<string, ComMap> = {
    com_x: { data: rotated.comX, units: 'detector pixels' },
    com_y: { data: rotated.comY, units: 'detector pixels' },
    total_intensity: { data: sums.total, units: 'counts (sum of the pattern inside the COM mask)' },
    magnitude: { data: md.magnitude, units: 'detector pixels' },
    direction: { data: md.directionRadians, units: 'radians, atan2(com_y, com_x)' },
    divergence: { data: divergence(rotated.comX, rotated.comY, scanY, scanX), units: 'detector pixels per scan step' },
    curl: { data: curl(rotated.comX, rotated.comY, scanY, scanX), units: 'detector pixels per scan step' },
    phase: { data: phase.phase, units: 'detector pixels × scan steps (integrated COM)', note: 'Fourier integration, mirrored edges' },
  };
  let calibration: ComFieldResult['calibration'];
  if (req.calibration) {
    const c: ComCalibration = req.calibration;
    // For a weak phase object the beam is deflected by θ = (λ / 2π)·∇φ (common practice), so
    // φ[rad] = (2π / λ) ∫ θ dx: with θ = COM·mrad/px·1e-3 and dx in scan steps of scanStepNm.
    const lambdaNm = electronWavelengthPm(c.energyKeV) / 1000;
    const toRad = (2 * Math.PI / lambdaNm) * c.mradPerPixel * 1e-3 * c.scanStepNm;
    maps.com_x_mrad = { data: rotated.comX.map((x) => x * c.mradPerPixel), units: 'mrad' };
    maps.com_y_mrad = { data: rotated.comY.map((x) => x * c.mradPerPixel), units: 'mrad' };
    maps.phase_radians = { data: phase.phase.map((x) => x * toRad), units: 'radians (weak-phase approximation)' };
    calibration = { ...c, wavelengthPm: lambdaNm * 1000, radiansPerPhaseUnit: toRad };
  }
  return {
    descriptor: d,
    scanY,
    scanX,
    maps,
    rotation: {
      degrees, flip, source: estimate ? 'estimated (least curl)' : 'given',
      ...(estimate ? {
        alternativeDegrees: estimate.alternativeDegrees, curlRelative: estimate.curlRelative, smoothingSigma: estimate.smoothingSigma, halfTurnRule: estimate.halfTurnRule,
        halfTurnScore: estimate.halfTurnScore, halfTurnDetermined: vacuumMask !== null,
      } : {}),
    },
    descan: context.defaults.descan,
    vacuum: context.defaults.vacuum,
    descanRemoved: { x: ds.removedX, y: ds.removedY },
    threshold,
    comMask: context.comMask,
    sumsFrom: context.sumsFrom,
    zeroTotalPatterns: zeroTotal,
    badPixelsLeftOut: context.badPixelsLeftOut,
    nonFiniteInputs: sums.nonFinite,
    ...(calibration ? { calibration } : {}),
    notes,
    seconds: context.seconds,
  };
}

/** Σ I, Σ I·x, Σ I·y per position over the detector less the bad pixels, and the non-finite values met. */
export interface ComSumsOverGoodPixels {
  total: Float64Array;
  sumX: Float64Array;
  sumY: Float64Array;
  nonFinite: number;
}

/**
 * Whether detector pixel `i` may hold counts in some pattern, judged from the first pass's mean
 * and max patterns: not when it was never finite (max −∞) or zero everywhere. A bad pixel the
 * pass did not watch can be left out of sums made without it only when it holds none.
 */
export function mayHaveCounts(i: number, mean: Float64Array, max: Float64Array): boolean {
  return !(max[i] === -Infinity || (max[i] === 0 && mean[i] === 0));
}

/**
 * The first pass's COM sums turned into what the COM pass computes with its defaults (whole
 * detector less the bad pixels `bad`, no threshold): watched pixels that are not bad are added
 * back from their kept values. Null when a bad pixel was not watched and could have counts (a
 * pixel whose max and mean are 0, or never finite, adds nothing either way).
 */
export function comSumsLessBadPixels(c: Omit<FirstPassComSums, 'images'>, bad: Uint8Array, mean: Float64Array, max: Float64Array, detX: number): ComSumsOverGoodPixels | null {
  const watched = new Uint8Array(bad.length);
  for (const i of c.watch) watched[i] = 1;
  for (let i = 0; i < bad.length; i++) {
    if (bad[i] && !watched[i] && mayHaveCounts(i, mean, max)) return null;
  }
  const total = c.total.slice(), sumX = c.sumX.slice(), sumY = c.sumY.slice();
  let nonFinite = c.nonFinite;
  const nW = c.watch.length;
  for (let j = 0; j < nW; j++) {
    const i = c.watch[j];
    if (bad[i]) continue;
    const x = i % detX, y = (i - x) / detX;
    for (let p = 0; p < total.length; p++) {
      const v = c.watchValues[p * nW + j];
      if (!Number.isFinite(v)) { nonFinite++; continue; }
      total[p] += v;
      sumX[p] += v * x;
      sumY[p] += v * y;
    }
  }
  return { total, sumX, sumY, nonFinite };
}
