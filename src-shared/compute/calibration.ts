import { InputError } from '../model/errors';
import { electronWavelengthPm, validateAcceleratingVoltageKV } from './wavelength';

/**
 * Reciprocal-space (and real-space) calibration, with the unit in every name.
 *
 * Conventions:
 * - Spatial frequency k = 1/d in Å⁻¹ (no factor 2π): a lattice spacing d puts its Bragg disk at
 *   k = 1/d from the centre.
 * - θ is the scattering angle from the optical axis (for a Bragg reflection, 2θ_B), in rad.
 * - θ = λ·k, the small-angle form. Exactly, 2·sin(θ/2) = λ·k (Bragg's law, 2d·sin θ_B = λ), so
 *   θ = 2·asin(λk/2) ≈ λk·(1 + (λk)²/24); we use θ itself, not sin θ, so the relation stays
 *   linear and one number per pixel converts both ways. At 200 kV (λ ≈ 0.0251 Å) and
 *   k ≤ 2 Å⁻¹ (θ ≤ 50 mrad) the relative difference is below 1.1·10⁻⁴. A flat detector also
 *   records tan θ rather than θ (relative difference θ²/3, 8·10⁻⁴ at 50 mrad); a constant
 *   mrad per pixel ignores that too, as is common practice.
 * - Detector distances are in pixels from the bright-field disk's centre; the scan step is the
 *   distance between neighbouring probe positions, in nm.
 */
export type CalibrationSource = 'convergence-angle' | 'lattice-spacing';

export interface Calibration {
  /** Beam energy (kinetic energy of the electrons), keV; numerically the accelerating voltage in kV. */
  energyKeV: number;
  /** Relativistic electron wavelength at that energy, pm. */
  wavelengthPm: number;
  /** Scattering angle per detector pixel, mrad/px. */
  mradPerPixel: number;
  /** Spatial frequency per detector pixel, Å⁻¹/px. */
  inverseAngstromPerPixel: number;
  /** Distance between neighbouring probe positions, nm; absent when not given. */
  scanStepNm?: number;
  /** What the detector scale was derived from. */
  source: CalibrationSource;
}

export type CalibrationInput =
  | {
    source: 'convergence-angle';
    energyKeV: number;
    /** Probe convergence semi-angle α, mrad. */
    convergenceSemiAngleMrad: number;
    /** Radius of the bright-field disk, px (e.g. from findBrightFieldDisk). */
    diskRadiusPx: number;
    scanStepNm?: number;
  }
  | {
    source: 'lattice-spacing';
    energyKeV: number;
    /** A known lattice spacing d, Å. */
    latticeSpacingAngstrom: number;
    /** Distance of its Bragg disk from the bright-field disk's centre, px. */
    braggDistancePx: number;
    scanStepNm?: number;
  };

/**
 * Validate the input and fill in a Calibration:
 * - convergence angle: mrad/px = α / r_disk, then Å⁻¹/px = (mrad/px · 10⁻³) / λ[Å];
 * - lattice spacing: Å⁻¹/px = 1 / (d · g), then mrad/px = λ[Å] · Å⁻¹/px · 10³.
 */
export function calibrate(input: CalibrationInput): Calibration {
  if (input === null || typeof input !== 'object') {
    throw new InputError(`calibration settings: got ${String(input)}; expected an object naming the calibration source`);
  }
  validateAcceleratingVoltageKV(input.energyKeV, 'beam energy (energyKeV)');
  const wavelengthPm = electronWavelengthPm(input.energyKeV);
  const scanStepNm = input.scanStepNm === undefined ? undefined : positive(input.scanStepNm, 'scanStepNm', 'nm');
  let mradPerPixel: number;
  let inverseAngstromPerPixel: number;
  switch (input.source) {
    case 'convergence-angle': {
      const alphaMrad = positive(input.convergenceSemiAngleMrad, 'convergenceSemiAngleMrad', 'mrad');
      const radiusPx = positive(input.diskRadiusPx, 'diskRadiusPx', 'px');
      mradPerPixel = alphaMrad / radiusPx;
      inverseAngstromPerPixel = mradToInverseAngstrom(mradPerPixel, wavelengthPm);
      break;
    }
    case 'lattice-spacing': {
      const dAngstrom = positive(input.latticeSpacingAngstrom, 'latticeSpacingAngstrom', 'Å');
      const distancePx = positive(input.braggDistancePx, 'braggDistancePx', 'px');
      inverseAngstromPerPixel = 1 / (dAngstrom * distancePx);
      mradPerPixel = inverseAngstromToMrad(inverseAngstromPerPixel, wavelengthPm);
      break;
    }
    default:
      throw new InputError(
        `calibration source ${JSON.stringify((input as { source?: unknown }).source)} is not known; expected 'convergence-angle' or 'lattice-spacing'`,
      );
  }
  const calibration: Calibration = { energyKeV: input.energyKeV, wavelengthPm, mradPerPixel, inverseAngstromPerPixel, source: input.source };
  if (scanStepNm !== undefined) calibration.scanStepNm = scanStepNm;
  return calibration;
}

/** θ[mrad] → k[Å⁻¹] by k = θ / λ (small angle; see the conventions above). */
export function mradToInverseAngstrom(mrad: number, wavelengthPm: number): number {
  return (mrad * 1e-3) / (wavelengthPm / 100);
}

/** k[Å⁻¹] → θ[mrad] by θ = λ·k (small angle; see the conventions above). */
export function inverseAngstromToMrad(inverseAngstrom: number, wavelengthPm: number): number {
  return (wavelengthPm / 100) * inverseAngstrom * 1e3;
}

export function pixelsToMrad(px: number, cal: Calibration): number {
  return px * cal.mradPerPixel;
}

export function mradToPixels(mrad: number, cal: Calibration): number {
  return mrad / cal.mradPerPixel;
}

export function pixelsToInverseAngstrom(px: number, cal: Calibration): number {
  return px * cal.inverseAngstromPerPixel;
}

export function inverseAngstromToPixels(inverseAngstrom: number, cal: Calibration): number {
  return inverseAngstrom / cal.inverseAngstromPerPixel;
}

/** The lattice spacing, Å, whose Bragg disk lies `px` from the centre: d = 1 / k. */
export function latticeSpacingAngstromAtPixels(px: number, cal: Calibration): number {
  return 1 / (px * cal.inverseAngstromPerPixel);
}

/** A distance of `positions` scan steps, in nm. Throws InputError when the scan step is not calibrated. */
export function scanPositionsToNm(positions: number, cal: Calibration): number {
  if (cal.scanStepNm === undefined) {
    throw new InputError('scan step: not calibrated (scanStepNm is not set); expected the distance between probe positions in nm');
  }
  return positions * cal.scanStepNm;
}

/** Plain names for the calibration fields, for messages. */
const FIELD_LABELS: Record<string, string> = {
  scanStepNm: 'scan step',
  convergenceSemiAngleMrad: 'convergence semi-angle',
  diskRadiusPx: 'bright-field disk radius',
  latticeSpacingAngstrom: 'lattice spacing',
  braggDistancePx: 'Bragg disk distance',
};

function positive(value: number, name: string, unit: string): number {
  if (typeof value !== 'number' || !Number.isFinite(value) || value <= 0) {
    throw new InputError(`${FIELD_LABELS[name] ?? name} (${name}) = ${String(value)}; expected a finite number > 0 (${unit})`);
  }
  return value;
}
