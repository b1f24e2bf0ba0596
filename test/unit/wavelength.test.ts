import { spawnSync } from 'node:child_process';
import { describe, expect, it } from 'vitest';
import {
  ELECTRON_REST_ENERGY_KEV,
  electronLorentzFactor,
  electronSpeedOverC,
  electronWavelengthAngstrom,
  electronWavelengthPm,
} from '../../src-shared/compute/wavelength';
import { InputError } from '../../src-shared/model/errors';
import { PYTHON } from '../helpers/fixtures';

const VOLTAGES_KV = [0.1, 1, 10, 30, 60, 80, 100, 120, 200, 300, 1000, 3000, 10000];

// The formula evaluated independently by NumPy. SciPy (scipy.constants) is not installed for
// /usr/bin/python3, so the CODATA 2018 constants are typed into the script here, separately
// from the ones in src-shared/compute/wavelength.ts.
const NUMPY_SCRIPT = `
import json, sys
import numpy as np
h = np.float64(6.62607015e-34)      # J s, exact (SI 2019)
e = np.float64(1.602176634e-19)     # C, exact (SI 2019)
m0 = np.float64(9.1093837015e-31)   # kg, CODATA 2018
c = np.float64(299792458.0)         # m/s, exact
kv = np.array(json.loads(sys.argv[1]), dtype=np.float64)
V = kv * 1e3
lam_pm = h / np.sqrt(2 * m0 * e * V * (1 + e * V / (2 * m0 * c**2))) * 1e12
print(json.dumps({"numpy": np.__version__, "pm": lam_pm.tolist(), "rest_keV": float(m0 * c**2 / e / 1e3)}))
`;

function numpyReference(): { numpy: string; pm: number[]; rest_keV: number } {
  const p = spawnSync(PYTHON, ['-c', NUMPY_SCRIPT, JSON.stringify(VOLTAGES_KV)], { encoding: 'utf8' });
  if (p.status !== 0) throw new Error(`NumPy reference failed: ${p.stderr || p.error?.message}`);
  return JSON.parse(p.stdout);
}

describe('electronWavelengthPm', () => {
  it('matches the commonly tabulated values within 0.1 %', () => {
    // reference: handbook values, from memory: 100 kV 3.701 pm, 200 kV 2.508 pm, 300 kV 1.969 pm.
    for (const [kV, pm] of [[100, 3.701], [200, 2.508], [300, 1.969]]) {
      expect(Math.abs(electronWavelengthPm(kV) / pm - 1)).toBeLessThan(1e-3);
    }
  });

  it('matches the formula evaluated by NumPy from 0.1 kV to 10 MV', () => {
    const ref = numpyReference();
    // reference: NumPy (version in ref.numpy, 1.24 on Debian 12) evaluating the same formula in float64
    VOLTAGES_KV.forEach((kV, i) => {
      expect(Math.abs(electronWavelengthPm(kV) / ref.pm[i] - 1)).toBeLessThan(1e-13);
    });
    expect(Math.abs(ELECTRON_REST_ENERGY_KEV / ref.rest_keV - 1)).toBeLessThan(1e-13);
  });

  it('tends to the classical h / sqrt(2 m0 e V) at low voltage and to hc / eV at high voltage', () => {
    // reference: analytic limits; relative corrections are about eV / (4 m0c²) at low V and m0c² / eV at high V.
    const h = 6.62607015e-34, e = 1.602176634e-19, m0 = 9.1093837015e-31, c = 299792458;
    const classicalPm = (kV: number) => (h / Math.sqrt(2 * m0 * e * kV * 1e3)) * 1e12;
    const ultraRelativisticPm = (kV: number) => ((h * c) / (e * kV * 1e3)) * 1e12;
    expect(Math.abs(electronWavelengthPm(0.01) / classicalPm(0.01) - 1)).toBeLessThan(1e-5);
    expect(electronWavelengthPm(100) / classicalPm(100)).toBeLessThan(1 - 0.04); // relativity matters at 100 kV
    expect(Math.abs(electronWavelengthPm(10000) / ultraRelativisticPm(10000) - 1)).toBeLessThan(0.05);
  });

  it('gives ångströms, γ and β consistent with the same constants', () => {
    // reference: worked by hand; 200 kV: γ = 1 + 200 / 510.99895 = 1.391390, 1/γ² = 0.516538,
    // β = sqrt(1 − 0.516538) = 0.695314.
    expect(electronWavelengthAngstrom(200)).toBeCloseTo(electronWavelengthPm(200) / 100, 15);
    expect(ELECTRON_REST_ENERGY_KEV).toBeCloseTo(510.999, 3); // m0c², CODATA 2018: 510.99895 keV (from memory)
    expect(electronLorentzFactor(200)).toBeCloseTo(1.391390, 6);
    expect(electronSpeedOverC(200)).toBeCloseTo(0.695314, 6);
    // λ = h / (γ m0 β c) is the same momentum written another way.
    const h = 6.62607015e-34, m0 = 9.1093837015e-31, c = 299792458;
    const gamma = electronLorentzFactor(300), beta = electronSpeedOverC(300);
    expect(Math.abs(((h / (gamma * m0 * beta * c)) * 1e12) / electronWavelengthPm(300) - 1)).toBeLessThan(1e-12);
  });

  it('rejects voltages that are not finite, not positive or above 10 MV with InputError', () => {
    for (const bad of [0, -200, NaN, Infinity, -Infinity, 10001, Number('x')]) {
      expect(() => electronWavelengthPm(bad)).toThrow(InputError);
    }
    expect(() => electronWavelengthPm(0)).toThrow(/accelerating voltage/);
    expect(() => electronLorentzFactor(-1)).toThrow(InputError);
  });
});
