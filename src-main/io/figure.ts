// An image result drawn as a figure for a report: the values through a colour map (the views'
// own contrast mapping), enlarged by a whole factor so a small scan stays legible, a colour bar
// with its limits, and a scale bar with units when the calibration is known. RGBA bytes, for
// the PNG encoder. Labels use a small 5×7 bitmap font of our own (digits, units), drawn at 2×.
import { colormapLut, type ColormapName } from '../../src-shared/model/colormaps';
import { lutIndex, mapValue, MISSING_GREY, percentileLimits, type Scaling } from '../../src-shared/model/contrast';

/** Missing values, in the views' grey. */
const MISSING = [MISSING_GREY, MISSING_GREY, MISSING_GREY];

export interface FigureOptions {
  colormap: ColormapName;
  scaling: Scaling;
  /** null: automatic, from the 0.5th and 99.5th percentiles (as the views do). */
  limits: [number, number] | null;
  /** Size of one data pixel, and its unit ('nm' for the scan, 'mrad' for the detector); null: no scale bar. */
  pixelSize: { value: number; unit: 'nm' | 'mrad' } | null;
  /**
   * A map of category indices 0 … n − 1 drawn with limits −0.5 … 9.5 in 'categories': the colour
   * bar shows those n colours only, labelled 0 and n − 1 (not ten labelled −0.5 and 9.5).
   */
  categories?: number;
}

export interface Figure {
  rgba: Uint8Array;
  width: number;
  height: number;
  /** How many figure pixels one data pixel takes. */
  zoom: number;
  limits: [number, number];
  /** The scale bar drawn: its length in units and in figure pixels. */
  scaleBar: { value: number; unit: string; label: string; pixels: number } | null;
}

const GLYPHS: Record<string, string> = {
  '0': '01110100011001110101110011000101110', '1': '00100011000010000100001000010001110',
  '2': '01110100010000100010001000100011111', '3': '11110000010000101110000010000111110',
  '4': '00010001100101010010111110001000010', '5': '11111100001111000001000011000101110',
  '6': '00110010001000011110100011000101110', '7': '11111000010001000100010000100001000',
  '8': '01110100011000101110100011000101110', '9': '01110100011000101111000010001001100',
  '.': '00000000000000000000000000110001100', '-': '00000000000000011111000000000000000',
  '+': '00000001000010011111001000010000000', 'e': '00000000000111010001111111000001110',
  'n': '00000000001011011001100011000110001', 'm': '00000000001101010101101011000110001',
  'µ': '00000000001000110001100011101110100', 'r': '00000000001011011001100001000010000',
  'a': '00000000000111000001011111000101111', 'd': '00001000010110110011100011000101111',
  'p': '00000000001111010001111101000010000', 'x': '00000000001000101010001000101010001',
  ' ': '00000000000000000000000000000000000',
};
const TEXT_SCALE = 2;
const GLYPH_W = 5 * TEXT_SCALE;
const GLYPH_H = 7 * TEXT_SCALE;
const GLYPH_GAP = TEXT_SCALE;
const MARGIN = 16;
const BAR_WIDTH = 20;
const SCALE_BAR_HEIGHT = 6;

function textWidth(text: string): number {
  return text.length * (GLYPH_W + GLYPH_GAP) - GLYPH_GAP;
}

function drawText(img: Uint8Array, width: number, text: string, x0: number, y0: number): void {
  let x = x0;
  for (const ch of text) {
    const g = GLYPHS[ch] ?? GLYPHS[' '];
    for (let r = 0; r < 7; r++) {
      for (let c = 0; c < 5; c++) {
        if (g[r * 5 + c] !== '1') continue;
        for (let dy = 0; dy < TEXT_SCALE; dy++) for (let dx = 0; dx < TEXT_SCALE; dx++) put(img, width, x + c * TEXT_SCALE + dx, y0 + r * TEXT_SCALE + dy, [230, 230, 230]);
      }
    }
    x += GLYPH_W + GLYPH_GAP;
  }
}

function put(img: Uint8Array, width: number, x: number, y: number, rgb: ArrayLike<number>): void {
  const o = 4 * (y * width + x);
  img[o] = rgb[0]; img[o + 1] = rgb[1]; img[o + 2] = rgb[2]; img[o + 3] = 255;
}

/** A label for a limit: 4 significant digits, exponent form for very large or small values. */
export function numberLabel(v: number): string {
  if (v === 0) return '0';
  const a = Math.abs(v);
  if (a >= 1e5 || a < 1e-3) return v.toExponential(2).replace('e+', 'e');
  return String(Number(v.toPrecision(4)));
}

/** The largest of 1, 2, 5 × 10^k not above `x`. */
export function niceBelow(x: number): number {
  const p = Math.pow(10, Math.floor(Math.log10(x)));
  for (const m of [5, 2, 1]) if (m * p <= x) return m * p;
  return p;
}

export function renderFigure(values: ArrayLike<number>, w: number, h: number, o: FigureOptions): Figure {
  const zoom = Math.max(1, Math.floor(512 / Math.max(w, h)));
  const W = w * zoom;
  const H = h * zoom;
  const limits = o.limits ?? percentileLimits(values);
  const contrast = { lo: limits[0], hi: limits[1], scaling: o.scaling };
  const hiText = o.categories ? String(o.categories - 1) : numberLabel(limits[1]);
  const loText = o.categories ? '0' : numberLabel(limits[0]);
  let scaleBar: Figure['scaleBar'] = null;
  if (o.pixelSize && o.pixelSize.value > 0) {
    // About a fifth of the image's width, rounded down to 1, 2 or 5 × 10^k units.
    const value = niceBelow(0.2 * w * o.pixelSize.value);
    const pixels = Math.round((value / o.pixelSize.value) * zoom);
    const [shown, unit] = o.pixelSize.unit === 'nm' && value >= 1000 ? [value / 1000, 'µm'] : [value, o.pixelSize.unit];
    scaleBar = { value, unit: o.pixelSize.unit, label: `${numberLabel(shown)} ${unit}`, pixels };
  }
  const barX = MARGIN + W + MARGIN;
  const labelX = barX + BAR_WIDTH + 8;
  const width = labelX + Math.max(textWidth(hiText), textWidth(loText)) + MARGIN;
  const stripY = MARGIN + H + MARGIN;
  const height = stripY + (scaleBar ? Math.max(GLYPH_H, SCALE_BAR_HEIGHT) + MARGIN : 0);
  const img = new Uint8Array(width * height * 4);
  for (let i = 3; i < img.length; i += 4) img[i] = 255; // black, opaque
  const lut = colormapLut(o.colormap);
  for (let y = 0; y < h; y++) {
    for (let x = 0; x < w; x++) {
      const t = mapValue(values[y * w + x], contrast);
      const rgb = Number.isNaN(t) ? MISSING : lut.subarray(4 * lutIndex(t), 4 * lutIndex(t) + 3);
      for (let dy = 0; dy < zoom; dy++) for (let dx = 0; dx < zoom; dx++) put(img, width, MARGIN + x * zoom + dx, MARGIN + y * zoom + dy, rgb);
    }
  }
  // The colour bar: the map from bottom (lower limit) to top (upper limit).
  for (let y = 0; y < H; y++) {
    const u = (H - 1 - y) / Math.max(H - 1, 1);
    // Categories: n equal bands, each the colour of its category's value (no row of the next one).
    const t = o.categories ? (Math.min(o.categories - 1, Math.floor(u * o.categories)) - limits[0]) / (limits[1] - limits[0]) : u;
    const i = lutIndex(t);
    for (let x = 0; x < BAR_WIDTH; x++) put(img, width, barX + x, MARGIN + y, lut.subarray(4 * i, 4 * i + 3));
  }
  drawText(img, width, hiText, labelX, MARGIN);
  drawText(img, width, loText, labelX, MARGIN + H - GLYPH_H);
  if (scaleBar) {
    const y0 = stripY + Math.floor((GLYPH_H - SCALE_BAR_HEIGHT) / 2);
    for (let y = 0; y < SCALE_BAR_HEIGHT; y++) for (let x = 0; x < scaleBar.pixels; x++) put(img, width, MARGIN + x, y0 + y, [255, 255, 255]);
    drawText(img, width, scaleBar.label, MARGIN + scaleBar.pixels + 10, stripY);
  }
  return { rgba: img, width, height, zoom, limits, scaleBar };
}
