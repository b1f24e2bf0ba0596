// `scanfold` command line: the same engine as the application, no window.
import fs from 'node:fs';
import path from 'node:path';
import { isInputError, isOutputError, InputError, CancelledError } from '../../src-shared/model/errors';
import type { EngineOptions } from '../engine/engine';
import type { FirstPassResult } from '../../src-shared/contract/service';
import type { SourceSpec } from '../../src-shared/model/dataset';
import { parseBytes, fmtBytes } from '../engine/budget';
import type { WrittenResults } from '../io/write-results';
import { OutputFile } from '../io/output-file';
import { canonicalPath, checkInputFile, errnoText } from '../io/input-file';
import { getH5 } from '../io/h5wasm-module';
import { outputFlag, parseFlags, rejectExtraPositionals, SOURCE_OPTIONS, sourceSpecFromFlags, wholeNumber } from './source-flags';
import { interruptRunningJob } from './progress';
import { writeSample, SAMPLE_SIZES } from '../../samples/write-sample';
import { projectRoot } from '../engine/paths';
import { SERVICE_METHODS } from '../../src-shared/contract/service';
import { closestFlag, COMMAND_HELP, OVERVIEW } from './help';
import { SCANFOLD_VERSION } from '../engine/version';
import { cmdFit, cmdKmeans, cmdPca } from './statistics-commands';
import { cmdSession } from './session-commands';
import { cmdExport } from './export-command';
import { cmdCalibrate, cmdCom, cmdImage, badPixelAttrs, cmdPattern, noteNonFiniteInputs, noteNonFiniteResults, openProtected, provenance, withService, writeResults } from './analysis-commands';
import type { EngineService } from '../engine/service';
import { trace } from '../engine/trace';

const ENGINE_OPTIONS = {
  workers: { type: 'string' },
  budget: { type: 'string' },
  'preview-budget': { type: 'string' },
  kernel: { type: 'string' },
  quiet: { type: 'boolean' },
} as const;

/** The preview cube of a command (see engineOptions). */
const CLI_PREVIEW_BUDGET_BYTES = 32 * 2 ** 20;

function engineOptions(v: Record<string, unknown>): EngineOptions {
  const o: EngineOptions = {};
  if (typeof v.workers === 'string') o.workers = wholeNumber('workers', v.workers, 1, 'a whole number ≥ 1');
  if (typeof v.budget === 'string') o.budgetBytes = parseBytes(v.budget);
  // A command uses the preview cube only to find vacuum, which any binning of it does exactly:
  // a small cube spares the memory and its first touch (the app keeps the engine's larger default).
  o.previewBudgetBytes = typeof v['preview-budget'] === 'string' ? parseBytes(v['preview-budget']) : CLI_PREVIEW_BUDGET_BYTES;
  if (typeof v.kernel === 'string') {
    if (v.kernel !== 'wasm' && v.kernel !== 'reference') throw new InputError(`--kernel ${v.kernel}: expected wasm or reference`);
    o.kernel = v.kernel;
  }
  return o;
}

type Flags = Record<string, string | boolean | undefined>;

function parse(args: string[], options: Record<string, { type: 'string' | 'boolean' }>): { values: Flags; positionals: string[] } {
  const r = parseFlags(args, options);
  return { values: r.values as Flags, positionals: r.positionals };
}

async function cmdInfo(args: string[]) {
  const { values, positionals } = parse(args, SOURCE_OPTIONS);
  rejectExtraPositionals(positionals, 'info');
  const spec = sourceSpecFromFlags(positionals[0], values);
  const engineless = await import('../io/index');
  const r = await engineless.inspectSource(spec);
  const out = r.kind === 'dataset' ? r.descriptor : { path: r.path, datasets: r.datasets };
  process.stdout.write(JSON.stringify(out, null, 2) + '\n');
}

/** The first pass's results as float64 datasets, with where they came from. */
async function writeSummary(service: EngineService, out: OutputFile, r: FirstPassResult, producer: string): Promise<WrittenResults> {
  const { scanY, scanX, detY, detX } = r.descriptor.shape;
  return (await writeResults(service, out, {
    mean_pattern: { data: r.meanPattern, shape: [detY, detX], dims: ['det_y', 'det_x'], attrs: { units: 'counts per pattern' } },
    max_pattern: { data: r.maxPattern, shape: [detY, detX], dims: ['det_y', 'det_x'], attrs: { units: 'counts' } },
    total_intensity: {
      data: r.totalIntensity, shape: [scanY, scanX], dims: ['scan_y', 'scan_x'],
      attrs: { units: 'counts', ...(r.totalIntensityLessBadPixels ? { note: 'every pixel, the bad pixels listed in the attributes included: see /total_intensity_less_bad_pixels' } : {}) },
    },
    ...(r.totalIntensityLessBadPixels ? {
      total_intensity_less_bad_pixels: {
        data: r.totalIntensityLessBadPixels, shape: [scanY, scanX], dims: ['scan_y', 'scan_x'],
        attrs: { units: 'counts', note: 'Σ of each pattern over the detector less the bad pixels listed in the attributes (bad_pixels_*_yx)' },
      },
    } : {}),
    // The default images taken in the same pass: /bright_field, /annular_dark_field.
    ...Object.fromEntries(r.defaultImages.map((im) => [im.label.replace(/ /g, '_'), {
      data: im.image, shape: [scanY, scanX], dims: ['scan_y', 'scan_x'],
      attrs: { units: 'counts', detector: JSON.stringify(im.detector.shape), note: 'detector from the bright-field disk found on 16 patterns sampled across the scan; bad pixels of that sample left out' },
    }])),
  }, {
    ...provenance(r.descriptor, producer, { dataset: r.dataset }),
    non_finite_inputs: r.nonFiniteInputs,
    ...badPixelAttrs(r.badPixels),
  }))!;
}

/** Open, run the first pass and write the summary; the result stays for the caller to report. */
async function summarise(spec: SourceSpec, values: Record<string, unknown>, out: OutputFile, producer: string): Promise<{ r: FirstPassResult; written: WrittenResults }> {
  return withService(engineOptions(values), values.quiet === true, async (service) => {
    // Every file the data comes from is known before the pass, and protected from --out.
    const opened = await openProtected(service, spec, out, { scan: 1, pattern: 2 });
    const r = await service.firstPass({ dataset: opened.id });
    return { r, written: await writeSummary(service, out, r, producer) };
  }, out);
}

async function cmdSummary(args: string[]) {
  const { values, positionals } = parse(args, { ...SOURCE_OPTIONS, ...ENGINE_OPTIONS, out: { type: 'string' } });
  rejectExtraPositionals(positionals, 'summary');
  const spec = sourceSpecFromFlags(positionals[0], values);
  const out = outputFlag(values.out, 'summary', [spec.path]);
  const { r, written } = await summarise(spec, values, out, 'scanfold summary');
  noteNonFiniteInputs(r.nonFiniteInputs);
  noteNonFiniteResults(written);
  if (values.quiet !== true) {
    process.stderr.write(`wrote ${written.path} (${fmtBytes(r.descriptor.byteSize)} in ${r.seconds.toFixed(2)} s, ` +
      `${(r.descriptor.byteSize / r.seconds / 1e9).toFixed(2)} GB/s)\n`);
  }
}

async function cmdSample(args: string[]) {
  const { values } = parse(args, { size: { type: 'string' }, out: { type: 'string' }, seed: { type: 'string' }, quiet: { type: 'boolean' } });
  const size = typeof values.size === 'string' ? values.size : 'demo';
  if (!(size in SAMPLE_SIZES)) throw new InputError(`--size ${size}: expected one of ${Object.keys(SAMPLE_SIZES).join(', ')}`);
  if (typeof values.out !== 'string') throw new InputError('sample needs --out FILE.h5');
  const seed = typeof values.seed === 'string' ? wholeNumber('seed', values.seed) : undefined;
  const out = values.out;
  let lastDecile = -1;
  const r = await writeSample({
    size: size as keyof typeof SAMPLE_SIZES, out, seed,
    onProgress: (f: number) => {
      const d = Math.floor(f * 10);
      if (!values.quiet && d !== lastDecile) { lastDecile = d; process.stderr.write(`sample ${size}: ${d * 10}%\n`); }
    },
  });
  process.stdout.write(JSON.stringify(r) + '\n');
}

/** A root attribute of an HDF5 file as text, or null when the file or attribute is not there or not HDF5. */
async function rootAttribute(file: string, name: string): Promise<string | null> {
  try {
    checkInputFile(file, 'an HDF5 file');
    const { h5wasm } = await getH5();
    const f = new h5wasm.File(file, 'r');
    try {
      const v = f.attrs[name]?.value;
      return typeof v === 'string' ? v : null;
    } finally {
      f.close();
    }
  } catch {
    return null;
  }
}

async function cmdDemo(args: string[]) {
  const { values } = parse(args, { dir: { type: 'string' }, ...ENGINE_OPTIONS });
  const dir = typeof values.dir === 'string' ? canonicalPath(values.dir) : path.join(projectRoot(), 'demo-data');
  try {
    fs.mkdirSync(dir, { recursive: true });
  } catch (e) {
    throw new InputError(`--dir ${dir}: cannot make this folder (${errnoText((e as NodeJS.ErrnoException).code)}); expected a folder for the demo files`);
  }
  const file = path.join(dir, 'demo.h5');
  const summaryFile = path.join(dir, 'demo-summary.h5');
  // The demo writes its summary by a fixed name: never over a file of the user's that happens to bear it.
  if (fs.existsSync(summaryFile) && (await rootAttribute(summaryFile, 'producer')) !== 'scanfold demo') {
    throw new InputError(`${summaryFile}: exists and is not a summary the demo wrote; move it away or give another --dir`);
  }
  if (!fs.existsSync(file)) {
    process.stderr.write(`making the demo dataset ${file} …\n`);
    await writeSample({ size: 'demo', out: file });
  }
  const spec = { path: file, datasetPath: '/scan/frames' };
  const out = OutputFile.create(summaryFile, { flag: 'demo summary', protect: [file] });
  const { r } = await summarise(spec, values, out, 'scanfold demo');
  // The range a user would look at: without the hot pixels, which can outweigh the specimen.
  let tmin = Infinity, tmax = -Infinity;
  for (const v of r.totalIntensityLessBadPixels ?? r.totalIntensity) { if (v < tmin) tmin = v; if (v > tmax) tmax = v; }
  const disk = r.brightFieldDisk;
  process.stdout.write(JSON.stringify({
    dataset: r.descriptor.path + ':' + r.descriptor.datasetPath,
    shape: r.descriptor.shape,
    dtype: r.descriptor.dtype,
    seconds: Number(r.seconds.toFixed(3)),
    totalIntensity: { min: tmin, max: tmax, badPixels: r.totalIntensityLessBadPixels ? 'left out' : r.badPixels.hot.length + r.badPixels.dead.length > 0 ? 'included' : 'none found' },
    brightFieldDisk: 'notFound' in disk ? disk.notFound : { x: Number(disk.cx.toFixed(2)), y: Number(disk.cy.toFixed(2)), radiusPx: Number(disk.r.toFixed(2)) },
    badDetectorPixels: { hotYX: r.badPixels.hot, deadYX: r.badPixels.dead, note: "[row, column] of each, as the output attributes bad_pixels_*_yx; detector flags take x,y" },
    previewCube: { shape: [r.preview.qY, r.preview.qX, r.preview.pY, r.preview.pX], detBin: r.preview.detBin, scanBin: r.preview.scanBin },
    summaryFile: out.path,
    defaultImages: r.defaultImages.map((im) => im.label),
    next: [
      ...('notFound' in disk ? [] : [`npx scanfold image ${file} --dataset /scan/frames --annulus ${disk.cx.toFixed(1)},${disk.cy.toFixed(1)},${Math.ceil(disk.r + 2)},40 --out ${path.join(dir, 'adf.h5')}`]),
      `npx scanfold com ${file} --dataset /scan/frames --out ${path.join(dir, 'com.h5')}`,
      `npx scanfold pca ${file} --dataset /scan/frames --components 8 --out ${path.join(dir, 'pca.h5')}`,
      `npx scanfold kmeans ${file} --dataset /scan/frames --clusters 5 --scaling sqrt --out ${path.join(dir, 'clusters.h5')}`,
    ],
    note: 'results are exploratory; validate quantitative claims yourself',
  }, null, 2) + '\n');
}

/**
 * The flag that sets each request field the validator may name; a field not here (one a command
 * fills itself, or sets from a positional argument) keeps the service's wording.
 */
const FIELD_FLAGS: Record<string, string> = {
  keepAs: '--as', maskDisk: '--mask-disk', threshold: '--threshold', components: '--components', clusters: '--clusters',
  bin: '--bin', crop: '--crop', scaling: '--scaling', oversample: '--oversample', powerIterations: '--power-iterations',
  seed: '--seed', restarts: '--restarts', badPixels: '--bad-pixels', passes: '--passes', pcaComponents: '--features pca:N',
  energyKeV: '--energy-kev', convergenceMrad: '--convergence-mrad', scanStepNm: '--scan-step-nm',
  latticeSpacingAngstrom: '--lattice-spacing-angstrom', braggDistancePx: '--bragg-distance-px',
};

/**
 * A request refused by the service's validator names the request's fields ("comField:
 * maskDisk.r: got 0; …"); at the command line the flag is what the user typed, so say that.
 */
function inFlagTerms(message: string): string {
  const m = /^([a-zA-Z]+): ([a-zA-Z]+)((?:\.[\w]+)*): ([\s\S]*)$/.exec(message);
  const flag = m && (SERVICE_METHODS as readonly string[]).includes(m[1]) ? FIELD_FLAGS[m[2]] : undefined;
  if (!m || !flag) return message;
  return `${flag}${m[3] ? ` (its ${m[3].slice(1).replace(/\./g, ' ')})` : ''}: ${m[4]}`;
}

/** Every command: each has its help. */
const COMMANDS = Object.keys(COMMAND_HELP);

export async function main(argv: string[]): Promise<number> {
  trace('main: modules loaded');
  const [cmd, ...rest] = argv;
  try {
    if (cmd === '--version' || cmd === '-V' || cmd === 'version') {
      process.stdout.write(`scanfold ${SCANFOLD_VERSION}\n`);
      return 0;
    }
    if (!cmd || cmd === '--help' || cmd === '-h' || cmd === 'help') {
      process.stdout.write(OVERVIEW + '\n');
      return 0;
    }
    if ((rest.includes('--help') || rest.includes('-h')) && COMMAND_HELP[cmd]) {
      process.stdout.write(COMMAND_HELP[cmd] + '\n');
      return 0;
    }
    switch (cmd) {
      case 'info': await cmdInfo(rest); break;
      case 'summary': await cmdSummary(rest); break;
      case 'sample': await cmdSample(rest); break;
      case 'demo': await cmdDemo(rest); break;
      case 'image': await cmdImage(rest, engineOptions, ENGINE_OPTIONS); break;
      case 'com': await cmdCom(rest, engineOptions, ENGINE_OPTIONS); break;
      case 'calibrate': await cmdCalibrate(rest, engineOptions, ENGINE_OPTIONS); break;
      case 'pattern': await cmdPattern(rest, engineOptions, ENGINE_OPTIONS); break;
      case 'pca': await cmdPca(rest, engineOptions, ENGINE_OPTIONS); break;
      case 'kmeans': await cmdKmeans(rest, engineOptions, ENGINE_OPTIONS); break;
      case 'fit': await cmdFit(rest, engineOptions, ENGINE_OPTIONS); break;
      // Loaded on demand, as the export below: the WebSocket server is no part of the other commands' start.
      case 'serve': await (await import('./serve-command')).cmdServe(rest, engineOptions, ENGINE_OPTIONS); break;
      case 'session': await cmdSession(rest, engineOptions, ENGINE_OPTIONS); break;
      case 'export': await cmdExport(rest, engineOptions, ENGINE_OPTIONS); break;
      default: {
        const near = closestFlag(cmd, COMMANDS);
        throw new InputError(`unknown command "${cmd}"${near ? ` (did you mean ${near}?)` : ''}; expected ${COMMANDS.slice(0, -1).join(', ')} or ${COMMANDS.at(-1)} (see scanfold --help; benchmarks: npm run bench)`);
      }
    }
    return 0;
  } catch (e) {
    if (isInputError(e)) {
      process.stderr.write(`scanfold: ${inFlagTerms(e.message)}\n`);
      return 2;
    }
    if (isOutputError(e)) {
      process.stderr.write(`scanfold: ${e.message}\n`);
      return 1;
    }
    if (e instanceof CancelledError) {
      process.stderr.write(`scanfold: ${e.message}\n`);
      return 130;
    }
    process.stderr.write(`scanfold: ${(e as Error)?.stack ?? String(e)}\n`);
    return 1;
  }
}

// A signal that ends the process still runs the 'exit' handlers, which remove temporary files.
// Ctrl-C cancels a running job (which then cleans up and exits 130); between jobs it ends at once.
process.on('SIGINT', () => { if (!interruptRunningJob()) process.exit(130); });
for (const [signal, code] of [['SIGTERM', 143], ['SIGHUP', 129]] as const) {
  process.on(signal, () => process.exit(code));
}

main(process.argv.slice(2)).then((code) => {
  trace('main: done');
  // For the bounded-memory test: the peak resident set of the whole process (all threads).
  if (process.env.SCANFOLD_REPORT_PEAK_RSS) process.stderr.write(`peak-rss-bytes ${process.resourceUsage().maxRSS * 1024}\n`);
  process.exitCode = code;
});
