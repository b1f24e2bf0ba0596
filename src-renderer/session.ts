// The app's state as a session file holds it (model/session.ts, AppSetup) and back, and which
// kept results belong to what the user still has (a deleted detector's image is not saved).
import type { AppSetup } from '../src-shared/model/session';
import type { KeptResult } from '../src-shared/contract/service';
import { COLORMAP_NAMES } from '../src-shared/model/colormaps';
import { INITIAL_STATE, type AppState, type ViewSettings } from './store';

/** Keys the app keeps its results under (JobOptions.keepAs). */
export const KEYS = {
  detector: (id: string) => `detector-${id}`,
  region: (id: string) => `region-${id}`,
  field: 'field', pca: 'pca', kmeans: 'kmeans', fit: 'fit', calibration: 'calibration',
} as const;

export function setupOf(s: AppState): AppSetup {
  const { dataset, ...rest } = s;
  return structuredClone({ ...rest, dataset: dataset && !dataset.absent ? dataset.id : null }) as unknown as AppSetup;
}

/** The kept keys that still belong to something the user has. */
export function keysToSave(kept: Iterable<string>, s: AppState): string[] {
  return [...kept].filter((k) => {
    if (k.startsWith('detector-')) return s.detectors.some((d) => KEYS.detector(d.id) === k);
    if (k.startsWith('region-')) return s.regions.some((g) => KEYS.region(g.id) === k);
    return true;
  });
}

const view = (v: Record<string, unknown>, fallback: ViewSettings): ViewSettings => {
  const colormap = COLORMAP_NAMES.includes(v.colormap as never) ? v.colormap : fallback.colormap;
  return { ...(v as unknown as ViewSettings), colormap } as ViewSettings;
};

/** The app's state from a session's setup (validated by the engine), on `dataset`. */
export function stateFromSetup(setup: AppSetup | null, dataset: AppState['dataset']): AppState {
  if (!setup) return { ...structuredClone(INITIAL_STATE), dataset };
  return {
    ...structuredClone(INITIAL_STATE),
    ...(setup as unknown as Omit<AppState, 'dataset'>),
    dataset,
    scanView: view(setup.scanView, INITIAL_STATE.scanView),
    patternView: view(setup.patternView, INITIAL_STATE.patternView),
  };
}

/** The results of a session by what they belong to. */
export function sortResults(results: KeptResult[]) {
  const one = <M extends KeptResult['method']>(key: string, method: M) => results.find((r) => r.key === key && r.method === method)?.result as KeptResult<M>['result'] | undefined;
  return {
    pca: one(KEYS.pca, 'pca'), kmeans: one(KEYS.kmeans, 'kmeans'), field: one(KEYS.field, 'comField'), fit: one(KEYS.fit, 'fit'), calibration: one(KEYS.calibration, 'calibrate'),
    detectors: results.filter((r) => r.key.startsWith('detector-') && r.method === 'virtualImages').map((r) => ({ id: r.key.slice('detector-'.length), result: r.result as KeptResult<'virtualImages'>['result'] })),
    regions: results.filter((r) => r.key.startsWith('region-') && r.method === 'regionPattern').map((r) => ({ id: r.key.slice('region-'.length), result: r.result as KeptResult<'regionPattern'>['result'] })),
    keys: results.map((r) => r.key),
  };
}
