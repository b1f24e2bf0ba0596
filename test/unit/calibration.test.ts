import { describe, expect, it } from 'vitest';
import {
  calibrate,
  inverseAngstromToMrad,
  inverseAngstromToPixels,
  latticeSpacingAngstromAtPixels,
  mradToInverseAngstrom,
  mradToPixels,
  pixelsToInverseAngstrom,
  pixelsToMrad,
  scanPositionsToNm,
} from '../../src-shared/compute/calibration';
import { InputError } from '../../src-shared/model/errors';

/** |a/b − 1|: the hand-worked numbers below are rounded to 5–6 significant digits. */
const rel = (a: number, b: number) => Math.abs(a / b - 1);

describe('calibrate from the convergence angle', () => {
  it('reproduces the hand-worked numbers (α = 20 mrad, r = 25 px, 200 kV)', () => {
    const cal = calibrate({ source: 'convergence-angle', energyKeV: 200, convergenceSemiAngleMrad: 20, diskRadiusPx: 25, scanStepNm: 0.5 });
    // reference: worked by hand.
    //   mrad/px = α / r = 20 mrad / 25 px = 0.8 mrad/px
    //   λ(200 kV) = 2.5079 pm = 0.025079 Å (handbook 2.508 pm, from memory; see wavelength.test.ts)
    //   Å⁻¹/px = θ / λ = 0.8e-3 rad / 0.025079 Å = 0.031899 Å⁻¹/px
    expect(cal.mradPerPixel).toBeCloseTo(0.8, 12);
    expect(rel(cal.wavelengthPm, 2.5079)).toBeLessThan(2e-5);
    expect(rel(cal.inverseAngstromPerPixel, 0.031899)).toBeLessThan(2e-5);
    expect(cal.energyKeV).toBe(200);
    expect(cal.scanStepNm).toBe(0.5);
    expect(cal.source).toBe('convergence-angle');
    // A disk edge at r = 25 px is at α, by construction: 25 px × 0.8 mrad/px = 20 mrad.
    expect(pixelsToMrad(25, cal)).toBeCloseTo(20, 12);
    // 40 px → 40 × 0.0318988 = 1.27595 Å⁻¹, the spacing 1 / 1.27595 = 0.78373 Å.
    expect(rel(pixelsToInverseAngstrom(40, cal), 1.27595)).toBeLessThan(2e-5);
    expect(rel(latticeSpacingAngstromAtPixels(40, cal), 0.78373)).toBeLessThan(2e-5);
    // 12 scan steps of 0.5 nm = 6 nm.
    expect(scanPositionsToNm(12, cal)).toBe(6);
  });

  it('scales with the wavelength: the same α and r at 100 and 300 kV', () => {
    // reference: worked by hand with the handbook wavelengths (from memory), k/px = 0.8e-3 / λ[Å]:
    //   100 kV: 0.8e-3 / 0.037014 Å = 0.021613 Å⁻¹/px;  300 kV: 0.8e-3 / 0.019687 Å = 0.040635 Å⁻¹/px
    const at = (kV: number) => calibrate({ source: 'convergence-angle', energyKeV: kV, convergenceSemiAngleMrad: 20, diskRadiusPx: 25 });
    expect(rel(at(100).inverseAngstromPerPixel, 0.021613)).toBeLessThan(3e-5);
    expect(rel(at(300).inverseAngstromPerPixel, 0.040635)).toBeLessThan(3e-5);
    expect(at(100).mradPerPixel).toBeCloseTo(0.8, 12);
    expect(at(300).scanStepNm).toBeUndefined();
  });
});

describe('calibrate from a lattice spacing', () => {
  it('reproduces the hand-worked numbers (d = 3.1356 Å at 40 px, 200 kV)', () => {
    // d = 3.1356 Å is Si (111), a = 5.431 Å / √3 (from memory); any spacing would do for the arithmetic.
    const cal = calibrate({ source: 'lattice-spacing', energyKeV: 200, latticeSpacingAngstrom: 3.1356, braggDistancePx: 40 });
    // reference: worked by hand.
    //   Å⁻¹/px = 1 / (d · g) = 1 / (3.1356 Å × 40 px) = 1 / 125.424 = 0.0079730 Å⁻¹/px
    //   mrad/px = λ · k = 0.025079 Å × 0.0079730 Å⁻¹ × 1e3 = 0.19996 mrad/px
    expect(rel(cal.inverseAngstromPerPixel, 0.0079730)).toBeLessThan(2e-5);
    expect(rel(cal.mradPerPixel, 0.19996)).toBeLessThan(5e-5);
    expect(cal.source).toBe('lattice-spacing');
    // Its own Bragg disk reads back as d.
    expect(latticeSpacingAngstromAtPixels(40, cal)).toBeCloseTo(3.1356, 10);
  });

  it('agrees with a convergence-angle calibration of the same geometry', () => {
    // reference: analytic consistency. If the disk (r = 25 px) is α = 20 mrad, a Bragg disk at
    // g = 60 px is at 48 mrad, i.e. k = 48e-3 / λ; a lattice calibration with d = 1/k at 60 px
    // must give the same scales.
    const byAngle = calibrate({ source: 'convergence-angle', energyKeV: 300, convergenceSemiAngleMrad: 20, diskRadiusPx: 25 });
    const k = mradToInverseAngstrom(48, byAngle.wavelengthPm);
    const byLattice = calibrate({ source: 'lattice-spacing', energyKeV: 300, latticeSpacingAngstrom: 1 / k, braggDistancePx: 60 });
    expect(rel(byLattice.mradPerPixel, byAngle.mradPerPixel)).toBeLessThan(1e-12);
    expect(rel(byLattice.inverseAngstromPerPixel, byAngle.inverseAngstromPerPixel)).toBeLessThan(1e-12);
  });
});

describe('converters', () => {
  it('convert mrad ↔ Å⁻¹ through λ with θ = λk (small angle)', () => {
    // reference: worked by hand. 10 mrad at λ = 2.5079 pm = 0.025079 Å: k = 0.010 / 0.025079 = 0.39874 Å⁻¹.
    expect(rel(mradToInverseAngstrom(10, 2.5079), 0.39874)).toBeLessThan(2e-5);
    // 1 Å⁻¹ at the same λ: θ = 0.025079 rad = 25.079 mrad.
    expect(inverseAngstromToMrad(1, 2.5079)).toBeCloseTo(25.079, 10);
    // The exact Bragg relation θ = 2 asin(λk/2) differs by (λk)²/24 ≈ 2.6e-5 here: the documented bound.
    const exactMrad = 2 * Math.asin(0.025079 / 2) * 1e3;
    expect(rel(inverseAngstromToMrad(1, 2.5079), exactMrad)).toBeLessThan(1.1e-4);
  });

  it('round-trip pixels ↔ mrad ↔ Å⁻¹', () => {
    const cal = calibrate({ source: 'convergence-angle', energyKeV: 80, convergenceSemiAngleMrad: 17.3, diskRadiusPx: 21.7 });
    for (const px of [0.5, 3, 21.7, 120]) {
      expect(mradToPixels(pixelsToMrad(px, cal), cal)).toBeCloseTo(px, 10);
      expect(inverseAngstromToPixels(pixelsToInverseAngstrom(px, cal), cal)).toBeCloseTo(px, 10);
      expect(mradToInverseAngstrom(pixelsToMrad(px, cal), cal.wavelengthPm)).toBeCloseTo(pixelsToInverseAngstrom(px, cal), 10);
    }
  });
});

describe('validation', () => {
  it('rejects bad numbers and unknown sources with InputError naming the field', () => {
    const ok = { source: 'convergence-angle' as const, energyKeV: 200, convergenceSemiAngleMrad: 20, diskRadiusPx: 25 };
    expect(() => calibrate({ ...ok, energyKeV: 0 })).toThrow(/energyKeV/);
    expect(() => calibrate({ ...ok, energyKeV: 2e5 })).toThrow(InputError);
    expect(() => calibrate({ ...ok, convergenceSemiAngleMrad: -3 })).toThrow(/convergenceSemiAngleMrad/);
    expect(() => calibrate({ ...ok, diskRadiusPx: NaN })).toThrow(/diskRadiusPx/);
    expect(() => calibrate({ ...ok, scanStepNm: 0 })).toThrow(/scanStepNm/);
    expect(() => calibrate({ source: 'lattice-spacing', energyKeV: 200, latticeSpacingAngstrom: Infinity, braggDistancePx: 40 })).toThrow(/latticeSpacingAngstrom/);
    expect(() => calibrate({ source: 'lattice-spacing', energyKeV: 200, latticeSpacingAngstrom: 2, braggDistancePx: 0 })).toThrow(/braggDistancePx/);
    expect(() => calibrate({ source: 'guess', energyKeV: 200 } as never)).toThrow(/source/);
    expect(() => scanPositionsToNm(3, calibrate(ok))).toThrow(/scanStepNm/);
  });
});
