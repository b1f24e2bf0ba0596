// Everything the user set up (dataset, detectors, colour settings) in one store outside React,
// with a version counter that goes up on every change, plain JSON so a session file can save and
// reopen it exactly, and undo/redo over the changes marked undoable. Results (images, patterns)
// are not state: they are recomputed from it, or held by the views.
import type { DetectorShape } from '../src-shared/model/detectors';
import type { SourceSpec } from '../src-shared/model/dataset';

/** A region of the scan: a rectangle or polygon drawn on the Scan view (scan px; corners inclusive) or a cluster's positions. */
export type RegionItemShape =
  | { kind: 'rectangle'; x0: number; y0: number; x1: number; y1: number }
  | { kind: 'polygon'; points: [number, number][] }
  | { kind: 'mask'; width: number; height: number; values: number[] };

export interface RegionItem {
  id: string;
  name: string;
  colour: string;
  visible: boolean;
  shape: RegionItemShape;
}
import type { ColormapName } from '../src-shared/model/colormaps';
import type { Scaling } from '../src-shared/model/contrast';

export interface DetectorItem {
  id: string;
  name: string;
  colour: string;
  visible: boolean;
  shape: DetectorShape;
}

export interface ViewSettings {
  colormap: ColormapName;
  scaling: Scaling;
  /** null: automatic limits from percentiles. */
  limits: [number, number] | null;
  /** Which image the limits were set on (they hold for it only; any other gets automatic limits). */
  limitsFor?: string | null;
}

/** What the user gave (or the file's attributes gave) for the calibration; empty fields are read from the file. */
export interface CalibrationInput {
  energyKeV?: number;
  convergenceMrad?: number;
  latticeSpacingAngstrom?: number;
  scanStepNm?: number;
}

/** What the Scan view shows. */
export type ScanShows = { kind: 'detector'; id: string } | { kind: 'default'; index: number } | { kind: 'loading'; k: number } | { kind: 'clusters' }
  | { kind: 'field'; map: string } | { kind: 'fit'; k: number } | { kind: 'residual' };
/** What the Pattern view shows. */
export type PatternShows = { kind: 'position' } | { kind: 'mean' } | { kind: 'component'; k: number } | { kind: 'cluster'; k: number }
  | { kind: 'region'; id: string; stat: 'mean' | 'max' };

/** The parameters of the analyses, as the panels set them. */
export interface AnalysisSettings {
  pcaComponents: number;
  kmeansClusters: number;
  /** The rectangle region whose COM is the descan reference, or null: the engine's default (vacuum found, else the mean). */
  descanRegion: string | null;
  fieldRotation: 'auto' | { degrees: number; flip: boolean };
}

export interface AppState {
  /** The open dataset: the engine's handle, and what reopens it (its source spec and fingerprint). */
  dataset: {
    id: string; name: string; scanY: number; scanX: number; detY: number; detX: number; dtype: string; spec: SourceSpec; fingerprint: string;
    /** Set when a session's data was not found: why; its results are shown, nothing new can be asked of it. */
    absent?: string;
  } | null;
  detectors: DetectorItem[];
  regions: RegionItem[];
  calibration: CalibrationInput;
  analyses: AnalysisSettings;
  shows: { scan: ScanShows; pattern: PatternShows };
  /** The detector whose image the Scan view shows. */
  activeDetector: string | null;
  scanView: ViewSettings;
  patternView: ViewSettings;
}

export const INITIAL_STATE: AppState = {
  dataset: null,
  detectors: [],
  regions: [],
  calibration: {},
  analyses: { pcaComponents: 8, kmeansClusters: 4, descanRegion: null, fieldRotation: 'auto' },
  shows: { scan: { kind: 'default', index: 0 }, pattern: { kind: 'mean' } },
  activeDetector: null,
  scanView: { colormap: 'viridis', scaling: { kind: 'linear' }, limits: null },
  patternView: { colormap: 'magma', scaling: { kind: 'log' }, limits: null },
};

export class Store {
  private state: AppState;
  private past: AppState[] = [];
  private future: AppState[] = [];
  private listeners = new Set<() => void>();
  version = 0;

  constructor(initial: AppState = INITIAL_STATE) {
    this.state = structuredClone(initial);
  }

  get(): AppState {
    return this.state;
  }

  /** Replace the state with `change(state)` (which must not mutate its argument). */
  update(change: (s: AppState) => AppState, opts: { undoable?: boolean } = {}): void {
    const next = change(this.state);
    if (next === this.state) return;
    if (opts.undoable) {
      this.past.push(this.state);
      if (this.past.length > 200) this.past.shift();
      this.future = [];
    }
    this.state = next;
    this.changed();
  }

  /** Every state undo and redo can reach, the present one included (oldest first). */
  history(): AppState[] {
    return [...this.past, this.state, ...this.future.slice().reverse()];
  }

  /** Start over from `state` (a session opened): nothing to undo. */
  reset(state: AppState): void {
    this.state = structuredClone(state);
    this.past = [];
    this.future = [];
    this.changed();
  }

  undo(): boolean {
    return this.step(this.past, this.future);
  }

  redo(): boolean {
    return this.step(this.future, this.past);
  }

  /** Go to the last state of `from`, keeping the present one in `to`. */
  private step(from: AppState[], to: AppState[]): boolean {
    const target = from.pop();
    if (!target) return false;
    to.push(this.state);
    // What the views show is a choice of the moment, not an edit: undo and redo leave it.
    this.state = { ...target, shows: this.state.shows };
    this.changed();
    return true;
  }

  /** Returns the function that stops listening. */
  subscribe(listener: () => void): () => void {
    this.listeners.add(listener);
    return () => this.listeners.delete(listener);
  }

  toJSON(): string {
    return JSON.stringify(this.state);
  }

  static fromJSON(text: string): Store {
    return new Store(JSON.parse(text) as AppState);
  }

  private changed(): void {
    this.version++;
    for (const l of this.listeners) l();
  }
}
