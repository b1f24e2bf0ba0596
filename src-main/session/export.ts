// One array of a kept result as a file's bytes: a PNG figure (colour map, colour bar, and a scale
// bar from the session's calibration), float32 TIFF, .npy or CSV. The engine makes the bytes; the
// command line writes them to --out, the app offers them as a download.
import { InputError } from '../../src-shared/model/errors';
import { COLORMAP_NAMES, type ColormapName } from '../../src-shared/model/colormaps';
import type { CalibrationResult, ExportedFile, ExportRequest, KeptResult, PcaResult } from '../../src-shared/contract/service';
import { resultArrays } from '../io/result-arrays';
import { renderFigure } from '../io/figure';
import { csvText, npyBytes, pngBytes, tiffBytes } from '../io/array-export';
import { attributeValue, SCAN_STEP_ATTRIBUTES } from '../engine/attributes';

const MEDIA = { png: 'image/png', tiff: 'image/tiff', npy: 'application/octet-stream', csv: 'text/csv' } as const;

/** What a figure's pixel measures, from the dimension labels of the image. */
function pixelSize(results: KeptResult[], kept: KeptResult, dims: string[], req: ExportRequest, scanStepFallback: number | undefined): { value: number; unit: 'nm' | 'mrad' } | null {
  const last = dims.at(-1);
  const scan = last === 'scan_x';
  const binned = last === 'det_x_binned';
  if (!scan && last !== 'det_x' && !binned) return null;
  const given = scan ? req.scanStepNm : req.mradPerPixel;
  const cal = results.filter((r) => r.method === 'calibrate' && r.datasetRef === kept.datasetRef).map((r) => r.result as CalibrationResult).at(-1);
  const stored = (kept.result as { descriptor?: { attributes?: Record<string, number | number[] | string> } }).descriptor?.attributes;
  const value = given ?? (scan ? cal?.scanStepNm ?? scanStepFallback ?? attributeValue(stored, SCAN_STEP_ATTRIBUTES)?.value : cal?.mradPerPixel);
  if (value === undefined) return null;
  // A binned detector's pixel spans `bin` detector pixels (and a preview's the cube's detBin more).
  const r = kept.result as PcaResult;
  const bin = binned && !given ? (r.features?.bin ?? 1) * (r.preview?.detBin ?? 1) : 1;
  return { value: value * bin, unit: scan ? 'nm' : 'mrad' };
}

export async function exportResult(results: KeptResult[], req: ExportRequest, scanStepFallback?: number): Promise<ExportedFile> {
  const kept = results.find((r) => r.key === req.key);
  const listing = () => results.map((r) => `${r.key}/{${Object.keys(resultArrays(r.method, r.result)).join(',')}}`).join(' ');
  if (!kept) throw new InputError(`export: no result ${JSON.stringify(req.key)} in the session; it has ${listing() || 'none'}`, 'bad-request');
  const arrays = resultArrays(kept.method, kept.result);
  const names = Object.keys(arrays);
  const name = req.array ?? (names.length === 1 ? names[0] : undefined);
  if (!name || !Object.hasOwn(arrays, name)) {
    throw new InputError(`export: ${req.key}${req.array ? `/${req.array}: no such array` : ': name one array'}; ${req.key} has ${names.map((n) => `${req.key}/${n}`).join(', ') || 'no arrays'}`, 'bad-request');
  }
  const a = arrays[name];
  let data: ArrayLike<number> = a.data;
  let shape = a.shape;
  let dims = a.dims ?? shape.map((_, i) => `dim_${i}`);
  // A stack of one image (one detector's virtual image) is that image.
  const index = req.index ?? (a.shape.length === 3 && a.shape[0] === 1 && (req.format === 'png' || req.format === 'tiff' || req.format === 'csv') ? 0 : undefined);
  if (index !== undefined) {
    if (shape.length < 3) throw new InputError(`export: ${req.key}/${name} is ${shape.length}-D; an index picks one image of a 3-D stack`, 'bad-request');
    if (index >= shape[0]) throw new InputError(`export: index ${index}: expected 0 … ${shape[0] - 1} (${dims[0]})`, 'bad-request');
    const n = shape[1] * shape[2];
    data = a.data.subarray(index * n, (index + 1) * n);
    shape = shape.slice(1);
    dims = dims.slice(1);
  }
  const what = `${req.key}/${name}${index !== undefined ? `[${index}]` : ''}`;
  const fileName = `${req.key}-${name}${index !== undefined ? `-${index}` : ''}.${req.format === 'tiff' ? 'tif' : req.format}`;
  const done = (bytes: Uint8Array, note = ''): ExportedFile => ({ bytes, fileName, mediaType: MEDIA[req.format], description: `${what} (${shape.join('×')})${note}` });
  if (req.format === 'npy') return done(npyBytes(data as Float64Array, shape));
  if (req.format === 'csv') {
    if (shape.length > 2) throw new InputError(`export: csv: ${what} is ${shape.length}-D (${shape.join('×')}); CSV takes 1-D or 2-D results (give an index for one image of a stack)`, 'bad-request');
    return done(new TextEncoder().encode(csvText(data, shape, dims)));
  }
  if (shape.length !== 2) {
    throw new InputError(`export: ${req.format}: ${what} is ${shape.length}-D (${shape.join('×')}); an image is 2-D${shape.length === 3 ? ` (give an index 0 … ${shape[0] - 1} for one of the stack)` : ''}`, 'bad-request');
  }
  const [h, w] = shape;
  if (req.format === 'tiff') return done(await tiffBytes(data, w, h), ', float32');
  // A cluster map is drawn in categories unless a colour map is asked for, as the app draws it.
  const clusters = String(a.attrs?.units ?? '').startsWith('cluster index');
  // An angle (the COM direction) in the cyclic map, so −π and π, the same direction, share a colour.
  const angle = String(a.attrs?.units ?? '').startsWith('radians, atan2');
  const colormap = (req.colormap ?? (clusters ? 'categories' : angle ? 'sinebow' : 'viridis')) as ColormapName;
  if (!COLORMAP_NAMES.includes(colormap)) throw new InputError(`export: colour map ${colormap}: expected one of ${COLORMAP_NAMES.join(', ')}`, 'bad-request');
  // Categories as the app draws them: value k (a cluster) in the k-th colour.
  const limits = req.limits ?? (colormap === 'categories' ? [-0.5, 9.5] as [number, number] : angle && colormap === 'sinebow' ? [-Math.PI, Math.PI] as [number, number] : null);
  // Its colour bar shows the clusters there are (k of the ten colours), labelled 0 … k − 1.
  let categories: number | undefined;
  if (clusters && colormap === 'categories' && !req.limits) {
    let top = -1;
    for (let i = 0; i < data.length; i++) if (data[i] > top) top = data[i];
    if (Number.isInteger(top) && top >= 0 && top < 10) categories = top + 1;
  }
  const fig = renderFigure(data, w, h, { colormap, scaling: req.scaling ?? { kind: 'linear' }, limits, pixelSize: pixelSize(results, kept, dims, req, scanStepFallback), ...(categories ? { categories } : {}) });
  return done(pngBytes(fig), `, ${colormap}, ${categories ? `${categories} categories` : `limits ${fig.limits.map((x) => x.toPrecision(4)).join(' … ')}`}, ${fig.zoom}× enlarged; ` +
    (fig.scaleBar ? `scale bar ${fig.scaleBar.label} = ${fig.scaleBar.pixels} px` : `no scale bar (the session holds no calibration: add a calibrate result to it, or give ${dims.at(-1) === 'scan_x' ? 'the scan step in nm' : 'mrad per detector pixel'})`));
}
