// What end-to-end tests read from the page: each view's current image, contrast, colour map and
// placement, so a test can compare the drawn pixels with the engine's numbers. Read-only.
import type { ColormapName } from '../src-shared/model/colormaps';
import type { Contrast } from '../src-shared/model/contrast';
import type { ImageLayer, Placement } from './views/image-layer';

interface ViewRecord {
  layer: ImageLayer;
  contrast: Contrast;
  colormap: ColormapName;
  place: Placement;
  image: { values: ArrayLike<number>; width: number; height: number; label: string; lengths?: ArrayLike<number> } | null;
  cssSize: number;
}

const views = new Map<string, ViewRecord>();
let storeJson: (() => string) | null = null;

/** The store, as JSON (what a session file will hold). */
export function registerStore(toJSON: () => string): void {
  storeJson = toJSON;
}

/** Pointer-to-drawn latencies: started at a pointer event, ended when the image it asked for is drawn. */
const started = new Map<string, number>();
const latencies: { token: string; ms: number }[] = [];

export function startTiming(token: string, at = performance.now()): void {
  if (!started.has(token)) started.set(token, at);
}

export function endTiming(token: string): void {
  const t0 = started.get(token);
  if (t0 === undefined) return;
  started.delete(token);
  latencies.push({ token, ms: performance.now() - t0 });
}

export function registerView(name: string, record: ViewRecord): void {
  views.set(name, record);
}

declare global {
  interface Window { __scanfold?: unknown }
}

if (typeof window !== 'undefined') {
  window.__scanfold = {
    latencies: () => latencies.splice(0),
    state: () => (storeJson ? JSON.parse(storeJson()) : null),
    view(name: string) {
      const v = views.get(name);
      if (!v) return null;
      return { contrast: v.contrast, colormap: v.colormap, place: v.place, cssSize: v.cssSize, label: v.image?.label ?? null,
        width: v.image?.width ?? 0, height: v.image?.height ?? 0, values: v.image ? Array.from(v.image.values) : [],
        ...(v.image?.lengths ? { lengths: Array.from(v.image.lengths) } : {}) };
    },
  };
}
