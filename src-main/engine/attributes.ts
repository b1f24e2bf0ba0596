// Calibration values stored with a dataset (HDF5 attributes), read by calibration and by exported figures.

/**
 * Attribute names read for calibration values when the request leaves them out: only names that
 * carry their unit, so a value is never taken in the wrong unit (kV and keV agree for electrons).
 */
export const ENERGY_ATTRIBUTES = ['beam_energy_kev', 'energy_kev', 'accelerating_voltage_kv', 'high_tension_kv'] as const;
export const CONVERGENCE_ATTRIBUTES = ['convergence_semiangle_mrad', 'convergence_semi_angle_mrad', 'convergence_angle_mrad', 'semiangle_mrad'] as const;
export const SCAN_STEP_ATTRIBUTES = ['scan_step_nm', 'step_size_nm', 'pixel_size_nm'] as const;

/** The first attribute found among `names` (case-insensitive) as one positive number; a pair (y, x) counts when both agree. */
export function attributeValue(attrs: Record<string, number | number[] | string> | undefined, names: readonly string[]): { name: string; value: number } | null {
  if (!attrs) return null;
  for (const want of names) {
    const name = Object.keys(attrs).find((k) => k.toLowerCase() === want);
    if (!name) continue;
    const v = attrs[name];
    const value = typeof v === 'number' ? v : Array.isArray(v) && v.length > 0 && v.every((x) => x === v[0]) ? v[0] : NaN;
    if (Number.isFinite(value) && value > 0) return { name, value };
  }
  return null;
}

/**
 * The first attribute among `names` that is present but not one positive number (text, a
 * negative or non-finite value, a pair that disagrees), as written; null when none is. Said to
 * the user rather than treated as absent: "stores none" would send them looking for nothing.
 */
export function unusableAttribute(attrs: Record<string, number | number[] | string> | undefined, names: readonly string[]): { name: string; text: string } | null {
  if (!attrs) return null;
  for (const want of names) {
    const name = Object.keys(attrs).find((k) => k.toLowerCase() === want);
    if (!name) continue;
    if (attributeValue({ [want]: attrs[name] }, [want])) return null;
    return { name, text: JSON.stringify(attrs[name]) };
  }
  return null;
}

