import { InputError } from '../model/errors';

// CODATA 2018 values, written from memory. h, e and c are exact by the 2019 definition of the SI;
// the electron rest mass is the CODATA 2018 recommended value (relative uncertainty 3e-10).
export const PLANCK_CONSTANT_J_S = 6.62607015e-34;
export const ELEMENTARY_CHARGE_C = 1.602176634e-19;
export const ELECTRON_REST_MASS_KG = 9.1093837015e-31;
export const SPEED_OF_LIGHT_M_PER_S = 299792458;

/** Electron rest energy m₀c², in keV (≈ 510.999 keV). */
export const ELECTRON_REST_ENERGY_KEV =
  (ELECTRON_REST_MASS_KG * SPEED_OF_LIGHT_M_PER_S * SPEED_OF_LIGHT_M_PER_S) / ELEMENTARY_CHARGE_C / 1e3;

/** Microscopes run from a few kV to a few MV; above 10 MV the number is surely a unit slip. */
export const MAX_ACCELERATING_VOLTAGE_KV = 10_000;

/** Throws InputError unless `kV` is a usable accelerating voltage. `what` names the input in the message. */
export function validateAcceleratingVoltageKV(kV: number, what = 'accelerating voltage'): void {
  if (typeof kV !== 'number' || !Number.isFinite(kV) || kV <= 0 || kV > MAX_ACCELERATING_VOLTAGE_KV) {
    throw new InputError(
      `${what}: expected a finite number of kV in (0, ${MAX_ACCELERATING_VOLTAGE_KV}], got ${String(kV)}`,
    );
  }
}

/**
 * Relativistic electron wavelength λ = h / sqrt(2 m₀ e V (1 + eV / (2 m₀ c²))), in picometres,
 * for an electron accelerated from rest through `kV` kilovolts (e.g. 200 → ≈ 2.5079 pm).
 */
export function electronWavelengthPm(kV: number): number {
  validateAcceleratingVoltageKV(kV);
  const kineticEnergyJ = ELEMENTARY_CHARGE_C * kV * 1e3;
  const restEnergyJ = ELECTRON_REST_MASS_KG * SPEED_OF_LIGHT_M_PER_S * SPEED_OF_LIGHT_M_PER_S;
  const momentumKgMPerS = Math.sqrt(2 * ELECTRON_REST_MASS_KG * kineticEnergyJ * (1 + kineticEnergyJ / (2 * restEnergyJ)));
  return (PLANCK_CONSTANT_J_S / momentumKgMPerS) * 1e12;
}

/** The same wavelength in ångströms (1 Å = 100 pm), the unit reciprocal-space calibration works in. */
export function electronWavelengthAngstrom(kV: number): number {
  return electronWavelengthPm(kV) / 100;
}

/** Lorentz factor γ = 1 + eV / (m₀c²) of the beam electron. */
export function electronLorentzFactor(kV: number): number {
  validateAcceleratingVoltageKV(kV);
  return 1 + kV / ELECTRON_REST_ENERGY_KEV;
}

/** Electron speed as a fraction of c, β = sqrt(1 − 1/γ²). */
export function electronSpeedOverC(kV: number): number {
  validateAcceleratingVoltageKV(kV);
  // Written as sqrt(T(T + 2)) / (T + 1) with T = eV / m₀c², which keeps its precision at low voltage.
  const t = kV / ELECTRON_REST_ENERGY_KEV;
  return Math.sqrt(t * (t + 2)) / (t + 1);
}
