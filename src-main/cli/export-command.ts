// `scanfold export SESSION RESULT --format png|tiff|npy|csv --out FILE`: one array of a session's
// results for another program or a report. The service reads the session and makes the bytes
// (the data it was made from need not be present); this command writes them.
import { InputError, isInputError } from '../../src-shared/model/errors';
import type { Scaling } from '../../src-shared/model/contrast';
import type { EngineOptions } from '../engine/engine';
import { physicalPath, sameFileAt } from '../io/input-file';
import { OutputFile } from '../io/output-file';
import { writeBytes } from '../io/array-export';
import { withService } from './analysis-commands';
import { decimalNumber, numberList, parseFlags, wholeNumber } from './source-flags';

type Flags = Record<string, string | boolean | (string | boolean)[] | undefined>;
type EngineFlags = Record<string, { type: 'string' | 'boolean' }>;

const FORMATS = ['png', 'tiff', 'npy', 'csv', 'h5'] as const;
type Format = (typeof FORMATS)[number];

export async function cmdExport(args: string[], engineOptions: (v: Record<string, unknown>) => EngineOptions, engineFlags: EngineFlags): Promise<void> {
  const parsed = parseFlags(args, {
    ...engineFlags, format: { type: 'string' }, out: { type: 'string' }, index: { type: 'string' }, colormap: { type: 'string' },
    scaling: { type: 'string' }, limits: { type: 'string' }, 'scan-step-nm': { type: 'string' }, 'mrad-per-pixel': { type: 'string' },
  });
  const v = parsed.values as Flags;
  const [file, name, ...extra] = parsed.positionals;
  const format = (typeof v.format === 'string' ? v.format : '') as Format;
  if (!FORMATS.includes(format)) throw new InputError(`export --format ${typeof v.format === 'string' ? v.format : '(none)'}: expected png, tiff, npy, csv or h5`);
  if (!file || !name || (extra.length && format !== 'h5')) {
    throw new InputError('export needs a session file and a result: scanfold export SESSION.scanfold.h5 KEY/ARRAY --format png|tiff|npy|csv --out FILE (or KEY… --format h5)');
  }
  if (typeof v.out !== 'string') throw new InputError(`export needs --out FILE.${format}`);
  if (format === 'h5') return exportSet(file, [name, ...extra], v.out, engineOptions, v);
  // The engine checks the colour map's name (and says which there are), and picks one when none is given.
  const colormap = typeof v.colormap === 'string' ? v.colormap : undefined;
  let scaling: Scaling = { kind: 'linear' };
  if (typeof v.scaling === 'string') {
    const g = /^gamma:([\d.]+)$/.exec(v.scaling);
    if (v.scaling === 'linear' || v.scaling === 'log') scaling = { kind: v.scaling };
    else if (g && Number(g[1]) > 0) scaling = { kind: 'gamma', gamma: Number(g[1]) };
    else throw new InputError(`--scaling ${v.scaling}: expected linear, log or gamma:G (G > 0)`);
  }
  let limits: [number, number] | null = null;
  if (typeof v.limits === 'string') {
    const parts = numberList('limits', v.limits, 2);
    if (!(parts[1] > parts[0])) throw new InputError(`--limits ${v.limits}: expected LO,HI with LO < HI`);
    limits = [parts[0], parts[1]];
  }
  const [key, array, ...more] = name.split('/');
  if (more.length) throw new InputError(`export: ${name}: expected KEY or KEY/ARRAY (session show lists them)`);
  const index = typeof v.index === 'string' ? wholeNumber('index', v.index, 0) : undefined;
  const scanStep = typeof v['scan-step-nm'] === 'string' ? decimalNumber('scan-step-nm', v['scan-step-nm']) : undefined;
  const mradPerPixel = typeof v['mrad-per-pixel'] === 'string' ? decimalNumber('mrad-per-pixel', v['mrad-per-pixel']) : undefined;
  const out = OutputFile.create(v.out, { flag: '--out', protect: [physicalPath(file)] });
  await withService(engineOptions({ ...v, quiet: true } as Record<string, unknown>), true, async (service) => {
    const s = await service.openSession({ path: physicalPath(file), openData: false }).catch(async (e: unknown) => {
      // A command's --out file is the commonest file to try: say how to get a session instead.
      if (isInputError(e) && e.code === 'bad-session' && (await producedByCommand(physicalPath(file)))) {
        throw new InputError(`${physicalPath(file)}: the output of a scanfold command, not a session; export draws results kept in a session: run the command again ` +
          'with --session NAME.scanfold.h5, then export from that (the arrays of this file are plain HDF5 datasets, for h5py)', 'bad-session');
      }
      throw e;
    });
    out.protect(s.datasets.flatMap((d) => (d.path ? [d.path] : [])));
    const f = await service.exportResult({
      key, format, ...(array ? { array } : {}), ...(index !== undefined ? { index } : {}),
      ...(format === 'png' ? { ...(colormap ? { colormap } : {}), scaling, ...(limits ? { limits } : {}), ...(scanStep !== undefined ? { scanStepNm: scanStep } : {}),
        ...(mradPerPixel !== undefined ? { mradPerPixel } : {}) } : {}),
    });
    const path = await writeBytes(out, f.bytes);
    process.stderr.write(`wrote ${path}: ${f.description}\n`);
  }, out);
}

/** A chosen set of results as an HDF5 file of their own: a session holding only them (h5py reads it; Scanfold reopens it). */
async function exportSet(file: string, keys: string[], outPath: string, engineOptions: (v: Record<string, unknown>) => EngineOptions, v: Flags): Promise<void> {
  if (keys.some((k) => k.includes('/'))) throw new InputError('export --format h5 takes whole results (KEY KEY …), not single arrays');
  await withService(engineOptions({ ...v, quiet: true } as Record<string, unknown>), true, async (service) => {
    const source = physicalPath(file);
    if (sameFileAt(outPath, source)) throw new InputError('export: --out is the session being exported from; give a new name');
    await service.openSession({ path: source, openData: false });
    const saved = await service.saveSession({ path: outPath, keys });
    process.stderr.write(`wrote ${saved.path}: ${saved.results} result(s) of ${source} (${keys.join(', ')})\n`);
  });
}

/** Whether an HDF5 file says a Scanfold command wrote it (its producer attribute). */
async function producedByCommand(file: string): Promise<boolean> {
  try {
    const { getH5 } = await import('../io/h5wasm-module');
    const { h5wasm } = await getH5();
    const f = new h5wasm.File(file, 'r');
    try {
      const v = (f.attrs as Record<string, { value: unknown } | undefined>).producer?.value;
      return typeof v === 'string' && v.startsWith('scanfold ');
    } finally {
      f.close();
    }
  } catch {
    return false;
  }
}
