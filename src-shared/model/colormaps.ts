// Colour lookup tables for the views, sampled from d3-scale-chromatic's perceptually uniform
// maps (viridis and cividis for images of the scan, magma for patterns), its cyclic sinebow for
// directions, and Tableau 10 for clusters. 256 RGBA entries each.
import { interpolateCividis, interpolateMagma, interpolateSinebow, interpolateViridis, schemeTableau10 } from 'd3-scale-chromatic';
import { rgb } from 'd3-color';

export const COLORMAPS = {
  viridis: interpolateViridis,
  cividis: interpolateCividis,
  magma: interpolateMagma,
  sinebow: interpolateSinebow,
} as const;
/** Categories: ten flat steps of Tableau 10 over the map (value k at limits −0.5 … 9.5 gets colour k). */
export type ColormapName = keyof typeof COLORMAPS | 'categories';
export const COLORMAP_NAMES = [...Object.keys(COLORMAPS), 'categories'] as ColormapName[];

export const LUT_SIZE = 256;

const cache = new Map<string, Uint8Array>();

/** 256 × RGBA bytes: entry i is the map at (i + 0.5) / 256. */
export function colormapLut(name: ColormapName): Uint8Array {
  let lut = cache.get(name);
  if (!lut) {
    lut = new Uint8Array(LUT_SIZE * 4);
    for (let i = 0; i < LUT_SIZE; i++) {
      const c = rgb(name === 'categories' ? schemeTableau10[Math.min(9, Math.floor((i * 10) / LUT_SIZE))] : COLORMAPS[name]((i + 0.5) / LUT_SIZE));
      lut.set([Math.round(c.r), Math.round(c.g), Math.round(c.b), 255], i * 4);
    }
    cache.set(name, lut);
  }
  return lut;
}

/** Categorical colours (clusters, detectors), as CSS strings. */
export const CATEGORY_COLOURS: readonly string[] = schemeTableau10;
