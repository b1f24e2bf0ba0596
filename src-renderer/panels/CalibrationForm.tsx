import { useEffect, useState } from 'react';
import type { CalibrationResult } from '../../src-shared/contract/service';
import type { CalibrationInput } from '../store';
import { fmt } from '../views/ImageView';

/** The calibration in the header: what it is, and a form for what the file does not say. */
export function CalibrationForm({ result, input, apply }: { result: CalibrationResult | null; input: CalibrationInput; apply(c: CalibrationInput): void }) {
  const [open, setOpen] = useState(false);
  const [draft, setDraft] = useState<Record<string, string>>({});
  useEffect(() => {
    setDraft({
      energyKeV: input.energyKeV?.toString() ?? '', convergenceMrad: input.convergenceMrad?.toString() ?? '',
      latticeSpacingAngstrom: input.latticeSpacingAngstrom?.toString() ?? '', scanStepNm: input.scanStepNm?.toString() ?? '',
    });
  }, [input]);
  const field = (key: string, label: string) => (
    <label key={key}>{label} <input aria-label={label} type="number" step="any" value={draft[key] ?? ''} placeholder={result?.valueSources[key] ? 'from the file' : ''}
      onChange={(e) => setDraft({ ...draft, [key]: e.target.value })} /></label>
  );
  const summary = result
    ? `${fmt(result.energyKeV)} keV · ${fmt(result.mradPerPixel)} mrad/px${result.scanStepNm ? ` · ${fmt(result.scanStepNm)} nm/step` : ''}`
    : 'not calibrated';
  return (
    <div className="calibration">
      <button type="button" onClick={() => setOpen(!open)} aria-expanded={open} title="beam energy, convergence semi-angle or a lattice spacing, scan step">{summary}</button>
      {open && (
        <form className="calibration-form" onSubmit={(e) => {
          e.preventDefault();
          const num = (k: string) => (draft[k] && Number.isFinite(Number(draft[k])) ? Number(draft[k]) : undefined);
          const c: CalibrationInput = { energyKeV: num('energyKeV'), convergenceMrad: num('convergenceMrad'), latticeSpacingAngstrom: num('latticeSpacingAngstrom'), scanStepNm: num('scanStepNm') };
          apply(Object.fromEntries(Object.entries(c).filter(([, v]) => v !== undefined)) as CalibrationInput);
          setOpen(false);
        }}>
          {field('energyKeV', 'beam energy (keV)')}
          {field('convergenceMrad', 'convergence semi-angle (mrad)')}
          {field('latticeSpacingAngstrom', 'or a lattice spacing (Å)')}
          {field('scanStepNm', 'scan step (nm)')}
          {result && <div className="hint">{Object.entries(result.valueSources).map(([k, v]) => `${k}: ${v}`).join('; ')}</div>}
          <button type="submit">calibrate</button>
        </form>
      )}
    </div>
  );
}
