// `scanfold export SESSION RESULT --format png|tiff|npy|csv --out FILE`: one array of a session's
// results for another program or a report. The session is read through the service; the data
// it was made from need not be present.
import { InputError } from '../../src-shared/model/errors';
import { COLORMAP_NAMES, type ColormapName } from '../../src-shared/model/colormaps';
import type { Scaling } from '../../src-shared/model/contrast';
import type { EngineOptions } from '../engine/engine';
import type { CalibrationResult, KeptResult, OpenedSession, PcaResult } from '../../src-shared/contract/service';
import { physicalPath } from '../io/input-file';
import { OutputFile } from '../io/output-file';
import { resultArrays, type ResultArray } from '../io/result-arrays';
import { renderFigure } from '../io/figure';
import { csvText, npyBytes, pngBytes, tiffBytes, writeBytes } from '../io/array-export';
import { withService } from './analysis-commands';
import { decimalNumber, parseFlags, rejectExtraPositionals } from './source-flags';

type Flags = Record<string, string | boolean | (string | boolean)[] | undefined>;
type EngineFlags = Record<string, { type: 'string' | 'boolean' }>;

const FORMATS = ['png', 'tiff', 'npy', 'csv'] as const;
type Format = (typeof FORMATS)[number];

/** The result array RESULT names: KEY/ARRAY, or KEY alone when the result has one array. */
function pick(s: OpenedSession, name: string): { kept: KeptResult; array: string; a: ResultArray } {
  const [key, array, ...more] = name.split('/');
  const kept = s.results.find((r) => r.key === key);
  const listing = () => s.results.map((r) => `${r.key}/{${Object.keys(resultArrays(r.method, r.result)).join(',')}}`).join(' ');
  if (!kept || more.length) throw new InputError(`export: ${name}: the session has no such result; it has ${listing() || 'none'}`);
  const arrays = resultArrays(kept.method, kept.result);
  const names = Object.keys(arrays);
  const chosen = array ?? (names.length === 1 ? names[0] : undefined);
  if (!chosen || !arrays[chosen]) throw new InputError(`export: ${name}: ${array ? 'no such array' : 'name one array'}; ${key} has ${names.map((n) => `${key}/${n}`).join(', ') || 'no arrays'}`);
  return { kept, array: chosen, a: arrays[chosen] };
}

/** Size of one pixel of the image, from the session's calibration: a calibrate result, else the app's entries. */
function pixelSize(s: OpenedSession, kept: KeptResult, dims: string[], v: Flags): { value: number; unit: 'nm' | 'mrad' } | null {
  const scan = dims.at(-1) === 'scan_x';
  const binned = dims.at(-1) === 'det_x_binned';
  if (!scan && dims.at(-1) !== 'det_x' && !binned) return null;
  const given = scan ? v['scan-step-nm'] : v['mrad-per-pixel'];
  const cal = s.results.filter((r) => r.method === 'calibrate' && r.datasetRef === kept.datasetRef).map((r) => r.result as CalibrationResult).at(-1);
  let value: number | undefined;
  if (typeof given === 'string') value = decimalNumber(scan ? 'scan-step-nm' : 'mrad-per-pixel', given);
  else if (scan) value = cal?.scanStepNm ?? s.document.app?.calibration.scanStepNm;
  else value = cal?.mradPerPixel;
  if (value === undefined) return null;
  // A binned detector's pixel is `bin` detector pixels wide.
  const bin = binned ? ((kept.result as PcaResult).features?.bin ?? 1) : 1;
  return { value: value * bin, unit: scan ? 'nm' : 'mrad' };
}

export async function cmdExport(args: string[], engineOptions: (v: Record<string, unknown>) => EngineOptions, engineFlags: EngineFlags): Promise<void> {
  const parsed = parseFlags(args, {
    ...engineFlags, format: { type: 'string' }, out: { type: 'string' }, index: { type: 'string' }, colormap: { type: 'string' },
    scaling: { type: 'string' }, limits: { type: 'string' }, 'scan-step-nm': { type: 'string' }, 'mrad-per-pixel': { type: 'string' },
  });
  const v = parsed.values as Flags;
  const [file, name, ...extra] = parsed.positionals;
  if (!file || !name || extra.length) throw new InputError('export needs a session file and a result: scanfold export SESSION.scanfold.h5 KEY/ARRAY --format png|tiff|npy|csv --out FILE');
  rejectExtraPositionals([file], 'export');
  const format = (typeof v.format === 'string' ? v.format : '') as Format;
  if (!FORMATS.includes(format)) throw new InputError(`export --format ${typeof v.format === 'string' ? v.format : '(none)'}: expected png, tiff, npy or csv`);
  if (typeof v.out !== 'string') throw new InputError(`export needs --out FILE.${format}`);
  const colormap = (typeof v.colormap === 'string' ? v.colormap : 'viridis') as ColormapName;
  if (!COLORMAP_NAMES.includes(colormap)) throw new InputError(`--colormap ${colormap}: expected one of ${COLORMAP_NAMES.join(', ')}`);
  let scaling: Scaling = { kind: 'linear' };
  if (typeof v.scaling === 'string') {
    const g = /^gamma:([\d.]+)$/.exec(v.scaling);
    if (v.scaling === 'linear' || v.scaling === 'log') scaling = { kind: v.scaling };
    else if (g && Number(g[1]) > 0) scaling = { kind: 'gamma', gamma: Number(g[1]) };
    else throw new InputError(`--scaling ${v.scaling}: expected linear, log or gamma:G (G > 0)`);
  }
  let limits: [number, number] | null = null;
  if (typeof v.limits === 'string') {
    const parts = v.limits.split(',').map((x) => decimalNumber('limits', x));
    if (parts.length !== 2 || !(parts[1] > parts[0])) throw new InputError(`--limits ${v.limits}: expected LO,HI with LO < HI`);
    limits = [parts[0], parts[1]];
  }
  const out = OutputFile.create(v.out, { flag: '--out', protect: [physicalPath(file)] });
  await withService(engineOptions({ ...v, quiet: true } as Record<string, unknown>), true, async (service) => {
    const s = await service.openSession({ path: physicalPath(file), openData: false });
    out.protect(s.datasets.flatMap((d) => (d.path ? [d.path] : [])));
    const { kept, array, a } = pick(s, name);
    let data: ArrayLike<number> = a.data;
    let shape = a.shape;
    let dims = a.dims ?? shape.map((_, i) => `dim_${i}`);
    if (typeof v.index === 'string') {
      if (shape.length < 3) throw new InputError(`--index: ${kept.key}/${array} is ${shape.length}-D; --index picks one image of a 3-D stack`);
      const i = Number(v.index);
      if (!Number.isInteger(i) || i < 0 || i >= shape[0]) throw new InputError(`--index ${v.index}: expected 0 … ${shape[0] - 1} (${dims[0]})`);
      const n = shape[1] * shape[2];
      data = a.data.subarray(i * n, (i + 1) * n);
      shape = shape.slice(1);
      dims = dims.slice(1);
    }
    const where = `${kept.key}/${array}${typeof v.index === 'string' ? `[${v.index}]` : ''}`;
    let bytes: Uint8Array;
    let note = '';
    if (format === 'npy') {
      bytes = npyBytes(data as Float64Array, shape);
    } else if (format === 'csv') {
      if (shape.length > 2) throw new InputError(`export --format csv: ${where} is ${shape.length}-D (${shape.join('×')}); CSV takes 1-D or 2-D results (add --index for one image of a stack)`);
      bytes = new TextEncoder().encode(csvText(data, shape, dims));
    } else {
      if (shape.length !== 2) throw new InputError(`export --format ${format}: ${where} is ${shape.length}-D (${shape.join('×')}); an image is 2-D${shape.length === 3 ? ` (add --index 0 … ${shape[0] - 1} for one of the stack)` : ''}`);
      const [h, w] = shape;
      if (format === 'tiff') {
        bytes = await tiffBytes(data, w, h);
        note = ', float32';
      } else {
        const fig = renderFigure(data, w, h, { colormap, scaling, limits, pixelSize: pixelSize(s, kept, dims, v) });
        bytes = pngBytes(fig);
        note = `, ${colormap}, limits ${fig.limits.map((x) => x.toPrecision(4)).join(' … ')}, ${fig.zoom}× enlarged; ` +
          (fig.scaleBar ? `scale bar ${fig.scaleBar.label} = ${fig.scaleBar.pixels} px` : 'no scale bar (no calibration in the session; give --scan-step-nm or --mrad-per-pixel)');
      }
    }
    const path = await writeBytes(out, bytes);
    process.stderr.write(`wrote ${path}: ${where} (${shape.join('×')})${note}\n`);
  }, out);
}
