// `scanfold image`, `com`, `calibrate`, `pattern`: flags → one request to the engine service →
// files. The analysis itself (bad pixels, detectors, the COM field, calibration) is the
// service's; this file only parses, asks and writes.
import type { SourceSpec } from '../../src-shared/model/dataset';
import type { DetectorShape, RegionShape } from '../../src-shared/model/detectors';
import { InputError } from '../../src-shared/model/errors';
import type { BadPixelsMode, DescanRequest } from '../../src-shared/contract/service';
import type { EngineOptions } from '../engine/engine';
import fs from 'node:fs';
import { EngineService } from '../engine/service';
import { writeFloat64Results, type ResultArray, type WrittenResults } from '../io/write-results';
import { resultArrays } from '../io/result-arrays';
import type { OutputFile } from '../io/output-file';
import { readNpy2D } from '../io/npy-array';
import { canonicalPath, physicalPath } from '../io/input-file';
import { followJobs } from './progress';
import { SCANFOLD_VERSION } from '../engine/version';
import { trace } from '../engine/trace';
import { decimalNumber, numberList, outputFlag, parseFlags, rectangleFlag, rejectExtraPositionals, SOURCE_OPTIONS, sourceSpecFromFlags } from './source-flags';

type Flags = Record<string, string | boolean | (string | boolean)[] | undefined>;
type EngineFlags = Record<string, { type: 'string' | 'boolean' }>;
type EngineOptionsOf = (v: Record<string, unknown>) => EngineOptions;

const numbers = (flag: string, s: string, count: number) => numberList(flag, s, count);

function positive(flag: string, s: string | undefined): number | undefined {
  if (s === undefined) return undefined;
  const v = decimalNumber(flag, s, 'a positive number');
  if (v <= 0) throw new InputError(`--${flag} ${s}: expected a positive number`);
  return v;
}

function badPixelsFlag(v: Flags): BadPixelsMode {
  const mode = typeof v['bad-pixels'] === 'string' ? v['bad-pixels'] : 'auto';
  if (mode !== 'auto' && mode !== 'none') throw new InputError(`--bad-pixels ${mode}: expected auto or none`);
  return mode;
}

/** Detector flags in the order the user gave them. */
function detectorShapes(tokens: ReturnType<typeof parseFlags>['tokens'] | undefined, detY: number, detX: number): DetectorShape[] {
  const shapes: DetectorShape[] = [];
  for (const t of tokens ?? []) {
    if (t.kind !== 'option' || typeof t.value !== 'string') continue;
    const v = t.value;
    switch (t.name) {
      case 'disk': {
        const [cx, cy, r] = numbers('disk', v, 3);
        if (r <= 0) throw new InputError(`--disk ${v}: the radius is ${r}; expected a radius > 0`);
        shapes.push({ kind: 'disk', cx, cy, r });
        break;
      }
      case 'annulus': {
        const [cx, cy, rInner, rOuter] = numbers('annulus', v, 4);
        if (rInner < 0 || rOuter <= rInner) throw new InputError(`--annulus ${v}: inner radius ${rInner}, outer radius ${rOuter}; expected 0 ≤ inner < outer`);
        shapes.push({ kind: 'annulus', cx, cy, rInner, rOuter });
        break;
      }
      case 'rect': shapes.push({ kind: 'rectangle', ...rectangleFlag('rect', v) }); break;
      case 'polygon': shapes.push({ kind: 'polygon', points: polygonFlag('polygon', v) }); break;
      case 'mask': {
        const m = readNpy2D(v, 'detector mask');
        if (m.height !== detY || m.width !== detX) {
          throw new InputError(`${canonicalPath(v)}: the mask is ${m.height}×${m.width}, but the patterns are ${detY}×${detX}; expected a mask of the detector's shape`);
        }
        checkMaskValues(v, m.values, m.width);
        shapes.push({ kind: 'mask', width: m.width, height: m.height, values: m.values });
        break;
      }
    }
  }
  return shapes;
}

/** Points "X,Y X,Y X,Y …" of a polygon flag, at least three. */
function polygonFlag(flag: string, v: string): [number, number][] {
  const pts = v.trim().split(/\s+/).map((p) => numbers(flag, p, 2) as [number, number]);
  if (pts.length < 3) throw new InputError(`--${flag} "${v}": ${pts.length} point(s); expected at least 3, as "X,Y X,Y X,Y"`);
  return pts;
}

/** A painted mask holds 0/1 or weights in [0, 1]; say where it does not, naming the file. */
function checkMaskValues(file: string, values: ArrayLike<number>, width: number): void {
  for (let i = 0; i < values.length; i++) {
    const x = values[i];
    if (!(x >= 0 && x <= 1)) {
      throw new InputError(`${canonicalPath(file)}: the mask holds ${x} at row ${Math.floor(i / width)}, column ${i % width}; expected 0/1 or weights in [0, 1]`);
    }
  }
}

/** --session FILE and --as NAME: the result (and its recipe) added to a session file. */
export const SESSION_FLAGS = { session: { type: 'string' }, as: { type: 'string' } } as const;

export interface SessionTarget {
  path: string;
  /** The key asked for (--as), or null: the command's name, numbered when taken. */
  key: string | null;
  command: string;
}

export function sessionTarget(v: Flags, command: string): SessionTarget | null {
  if (typeof v.session !== 'string') {
    if (typeof v.as === 'string') throw new InputError('--as NAME names the result in a session; it goes with --session FILE.scanfold.h5');
    return null;
  }
  if (v.session.trim() === '') throw new InputError('--session needs a file name, such as analysis.scanfold.h5');
  return { path: v.session, key: typeof v.as === 'string' ? v.as : null, command };
}

/** The output file of an analysis command: --out, or none when only --session is given. */
export function analysisOutput(v: Flags, command: string, protect: readonly string[]): OutputFile | null {
  if (typeof v.out !== 'string' && typeof v.session === 'string') return null;
  if (typeof v.out !== 'string') throw new InputError(`${command} needs --out OUT.h5, or --session FILE.scanfold.h5 to add the result to a session`);
  return outputFlag(v.out, command, protect);
}

/** The start of a command's last line: where the results went (none with only --session). */
export function wrote(w: WrittenResults | null): string {
  return w ? `wrote ${w.path}` : 'computed';
}

/** What to add to an analysis request so the engine keeps its result for the session. */
export type Keep = { keepAs?: string };

/**
 * Run `fn` on a fresh engine service with progress on stderr (Ctrl-C cancels). With an output,
 * its temporary file is removed whatever happens unless `fn` wrote it. With a session, the
 * session is read first (if it exists), `fn` gets the key to keep its result under, and the
 * session is saved after (atomically: the old one stays whole until the new one is complete).
 */
export async function withService<T>(options: EngineOptions, quiet: boolean, fn: (s: EngineService, keep: Keep) => Promise<T>, out?: OutputFile | null, session?: SessionTarget | null): Promise<T> {
  try {
    const service = new EngineService(options);
    for (const note of service.notes) process.stderr.write(`note: ${note}\n`);
    const stop = followJobs(service, quiet);
    try {
      let keep: Keep = {};
      if (session) {
        const taken = new Set(fs.existsSync(session.path) ? (await service.openSession({ path: session.path, openData: false })).results.map((e) => e.key) : []);
        let key = session.key ?? session.command;
        for (let n = 2; session.key === null && taken.has(key); n++) key = `${session.command}-${n}`;
        keep = { keepAs: key };
      }
      const result = await fn(service, keep);
      if (session) {
        const saved = await service.saveSession({ path: session.path });
        if (!quiet) process.stderr.write(`added ${keep.keepAs} to ${saved.path} (${saved.results} result${saved.results === 1 ? '' : 's'} in the session)\n`);
      }
      return result;
    } finally { stop(); await service.shutdown(); }
  } finally {
    out?.discard();
  }
}

/**
 * Open the source, protect every file its data comes from against --out, and check there is
 * room for the results (float64 values per scan position and per detector pixel).
 */
export async function openProtected(service: EngineService, spec: SourceSpec, out: OutputFile | null, valuesPer: { scan: number; pattern: number }) {
  const opened = await service.open(spec);
  const d = opened.descriptor;
  if (!out) return opened;
  out.protect(d.sourceFiles);
  out.reserve(8 * (valuesPer.scan * d.shape.scanY * d.shape.scanX + valuesPer.pattern * d.shape.detY * d.shape.detX));
  return opened;
}

/**
 * Write the results, after protecting every file the engine's readers opened (external raw
 * data, virtual sources), by identity, whatever name they were opened under.
 */
export async function writeResults(service: EngineService, out: OutputFile | null, arrays: Record<string, ResultArray>, attrs: Record<string, string | number>): Promise<WrittenResults | null> {
  if (!out) return null;
  out.protectIdentities(await service.filesRead());
  return writeFloat64Results(out, arrays, attrs);
}

/** NaN/±Inf values in the input, left out of every sum: said by summary, image, com and pattern. */
export function noteNonFiniteInputs(n: number): void {
  if (n > 0) process.stderr.write(`note: ${n} NaN/Inf input values were left out of the sums and maxima (non_finite_inputs)\n`);
}

/** Say on stderr which results are NaN or ±Inf (overflowed sums, divisions by zero). */
export function noteNonFiniteResults(w: WrittenResults | null, expected = ''): void {
  if (!w) return;
  const parts = Object.entries(w.nonFiniteResults).map(([k, n]) => `${k} ${n}`);
  if (parts.length) process.stderr.write(`note: NaN or ±Inf result values (${parts.join(', ')})${expected}; their count is stored as non_finite_results\n`);
}

/** Paths given to a flag that takes a file, as absolute paths, to protect them from --out. */
function flagFiles(v: Flags, ...names: string[]): string[] {
  return names.flatMap((n) => [v[n]].flat().filter((x): x is string => typeof x === 'string').map((x) => physicalPath(x)));
}

/**
 * Where a result came from, on every output file: Scanfold's version, the command line, the
 * request as the engine received it (every parameter, defaults included where the engine
 * chose them, see the other attributes), the input and its fingerprint.
 */
export function provenance(d: { path: string; datasetPath: string | null; fingerprint: string }, producer: string, request?: unknown): Record<string, string> {
  return {
    producer,
    scanfold_version: SCANFOLD_VERSION,
    command_line: JSON.stringify(process.argv.slice(2)),
    created: new Date().toISOString(),
    source_path: d.path,
    source_dataset: d.datasetPath ?? '',
    source_fingerprint: d.fingerprint,
    // The request as given; the engine's handle of the dataset means nothing outside this run.
    ...(request !== undefined ? { request: JSON.stringify(withoutHandle(request), (_k, v) => (ArrayBuffer.isView(v) || (Array.isArray(v) && v.length > 64) ? `(${(v as ArrayLike<number>).length} values)` : v)) } : {}),
  };
}

function withoutHandle(request: unknown): unknown {
  if (request === null || typeof request !== 'object' || Array.isArray(request)) return request;
  const { dataset: _dataset, ...rest } = request as Record<string, unknown>;
  return rest;
}

/** Bad detector pixels left out, as [y, x] coordinates, for the output's attributes. */
export function badPixelAttrs(b: { hot: [number, number][]; dead: [number, number][] } | undefined): Record<string, string> {
  return b ? { bad_pixels_hot_yx: JSON.stringify(b.hot), bad_pixels_dead_yx: JSON.stringify(b.dead) } : {};
}

export async function cmdImage(args: string[], engineOptions: EngineOptionsOf, engineFlags: EngineFlags): Promise<void> {
  const parsed = parseFlags(args, {
    ...SESSION_FLAGS,
    ...SOURCE_OPTIONS, ...engineFlags, out: { type: 'string' }, weighted: { type: 'boolean' }, 'bad-pixels': { type: 'string' },
    disk: { type: 'string', multiple: true }, annulus: { type: 'string', multiple: true }, rect: { type: 'string', multiple: true },
    polygon: { type: 'string', multiple: true }, mask: { type: 'string', multiple: true },
  });
  const v = parsed.values as Flags;
  rejectExtraPositionals(parsed.positionals, 'image');
  const spec = sourceSpecFromFlags(parsed.positionals[0], v as Record<string, unknown>);
  const badPixels = badPixelsFlag(v);
  const out = analysisOutput(v, 'image', [spec.path, ...flagFiles(v, 'mask')]);
  const session = sessionTarget(v, 'image');
  const quiet = v.quiet === true;
  await withService(engineOptions(v as Record<string, unknown>), quiet, async (service, keep) => {
    const nDetectors = (parsed.tokens ?? []).filter((t) => t.kind === 'option' && ['disk', 'annulus', 'rect', 'polygon', 'mask'].includes(t.name)).length;
    const opened = await openProtected(service, spec, out, { scan: nDetectors, pattern: 0 });
    const { detY, detX, scanY, scanX } = opened.descriptor.shape;
    const shapes = detectorShapes(parsed.tokens, detY, detX);
    if (shapes.length === 0) throw new InputError('image needs at least one detector: --disk, --annulus, --rect, --polygon or --mask');
    const request = { dataset: opened.id, detectors: shapes.map((shape) => ({ shape, weighted: v.weighted === true })), badPixels };
    const r = await service.virtualImages({ ...request, ...keep });
    const arrays = resultArrays('virtualImages', r);
    Object.assign(arrays.images.attrs!, { bad_pixels_left_out: r.badPixelsLeftOut, non_finite_inputs: r.nonFiniteInputs });
    const written = await writeResults(service, out, arrays, { ...provenance(r.descriptor, 'scanfold image', request), ...badPixelAttrs(r.badPixels) });
    noteNonFiniteInputs(r.nonFiniteInputs);
    noteNonFiniteResults(written);
    if (!quiet) process.stderr.write(`${wrote(written)}: ${r.images.length} image(s) ${scanY}×${scanX}${r.badPixelsLeftOut ? `, ${r.badPixelsLeftOut} bad detector pixel(s) left out` : ''}\n`);
  }, out, session);
}

export async function cmdCom(args: string[], engineOptions: EngineOptionsOf, engineFlags: EngineFlags): Promise<void> {
  const parsed = parseFlags(args, {
    ...SESSION_FLAGS,
    ...SOURCE_OPTIONS, ...engineFlags, out: { type: 'string' }, 'mask-disk': { type: 'string' }, threshold: { type: 'string' },
    descan: { type: 'string' }, 'descan-region': { type: 'string' }, rotation: { type: 'string' }, flip: { type: 'string' }, 'bad-pixels': { type: 'string' },
    'mrad-per-pixel': { type: 'string' }, 'energy-kev': { type: 'string' }, 'scan-step-nm': { type: 'string' },
  });
  const v = parsed.values as Flags;
  rejectExtraPositionals(parsed.positionals, 'com');
  const spec = sourceSpecFromFlags(parsed.positionals[0], v as Record<string, unknown>);
  const quiet = v.quiet === true;
  const threshold = typeof v.threshold === 'string' ? decimalNumber('threshold', v.threshold) : 0;
  const descanName = typeof v.descan === 'string' ? v.descan : (typeof v['descan-region'] === 'string' ? 'reference' : 'auto');
  if (!['auto', 'none', 'mean', 'plane', 'reference'].includes(descanName)) throw new InputError(`--descan ${descanName}: expected auto, none, mean, plane or reference`);
  if ((descanName === 'reference') !== (typeof v['descan-region'] === 'string')) {
    throw new InputError('--descan reference needs --descan-region X0,Y0,X1,Y1 (scan positions of a reference area such as vacuum), and that flag needs --descan reference');
  }
  // auto: vacuum found in the scan is the reference; without vacuum the mean COM is removed.
  const descan: DescanRequest | undefined = typeof v['descan-region'] === 'string'
    ? { kind: 'reference', region: rectangleFlag('descan-region', v['descan-region']) }
    : descanName === 'auto' ? undefined : { kind: descanName as 'none' | 'mean' | 'plane' };
  const rotationArg = typeof v.rotation === 'string' ? v.rotation : 'auto';
  const rotationGiven = rotationArg === 'auto' ? null : decimalNumber('rotation', rotationArg, 'auto or a number of degrees');
  const flipArg = typeof v.flip === 'string' ? v.flip : 'auto';
  if (!['auto', 'yes', 'no'].includes(flipArg)) throw new InputError(`--flip ${flipArg}: expected auto, yes or no`);
  if ((rotationGiven === null) !== (flipArg === 'auto')) {
    throw new InputError('--rotation and --flip go together: both auto (estimated from the data), or both given');
  }
  // With the calibration, COM is also given as a deflection in mrad and the phase in radians.
  const cal = ['mrad-per-pixel', 'energy-kev', 'scan-step-nm'].map((k) => positive(k, v[k] as string | undefined));
  if (cal.some((x) => x !== undefined) && cal.some((x) => x === undefined)) {
    throw new InputError('--mrad-per-pixel, --energy-kev and --scan-step-nm go together (they put the COM in mrad and the phase in radians)');
  }
  const maskDisk = typeof v['mask-disk'] === 'string' ? (([cx, cy, r]) => ({ cx, cy, r }))(numbers('mask-disk', v['mask-disk'], 3)) : undefined;
  const badPixels = badPixelsFlag(v);
  const out = analysisOutput(v, 'com', [spec.path]);
  const session = sessionTarget(v, 'com');
  await withService(engineOptions(v as Record<string, unknown>), quiet, async (service, keep) => {
    // Up to 11 maps of the scan: COM x/y, total, magnitude, direction, divergence, curl, phase and three calibrated ones.
    trace('com: engine started');
    const opened = await openProtected(service, spec, out, { scan: 11, pattern: 0 });
    trace('com: dataset open');
    const request = {
      dataset: opened.id, maskDisk, threshold, ...(descan ? { descan } : {}), badPixels,
      rotation: rotationGiven === null ? 'auto' as const : { degrees: rotationGiven, flip: flipArg === 'yes' },
      ...(cal[0] !== undefined ? { calibration: { mradPerPixel: cal[0], energyKeV: cal[1]!, scanStepNm: cal[2]! } } : {}),
    };
    const f = await service.comField({ ...request, ...keep });
    trace('com: field made');
    if (!quiet) for (const note of f.notes) process.stderr.write(`note: ${note}\n`);
    const arrays = resultArrays('comField', f);
    const rot = f.rotation;
    const rootAttrs: Record<string, string | number> = {
      rotation_degrees: rot.degrees, flip: rot.flip ? 'yes' : 'no', rotation_source: rot.source,
      descan: f.descan, vacuum_source: f.vacuum.source, vacuum_positions: f.vacuum.positions, threshold: f.threshold,
      descan_removed_x_abc: JSON.stringify([f.descanRemoved.x.a, f.descanRemoved.x.b, f.descanRemoved.x.c]),
      descan_removed_y_abc: JSON.stringify([f.descanRemoved.y.a, f.descanRemoved.y.b, f.descanRemoved.y.c]),
      descan_removed_meaning: 'a + b·scan_x + c·scan_y (detector px) subtracted from com_x and com_y before rotation', zero_total_patterns: f.zeroTotalPatterns, bad_pixels_left_out: f.badPixelsLeftOut,
      non_finite_inputs: f.nonFiniteInputs, com_mask: f.comMask, com_sums_from: f.sumsFrom, ...provenance(f.descriptor, 'scanfold com', request), ...badPixelAttrs(f.badPixels),
    };
    if (rot.alternativeDegrees !== undefined) {
      rootAttrs.rotation_alternative_degrees = rot.alternativeDegrees;
      rootAttrs.rotation_curl_relative = rot.curlRelative!;
      rootAttrs.rotation_estimate_smoothing_scan_steps = rot.smoothingSigma!;
      rootAttrs.rotation_half_turn_rule = rot.halfTurnRule!;
      rootAttrs.rotation_half_turn_score = rot.halfTurnScore!;
      rootAttrs.rotation_half_turn = rot.halfTurnDetermined ? 'settled by vacuum' : 'undetermined (no vacuum): chosen by the phase skewness';
    }
    if (f.calibration) {
      const c = f.calibration;
      Object.assign(rootAttrs, { mrad_per_pixel: c.mradPerPixel, energy_kev: c.energyKeV, wavelength_pm: c.wavelengthPm, scan_step_nm: c.scanStepNm });
      arrays.phase_radians.attrs!.radians_per_phase_unit = c.radiansPerPhaseUnit;
    }
    const written = await writeResults(service, out, arrays, rootAttrs);
    trace('com: written');
    noteNonFiniteInputs(f.nonFiniteInputs);
    noteNonFiniteResults(written, f.zeroTotalPatterns ? `; ${f.zeroTotalPatterns} pattern(s) with zero total have no centre of mass (NaN by design)` : '');
    if (!quiet) {
      process.stderr.write(`${wrote(written)}: rotation ${rot.degrees.toFixed(2)}°, flip ${rot.flip ? 'yes' : 'no'}${rot.alternativeDegrees !== undefined ? ` (estimated; relative curl ${rot.curlRelative!.toFixed(3)}; 180° away: ${rot.alternativeDegrees.toFixed(2)}°)` : ''}` +
        `${f.zeroTotalPatterns ? `; ${f.zeroTotalPatterns} pattern(s) with zero total → NaN` : ''}\n`);
    }
  }, out, session);
}

export async function cmdCalibrate(args: string[], engineOptions: EngineOptionsOf, engineFlags: EngineFlags): Promise<void> {
  const parsed = parseFlags(args, {
    ...SESSION_FLAGS,
    ...SOURCE_OPTIONS, ...engineFlags, 'energy-kev': { type: 'string' }, 'convergence-mrad': { type: 'string' },
    'lattice-spacing-angstrom': { type: 'string' }, 'bragg-distance-px': { type: 'string' }, 'scan-step-nm': { type: 'string' },
    out: { type: 'string' },
  });
  const v = parsed.values as Flags;
  const spec = sourceSpecFromFlags(parsed.positionals[0], v as Record<string, unknown>);
  const energy = positive('energy-kev', v['energy-kev'] as string | undefined);
  const alpha = positive('convergence-mrad', v['convergence-mrad'] as string | undefined);
  const d = positive('lattice-spacing-angstrom', v['lattice-spacing-angstrom'] as string | undefined);
  const braggGiven = positive('bragg-distance-px', v['bragg-distance-px'] as string | undefined);
  const scanStep = positive('scan-step-nm', v['scan-step-nm'] as string | undefined);
  if (alpha !== undefined && d !== undefined) throw new InputError('calibrate takes one of --convergence-mrad A or --lattice-spacing-angstrom D, not both');
  if (braggGiven !== undefined && d === undefined) throw new InputError('--bragg-distance-px goes with --lattice-spacing-angstrom (the distance of that Bragg disk from the centre)');
  rejectExtraPositionals(parsed.positionals, 'calibrate');
  const out = typeof v.out === 'string' ? outputFlag(v.out, 'calibrate', [spec.path]) : undefined;
  const session = sessionTarget(v, 'calibrate');
  await withService(engineOptions(v as Record<string, unknown>), v.quiet === true, async (service, keep) => {
    const opened = out ? await openProtected(service, spec, out, { scan: 0, pattern: 0 }) : await service.open(spec);
    const request = {
      dataset: opened.id, ...(energy !== undefined ? { energyKeV: energy } : {}),
      ...(alpha !== undefined ? { convergenceMrad: alpha } : {}), ...(d !== undefined ? { latticeSpacingAngstrom: d } : {}),
      ...(braggGiven !== undefined ? { braggDistancePx: braggGiven } : {}), ...(scanStep !== undefined ? { scanStepNm: scanStep } : {}),
    };
    const c = await service.calibrate({ ...request, ...keep });
    if (out) {
      // The calibration as attributes of the file's root (numbers as float64), and the rings found as a table.
      const attrs: Record<string, string | number> = {
        ...provenance(opened.descriptor, 'scanfold calibrate', request),
        wavelength_pm: c.wavelengthPm, disk_center_x_px: c.disk.cx, disk_center_y_px: c.disk.cy, disk_radius_px: c.disk.r,
        mrad_per_pixel: c.mradPerPixel, inverse_angstrom_per_pixel: c.inverseAngstromPerPixel, calibration_source: c.source,
        value_sources: JSON.stringify(c.valueSources),
        ...(c.braggDistancePx !== undefined ? { bragg_distance_px: c.braggDistancePx } : {}),
        ...(c.scanStepNm !== undefined ? { scan_step_nm: c.scanStepNm } : {}),
      };
      const arrays: Record<string, ResultArray> = c.rings
        ? { rings: { data: Float64Array.from(c.rings.flatMap((g) => [g.radius, g.strength])), shape: [c.rings.length, 2], attrs: { columns: 'radius_px, strength' } } }
        : {};
      await writeResults(service, out, arrays, attrs);
    }
    process.stdout.write(JSON.stringify({
      wavelength_pm: c.wavelengthPm,
      disk_center_px: { x: c.disk.cx, y: c.disk.cy },
      disk_radius_px: c.disk.r,
      disk_edge_consistency: c.disk.edgeConsistency,
      mrad_per_pixel: c.mradPerPixel,
      inverse_angstrom_per_pixel: c.inverseAngstromPerPixel,
      ...(c.braggDistancePx !== undefined ? { bragg_distance_px: c.braggDistancePx, bragg_distance_source: c.braggDistanceSource } : {}),
      ...(c.scanStepNm !== undefined ? { scan_step_nm: c.scanStepNm } : {}),
      calibration_source: c.source,
      value_sources: c.valueSources,
      ...(c.rings ? { rings_found: c.rings } : {}),
      bad_pixels: c.badPixels,
      note: 'exploratory: check against a reference specimen before quoting numbers',
    }, null, 2) + '\n');
  }, out, session);
}

export async function cmdPattern(args: string[], engineOptions: EngineOptionsOf, engineFlags: EngineFlags): Promise<void> {
  const parsed = parseFlags(args, {
    ...SESSION_FLAGS, ...SOURCE_OPTIONS, ...engineFlags, out: { type: 'string' }, 'region-rect': { type: 'string' }, 'region-polygon': { type: 'string' }, 'region-mask': { type: 'string' } });
  const v = parsed.values as Flags;
  rejectExtraPositionals(parsed.positionals, 'pattern');
  const spec = sourceSpecFromFlags(parsed.positionals[0], v as Record<string, unknown>);
  const given = ['region-rect', 'region-polygon', 'region-mask'].filter((k) => typeof v[k] === 'string');
  if (given.length !== 1) throw new InputError('pattern needs exactly one of --region-rect, --region-polygon or --region-mask');
  const rect = typeof v['region-rect'] === 'string' ? rectangleFlag('region-rect', v['region-rect']) : null;
  const out = analysisOutput(v, 'pattern', [spec.path, ...flagFiles(v, 'region-mask')]);
  const session = sessionTarget(v, 'pattern');
  await withService(engineOptions(v as Record<string, unknown>), v.quiet === true, async (service, keep) => {
    const opened = await openProtected(service, spec, out, { scan: 0, pattern: 2 });
    const { detY, detX } = opened.descriptor.shape;
    let region: RegionShape;
    if (rect) {
      region = { kind: 'rectangle', ...rect };
    } else if (typeof v['region-polygon'] === 'string') {
      region = { kind: 'polygon', points: polygonFlag('region-polygon', v['region-polygon']) };
    } else {
      const file = v['region-mask'] as string;
      const m = readNpy2D(file, 'region mask');
      const { scanY, scanX } = opened.descriptor.shape;
      if (m.height !== scanY || m.width !== scanX) {
        throw new InputError(`${canonicalPath(file)}: the region mask is ${m.height}×${m.width}, but the scan is ${scanY}×${scanX}; expected a mask of the scan's shape`);
      }
      checkMaskValues(file, m.values, m.width);
      region = { kind: 'mask', width: m.width, height: m.height, values: m.values };
    }
    const request = { dataset: opened.id, region };
    const r = await service.regionPattern({ ...request, ...keep });
    const written = await writeResults(service, out, resultArrays('regionPattern', r), { region: r.region, positions: r.count, non_finite_inputs: r.nonFiniteInputs, ...provenance(r.descriptor, 'scanfold pattern', request) });
    noteNonFiniteInputs(r.nonFiniteInputs);
    noteNonFiniteResults(written);
    if (v.quiet !== true) process.stderr.write(`${wrote(written)}: mean and max pattern over ${r.count} probe position(s)\n`);
  }, out, session);
}

