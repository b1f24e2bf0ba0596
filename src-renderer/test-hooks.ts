// What end-to-end tests read from the page: each view's current image, contrast, colour map and
// placement, so a test can compare the drawn pixels with the engine's numbers. Read-only.
import type { ColormapName } from './colormaps';
import type { Contrast } from './views/contrast';
import type { ImageLayer, Placement } from './views/image-layer';

interface ViewRecord {
  layer: ImageLayer;
  contrast: Contrast;
  colormap: ColormapName;
  place: Placement;
  image: { values: ArrayLike<number>; width: number; height: number; label: string } | null;
  cssSize: number;
}

const views = new Map<string, ViewRecord>();

export function registerView(name: string, record: ViewRecord): void {
  views.set(name, record);
}

declare global {
  interface Window { __scanfold?: unknown }
}

if (typeof window !== 'undefined') {
  window.__scanfold = {
    view(name: string) {
      const v = views.get(name);
      if (!v) return null;
      return { contrast: v.contrast, colormap: v.colormap, place: v.place, cssSize: v.cssSize, label: v.image?.label ?? null,
        width: v.image?.width ?? 0, height: v.image?.height ?? 0, values: v.image ? Array.from(v.image.values) : [] };
    },
  };
}
