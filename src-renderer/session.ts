// The app's state as a session file holds it (model/session.ts, AppSetup) and back, and which
// kept results belong to what the user still has (a deleted detector's image is not saved).
import type { AppSetup } from '../src-shared/model/session';
import type { KeptResult } from '../src-shared/contract/service';
import { CATEGORY_COLOURS, COLORMAP_NAMES } from '../src-shared/model/colormaps';
import type { DetectorShape } from '../src-shared/model/detectors';
import { INITIAL_STATE, type AppState, type RegionItemShape, type ViewSettings } from './store';

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

/**
 * Kept detector and region results that no state undo or redo can reach any more (`states`: the
 * store's history): the engine can forget them. A deleted detector's image stays kept while an
 * undo could bring the detector back.
 */
export function unreachableKeys(kept: Iterable<string>, states: AppState[]): string[] {
  const all = [...kept];
  const reachable = new Set(states.flatMap((s) => keysToSave(all, s)));
  return all.filter((k) => !reachable.has(k));
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

/**
 * The results of a session by what they show: the app's own keys first, else the last result
 * of each kind (a session built by the command line names them after its commands), and the
 * detectors and regions of results made outside the app, as items to list.
 */
export function sortResults(results: KeptResult[]) {
  const one = <M extends KeptResult['method']>(key: string, method: M) => {
    const own = results.find((r) => r.key === key && r.method === method) ?? results.filter((r) => r.method === method && !r.key.startsWith('detector-') && !r.key.startsWith('region-')).at(-1);
    return own?.result as KeptResult<M>['result'] | undefined;
  };
  const detectors: { id: string; name: string; shape: DetectorShape; image: Float64Array; scanX: number; scanY: number; own: boolean }[] = [];
  const regions: { id: string; name: string; shape: RegionItemShape | null; result: KeptResult<'regionPattern'>['result']; own: boolean }[] = [];
  for (const r of results) {
    if (r.method === 'virtualImages') {
      const v = r.result as KeptResult<'virtualImages'>['result'];
      const own = r.key.startsWith('detector-');
      const specs = (r.request.detectors ?? []) as { shape: DetectorShape; label?: string }[];
      v.images.forEach((image, i) => detectors.push({
        id: own ? r.key.slice('detector-'.length) : `${r.key}-${i + 1}`, name: v.labels[i] ?? `${r.key} ${i + 1}`, shape: specs[i]?.shape,
        image, scanX: v.descriptor.shape.scanX, scanY: v.descriptor.shape.scanY, own,
      }));
    } else if (r.method === 'regionPattern') {
      const own = r.key.startsWith('region-');
      regions.push({ id: own ? r.key.slice('region-'.length) : r.key, name: r.key, shape: (r.request.region ?? null) as RegionItemShape | null, result: r.result as KeptResult<'regionPattern'>['result'], own });
    }
  }
  return {
    pca: one(KEYS.pca, 'pca'), kmeans: one(KEYS.kmeans, 'kmeans'), field: one(KEYS.field, 'comField'), fit: one(KEYS.fit, 'fit'), calibration: one(KEYS.calibration, 'calibrate'),
    detectors, regions, keys: results.map((r) => r.key),
  };
}

/** Detectors and regions of results made outside the app, added to the setup so they can be shown and changed. */
export function withOutsideItems(s: AppState, sorted: ReturnType<typeof sortResults>): AppState {
  const colours = CATEGORY_COLOURS;
  const detectors = [...s.detectors];
  for (const d of sorted.detectors) {
    if (d.own || !d.shape || detectors.some((x) => x.id === d.id)) continue;
    detectors.push({ id: d.id, name: d.name, colour: colours[(detectors.length + 1) % colours.length], visible: true, shape: d.shape });
  }
  const regions = [...s.regions];
  for (const g of sorted.regions) {
    if (g.own || !g.shape || regions.some((x) => x.id === g.id)) continue;
    regions.push({ id: g.id, name: g.name, colour: colours[(regions.length + 4) % colours.length], visible: true, shape: g.shape });
  }
  return { ...s, detectors, regions };
}

/** What the views show first for a session without the app's setup (built by the command line): one of its results. */
export function showsForResults(s: AppState, sorted: ReturnType<typeof sortResults>): AppState {
  const scan: AppState['shows']['scan'] = sorted.field ? { kind: 'field', map: 'direction' } : sorted.pca ? { kind: 'loading', k: 0 }
    : sorted.kmeans ? { kind: 'clusters' } : s.detectors[0] ? { kind: 'detector', id: s.detectors[0].id } : s.shows.scan;
  const pattern: AppState['shows']['pattern'] = sorted.pca ? { kind: 'component', k: 0 } : sorted.kmeans ? { kind: 'cluster', k: 0 } : s.shows.pattern;
  return { ...s, shows: { scan, pattern }, activeDetector: s.activeDetector ?? s.detectors[0]?.id ?? null };
}
