// `scanfold image`, `scanfold com`, `scanfold calibrate`: virtual imaging, centre of mass and
// calibration from the command line, through the same engine as the application.
import path from 'node:path';
import type { SourceSpec } from '../../src-shared/model/dataset';
import type { DetectorShape, DetectorSpec, RegionShape } from '../../src-shared/model/detectors';
import { InputError, isInputError } from '../../src-shared/model/errors';
import { compileDetector, describeDetector } from '../../src-shared/compute/detector-masks';
import { findBadPixels, replaceBadPixels } from '../../src-shared/compute/bad-pixels';
import { findBrightFieldDisk } from '../../src-shared/compute/bright-field-disk';
import { calibrate } from '../../src-shared/compute/calibration';
import { electronWavelengthPm } from '../../src-shared/compute/wavelength';
import { strongestRing } from '../../src-shared/compute/radial-profile';
import { descan, rotateCom, divergence, curl, estimateRotation, integrateCom, magnitudeDirection, type DescanMode } from '../../src-shared/compute/com-field';
import { compileRegion, describeRegion } from '../../src-shared/compute/region-masks';
import { Engine, type EngineOptions } from '../engine/engine';
import type { FirstPassSummary } from '../engine/first-pass';
import { writeFloat64Results, type ResultArray, type WrittenResults } from '../io/write-results';
import type { OutputFile } from '../io/output-file';
import { readNpy2D } from '../io/npy-array';
import { runJobWithProgress } from './progress';
import { decimalNumber, numberList, outputFlag, parseFlags, rectangleFlag, rejectExtraPositionals, SOURCE_OPTIONS, sourceSpecFromFlags } from './source-flags';

export const ANALYSIS_HELP = `  scanfold image FILE [source flags] --disk CX,CY,R --annulus CX,CY,R0,R1 --rect X0,Y0,X1,Y1
                 --polygon "X,Y X,Y X,Y" --mask MASK.npy [--weighted] [--bad-pixels auto|none] --out OUT.h5
      virtual images of any number of detectors (detector px; x column, y row), in the order
      given, in one pass: /images (n_detectors, scan_y, scan_x) float64
  scanfold com FILE [source flags] [--mask-disk CX,CY,R] [--threshold T] [--descan none|mean|plane|reference
                 [--descan-region X0,Y0,X1,Y1]]
                 [--rotation auto|DEGREES] [--flip auto|yes|no] [--bad-pixels auto|none]
                 [--mrad-per-pixel M --energy-kev E --scan-step-nm S] --out OUT.h5
      centre of mass per pattern: /com_x, /com_y (detector px, after descan and rotation),
      /total_intensity, /magnitude, /direction, /divergence, /curl, /phase (integrated COM),
      attributes rotation_degrees, flip; with the calibration also /com_x_mrad, /com_y_mrad, /phase_radians
  scanfold calibrate FILE [source flags] --energy-kev E [--convergence-mrad A | --lattice-spacing-angstrom D
                 [--bragg-distance-px G]]
      wavelength, bright-field disk, mrad and Å⁻¹ per detector pixel, as JSON
  --bad-pixels auto (default) finds hot and dead detector pixels on the mean/max pattern (one
      extra pass) and leaves them out of every detector and of the COM; none keeps every pixel.`;

type Flags = Record<string, string | boolean | (string | boolean)[] | undefined>;

const numbers = (flag: string, s: string, count: number) => numberList(flag, s, count);

function positive(flag: string, s: string | undefined): number | undefined {
  if (s === undefined) return undefined;
  const v = decimalNumber(flag, s, 'a positive number');
  if (v <= 0) throw new InputError(`--${flag} ${s}: expected a positive number`);
  return v;
}

/** Detector flags in the order the user gave them. */
function detectorShapes(tokens: ReturnType<typeof parseFlags>['tokens'] | undefined, detY: number, detX: number): DetectorShape[] {
  const shapes: DetectorShape[] = [];
  for (const t of tokens ?? []) {
    if (t.kind !== 'option' || typeof t.value !== 'string') continue;
    const v = t.value;
    switch (t.name) {
      case 'disk': { const [cx, cy, r] = numbers('disk', v, 3); shapes.push({ kind: 'disk', cx, cy, r }); break; }
      case 'annulus': { const [cx, cy, rInner, rOuter] = numbers('annulus', v, 4); shapes.push({ kind: 'annulus', cx, cy, rInner, rOuter }); break; }
      case 'rect': shapes.push({ kind: 'rectangle', ...rectangleFlag('rect', v) }); break;
      case 'polygon': {
        const pts = v.trim().split(/\s+/).map((p) => numbers('polygon', p, 2) as [number, number]);
        shapes.push({ kind: 'polygon', points: pts });
        break;
      }
      case 'mask': {
        const m = readNpy2D(v, 'detector mask');
        if (m.height !== detY || m.width !== detX) {
          throw new InputError(`${path.resolve(v)}: the mask is ${m.height}×${m.width}, but the patterns are ${detY}×${detX}; expected a mask of the detector's shape`);
        }
        shapes.push({ kind: 'mask', width: m.width, height: m.height, values: m.values });
        break;
      }
    }
  }
  return shapes;
}

/**
 * Run `fn` on a fresh engine. With an output, its temporary file is removed whatever happens
 * unless `fn` wrote it.
 */
async function withEngine<T>(options: EngineOptions, fn: (e: Engine) => Promise<T>, out?: OutputFile): Promise<T> {
  try {
    const engine = new Engine(options);
    for (const note of engine.notes) process.stderr.write(`note: ${note}\n`);
    try { return await fn(engine); } finally { await engine.close(); }
  } finally {
    out?.discard();
  }
}

/**
 * Describe the source on a worker, protect every file its data comes from against --out, and
 * check there is room for the results (float64 values per scan position and per detector pixel).
 */
export async function describeProtected(engine: Engine, spec: SourceSpec, out: OutputFile, valuesPer: { scan: number; pattern: number }) {
  const d = await engine.describe(spec);
  out.protect(d.sourceFiles);
  out.reserve(8 * (valuesPer.scan * d.shape.scanY * d.shape.scanX + valuesPer.pattern * d.shape.detY * d.shape.detX));
  return d;
}

/** Say on stderr which results are NaN or ±Inf (overflowed sums, divisions by zero). */
export function noteNonFiniteResults(w: WrittenResults, expected = ''): void {
  const parts = Object.entries(w.nonFiniteResults).map(([k, n]) => `${k} ${n}`);
  if (parts.length) process.stderr.write(`note: NaN or ±Inf result values (${parts.join(', ')})${expected}; their count is stored as non_finite_results\n`);
}

/** Input problems found by an analysis name the file they were found in. */
function aboutFile<T>(file: string, fn: () => T): T {
  try {
    return fn();
  } catch (e) {
    if (isInputError(e) && !e.message.startsWith(file)) throw new InputError(`${file}: ${e.message}`, e.code);
    throw e;
  }
}

/** Paths given to a flag that takes a file, as absolute paths, to protect them from --out. */
function flagFiles(v: Flags, ...names: string[]): string[] {
  return names.flatMap((n) => [v[n]].flat().filter((x): x is string => typeof x === 'string').map((x) => path.resolve(x)));
}

const runJob = runJobWithProgress;

/** The bad-pixel mask from a first pass, or none. */
async function badPixelMask(engine: Engine, spec: SourceSpec, mode: string, quiet: boolean): Promise<{ mask: Uint8Array | undefined; count: number; summary?: FirstPassSummary }> {
  if (mode === 'none') return { mask: undefined, count: 0 };
  if (mode !== 'auto') throw new InputError(`--bad-pixels ${mode}: expected auto or none`);
  const s = await runJob(engine.firstPass(spec), 'first pass (bad pixels)', quiet);
  const { detY, detX, scanY, scanX } = s.descriptor.shape;
  const bad = findBadPixels(s.meanPattern, s.maxPattern, detY, detX, { patternCount: scanY * scanX });
  return { mask: bad.mask, count: bad.hot.length + bad.dead.length, summary: s };
}


export async function cmdImage(args: string[], engineOptions: (v: Record<string, unknown>) => EngineOptions, engineFlags: Record<string, { type: 'string' | 'boolean' }>): Promise<void> {
  const parsed = parseFlags(args, {
      ...SOURCE_OPTIONS, ...engineFlags, out: { type: 'string' }, weighted: { type: 'boolean' }, 'bad-pixels': { type: 'string' },
      disk: { type: 'string', multiple: true }, annulus: { type: 'string', multiple: true }, rect: { type: 'string', multiple: true },
      polygon: { type: 'string', multiple: true }, mask: { type: 'string', multiple: true },
    });
  const v = parsed.values as Flags;
  rejectExtraPositionals(parsed.positionals, 'image');
  const spec = sourceSpecFromFlags(parsed.positionals[0], v as Record<string, unknown>);
  const out = outputFlag(v.out, 'image', [spec.path, ...flagFiles(v, 'mask')]);
  const quiet = v.quiet === true;
  await withEngine(engineOptions(v as Record<string, unknown>), async (engine) => {
    const nDetectors = (parsed.tokens ?? []).filter((t) => t.kind === 'option' && ['disk', 'annulus', 'rect', 'polygon', 'mask'].includes(t.name)).length;
    const { detY, detX, scanY, scanX } = (await describeProtected(engine, spec, out, { scan: nDetectors, pattern: 0 })).shape;
    const shapes = detectorShapes(parsed.tokens, detY, detX);
    if (shapes.length === 0) throw new InputError('image needs at least one detector: --disk, --annulus, --rect, --polygon or --mask');
    const specs: DetectorSpec[] = shapes.map((shape) => ({ shape, weighted: v.weighted === true }));
    // Check every detector before any pass over the data.
    for (const s of specs) compileDetector(s, detY, detX);
    const bad = await badPixelMask(engine, spec, typeof v['bad-pixels'] === 'string' ? v['bad-pixels'] : 'auto', quiet);
    const compiled = specs.map((s) => ({ ...compileDetector(s, detY, detX, { excludePixels: bad.mask }), label: describeDetector(s) }));
    const r = await runJob(engine.virtualImages(spec, compiled), 'virtual images', quiet);
    const n = scanY * scanX;
    const all = new Float64Array(specs.length * n);
    r.images.forEach((img, k) => all.set(img, k * n));
    const attrs: Record<string, string | number> = { detectors: JSON.stringify(specs.map(describeDetector)), bad_pixels_left_out: bad.count, non_finite_inputs: r.nonFinite };
    specs.forEach((s, k) => { attrs[`detector_${k}`] = describeDetector(s); });
    const written = await writeFloat64Results(out, { images: { data: all, shape: [specs.length, scanY, scanX], attrs } }, {
      source_path: r.descriptor.path, source_dataset: r.descriptor.datasetPath ?? '', source_fingerprint: r.descriptor.fingerprint, producer: 'scanfold image',
    });
    noteNonFiniteResults(written);
    if (!quiet) process.stderr.write(`wrote ${written.path}: ${specs.length} image(s) ${scanY}×${scanX}${bad.count ? `, ${bad.count} bad detector pixel(s) left out` : ''}\n`);
  }, out);
}

export async function cmdCom(args: string[], engineOptions: (v: Record<string, unknown>) => EngineOptions, engineFlags: Record<string, { type: 'string' | 'boolean' }>): Promise<void> {
  const parsed = parseFlags(args, {
      ...SOURCE_OPTIONS, ...engineFlags, out: { type: 'string' }, 'mask-disk': { type: 'string' }, threshold: { type: 'string' },
      descan: { type: 'string' }, 'descan-region': { type: 'string' }, rotation: { type: 'string' }, flip: { type: 'string' }, 'bad-pixels': { type: 'string' },
      'mrad-per-pixel': { type: 'string' }, 'energy-kev': { type: 'string' }, 'scan-step-nm': { type: 'string' },
    });
  const v = parsed.values as Flags;
  rejectExtraPositionals(parsed.positionals, 'com');
  const spec = sourceSpecFromFlags(parsed.positionals[0], v as Record<string, unknown>);
  const out = outputFlag(v.out, 'com', [spec.path]);
  const quiet = v.quiet === true;
  const threshold = typeof v.threshold === 'string' ? decimalNumber('threshold', v.threshold) : 0;
  const descanName = typeof v.descan === 'string' ? v.descan : (typeof v['descan-region'] === 'string' ? 'reference' : 'none');
  if (!['none', 'mean', 'plane', 'reference'].includes(descanName)) throw new InputError(`--descan ${descanName}: expected none, mean, plane or reference`);
  if ((descanName === 'reference') !== (typeof v['descan-region'] === 'string')) {
    throw new InputError('--descan reference needs --descan-region X0,Y0,X1,Y1 (scan positions of a reference area such as vacuum), and that flag needs --descan reference');
  }
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
  const descanRect = typeof v['descan-region'] === 'string' ? rectangleFlag('descan-region', v['descan-region']) : null;
  await withEngine(engineOptions(v as Record<string, unknown>), async (engine) => {
    // Up to 11 maps of the scan: COM x/y, total, magnitude, direction, divergence, curl, phase and three calibrated ones.
    const { detY, detX, scanY, scanX } = (await describeProtected(engine, spec, out, { scan: 11, pattern: 0 })).shape;
    // Everything the user typed is checked before any pass over the data.
    let mode: DescanMode;
    if (descanRect) {
      mode = { kind: 'reference', mask: compileRegion({ kind: 'rectangle', ...descanRect }, scanY, scanX) };
    } else {
      mode = { kind: descanName as 'none' | 'mean' | 'plane' };
    }
    let maskSpec: DetectorSpec | null = null;
    if (typeof v['mask-disk'] === 'string') {
      const [cx, cy, r] = numbers('mask-disk', v['mask-disk'], 3);
      maskSpec = { shape: { kind: 'disk', cx, cy, r } };
      compileDetector(maskSpec, detY, detX);
    }
    const bad = await badPixelMask(engine, spec, typeof v['bad-pixels'] === 'string' ? v['bad-pixels'] : 'auto', quiet);
    // Bad pixels leave the COM through the mask; with no mask given the mask is the whole detector.
    const wantsMask = maskSpec !== null || bad.count > 0;
    const file = bad.summary?.descriptor.path ?? spec.path;
    if (maskSpec === null && bad.count >= detY * detX) {
      throw new InputError(`${file}: every detector pixel was flagged as hot, dead or non-finite on the mean/max pattern, so no centre of mass can be computed; expected patterns with counts (or try --bad-pixels none)`);
    }
    const mask = wantsMask
      ? aboutFile(file, () => compileDetector(maskSpec ?? { shape: { kind: 'rectangle', x0: 0, y0: 0, x1: detX - 1, y1: detY - 1 } }, detY, detX, { excludePixels: bad.mask }))
      : null;
    const sums = await runJob(engine.comSums(spec, { mask, threshold }), 'centre of mass', quiet);
    const n = scanY * scanX;
    const comX = new Float64Array(n), comY = new Float64Array(n);
    let zeroTotal = 0;
    for (let i = 0; i < n; i++) {
      const t = sums.total[i];
      if (t === 0) { comX[i] = NaN; comY[i] = NaN; zeroTotal++; continue; }
      comX[i] = sums.sumX[i] / t;
      comY[i] = sums.sumY[i] / t;
    }
    if (zeroTotal === n) {
      throw new InputError(`${sums.descriptor.path}: every pattern has zero total intensity${maskSpec || threshold ? ' inside the COM mask above the threshold' : ''}, so no centre of mass can be computed; expected patterns with counts`);
    }
    const d = aboutFile(sums.descriptor.path, () => descan(comX, comY, scanY, scanX, mode));
    let degrees: number, flip: boolean, estimate: ReturnType<typeof estimateRotation> | null = null;
    if (rotationGiven === null) {
      // A reference region given for the descan is vacuum, which also settles the 180° ambiguity.
      estimate = aboutFile(sums.descriptor.path, () => estimateRotation(d.comX, d.comY, scanY, scanX, mode.kind === 'reference' ? { vacuumMask: mode.mask } : {}));
      degrees = estimate.degrees; flip = estimate.flip;
      if (estimate.curlRelative > 0.5 && !quiet) {
        process.stderr.write(`note: the COM field has about as much curl at every angle (relative curl ${estimate.curlRelative.toFixed(2)}), ` +
          'so the rotation estimate is weak; set --rotation and --flip by hand if you know them\n');
      }
    } else { degrees = rotationGiven; flip = flipArg === 'yes'; }
    const rotated = rotateCom(d.comX, d.comY, degrees, flip);
    const div = divergence(rotated.comX, rotated.comY, scanY, scanX);
    const cu = curl(rotated.comX, rotated.comY, scanY, scanX);
    const phase = integrateCom(rotated.comX, rotated.comY, scanY, scanX);
    const md = magnitudeDirection(rotated.comX, rotated.comY);
    const shape = [scanY, scanX];
    const arrays: Record<string, ResultArray> = {
      com_x: { data: rotated.comX, shape, attrs: { units: 'detector pixels' } },
      com_y: { data: rotated.comY, shape, attrs: { units: 'detector pixels' } },
      total_intensity: { data: sums.total, shape },
      magnitude: { data: md.magnitude, shape, attrs: { units: 'detector pixels' } },
      direction: { data: md.directionRadians, shape, attrs: { units: 'radians, atan2(com_y, com_x)' } },
      divergence: { data: div, shape, attrs: { units: 'detector pixels per scan step' } },
      curl: { data: cu, shape, attrs: { units: 'detector pixels per scan step' } },
      phase: { data: phase.phase, shape, attrs: { units: 'detector pixels × scan steps (integrated COM)', method: 'Fourier integration, mirrored edges' } },
    };
    const rootAttrs: Record<string, string | number> = {
      rotation_degrees: degrees, flip: flip ? 'yes' : 'no', rotation_source: estimate ? 'estimated (least curl)' : 'given',
      descan: descanName, threshold, zero_total_patterns: zeroTotal, bad_pixels_left_out: bad.count, non_finite_inputs: sums.nonFinite,
      com_mask: maskSpec ? describeDetector(maskSpec) : 'whole pattern',
      source_path: sums.descriptor.path, source_dataset: sums.descriptor.datasetPath ?? '', source_fingerprint: sums.descriptor.fingerprint, producer: 'scanfold com',
    };
    if (estimate) {
      rootAttrs.rotation_alternative_degrees = estimate.alternativeDegrees;
      rootAttrs.rotation_curl_relative = estimate.curlRelative;
      rootAttrs.rotation_half_turn_rule = estimate.halfTurnRule;
    }
    if (cal[0] !== undefined) {
      const [mradPerPx, kev, stepNm] = cal as number[];
      // For a weak phase object the beam is deflected by θ = (λ / 2π)·∇φ (common practice), so
      // φ[rad] = (2π / λ) ∫ θ dx: with θ = COM·mrad/px·1e-3 and dx in scan steps of stepNm.
      const lambdaNm = electronWavelengthPm(kev) / 1000;
      const toRad = (2 * Math.PI / lambdaNm) * mradPerPx * 1e-3 * stepNm;
      arrays.com_x_mrad = { data: rotated.comX.map((x) => x * mradPerPx), shape, attrs: { units: 'mrad' } };
      arrays.com_y_mrad = { data: rotated.comY.map((x) => x * mradPerPx), shape, attrs: { units: 'mrad' } };
      arrays.phase_radians = { data: phase.phase.map((x) => x * toRad), shape, attrs: { units: 'radians (weak-phase approximation)', radians_per_phase_unit: toRad } };
      Object.assign(rootAttrs, { mrad_per_pixel: mradPerPx, energy_kev: kev, wavelength_pm: lambdaNm * 1000, scan_step_nm: stepNm });
    }
    const written = await writeFloat64Results(out, arrays, rootAttrs);
    noteNonFiniteResults(written, zeroTotal ? `; ${zeroTotal} pattern(s) with zero total have no centre of mass (NaN by design)` : '');
    if (!quiet) {
      process.stderr.write(`wrote ${written.path}: rotation ${degrees.toFixed(2)}°, flip ${flip ? 'yes' : 'no'}${estimate ? ` (estimated; relative curl ${estimate.curlRelative.toFixed(3)}; 180° away: ${estimate.alternativeDegrees.toFixed(2)}°)` : ''}` +
        `${zeroTotal ? `; ${zeroTotal} pattern(s) with zero total → NaN` : ''}\n`);
    }
  }, out);
}

export async function cmdCalibrate(args: string[], engineOptions: (v: Record<string, unknown>) => EngineOptions, engineFlags: Record<string, { type: 'string' | 'boolean' }>): Promise<void> {
  const parsed = parseFlags(args, {
      ...SOURCE_OPTIONS, ...engineFlags, 'energy-kev': { type: 'string' }, 'convergence-mrad': { type: 'string' },
      'lattice-spacing-angstrom': { type: 'string' }, 'bragg-distance-px': { type: 'string' }, 'scan-step-nm': { type: 'string' },
    });
  const v = parsed.values as Flags;
  const spec = sourceSpecFromFlags(parsed.positionals[0], v as Record<string, unknown>);
  const energy = positive('energy-kev', v['energy-kev'] as string | undefined);
  if (energy === undefined) throw new InputError('calibrate needs --energy-kev E (the beam energy)');
  const alpha = positive('convergence-mrad', v['convergence-mrad'] as string | undefined);
  const d = positive('lattice-spacing-angstrom', v['lattice-spacing-angstrom'] as string | undefined);
  const braggGiven = positive('bragg-distance-px', v['bragg-distance-px'] as string | undefined);
  const scanStep = positive('scan-step-nm', v['scan-step-nm'] as string | undefined);
  if ((alpha === undefined) === (d === undefined)) throw new InputError('calibrate needs exactly one of --convergence-mrad A or --lattice-spacing-angstrom D');
  if (braggGiven !== undefined && d === undefined) throw new InputError('--bragg-distance-px goes with --lattice-spacing-angstrom (the distance of that Bragg disk from the centre)');
  rejectExtraPositionals(parsed.positionals, 'calibrate');
  await withEngine(engineOptions(v as Record<string, unknown>), async (engine) => {
    const s = await runJob(engine.firstPass(spec), 'first pass', v.quiet === true);
    const { detY, detX, scanY, scanX } = s.descriptor.shape;
    const { bad, disk, braggPx } = aboutFile(s.descriptor.path, () => {
      const bad = findBadPixels(s.meanPattern, s.maxPattern, detY, detX, { patternCount: scanY * scanX });
      const mean = replaceBadPixels(s.meanPattern, detY, detX, bad.mask);
      const disk = findBrightFieldDisk(mean, detY, detX, { excludePixels: bad.mask });
      const braggPx = d === undefined ? undefined : braggGiven ?? strongestRing(mean, detY, detX, disk.cx, disk.cy, disk.r * 1.5, bad.mask).radius;
      return { bad, mean, disk, braggPx };
    });
    const cal = calibrate(alpha !== undefined
      ? { source: 'convergence-angle', energyKeV: energy, convergenceSemiAngleMrad: alpha, diskRadiusPx: disk.r, scanStepNm: scanStep }
      : { source: 'lattice-spacing', energyKeV: energy, latticeSpacingAngstrom: d!, braggDistancePx: braggPx!, scanStepNm: scanStep });
    process.stdout.write(JSON.stringify({
      wavelength_pm: cal.wavelengthPm,
      disk_center_px: { x: disk.cx, y: disk.cy },
      disk_radius_px: disk.r,
      disk_edge_consistency: disk.edgeConsistency,
      mrad_per_pixel: cal.mradPerPixel,
      inverse_angstrom_per_pixel: cal.inverseAngstromPerPixel,
      ...(braggPx !== undefined ? { bragg_distance_px: braggPx, bragg_distance_source: braggGiven !== undefined ? 'given' : 'strongest ring of the mean pattern' } : {}),
      ...(scanStep !== undefined ? { scan_step_nm: scanStep } : {}),
      calibration_source: alpha !== undefined ? 'convergence-angle' : 'lattice-spacing',
      bad_pixels: { hot: bad.hot.length, dead: bad.dead.length },
      note: 'exploratory: check against a reference specimen before quoting numbers',
    }, null, 2) + '\n');
  });
}

export const REGION_HELP = `  scanfold pattern FILE [source flags] (--region-rect X0,Y0,X1,Y1 | --region-polygon "X,Y X,Y X,Y" |
                 --region-mask MASK.npy) --out OUT.h5
      virtual diffraction: /mean_pattern and /max_pattern (det_y, det_x) float64 over a region of
      the scan (scan positions; x column, y row)`;

export async function cmdPattern(args: string[], engineOptions: (v: Record<string, unknown>) => EngineOptions, engineFlags: Record<string, { type: 'string' | 'boolean' }>): Promise<void> {
  const parsed = parseFlags(args, { ...SOURCE_OPTIONS, ...engineFlags, out: { type: 'string' }, 'region-rect': { type: 'string' }, 'region-polygon': { type: 'string' }, 'region-mask': { type: 'string' } });
  const v = parsed.values as Flags;
  rejectExtraPositionals(parsed.positionals, 'pattern');
  const spec = sourceSpecFromFlags(parsed.positionals[0], v as Record<string, unknown>);
  const given = ['region-rect', 'region-polygon', 'region-mask'].filter((k) => typeof v[k] === 'string');
  if (given.length !== 1) throw new InputError('pattern needs exactly one of --region-rect, --region-polygon or --region-mask');
  const rect = typeof v['region-rect'] === 'string' ? rectangleFlag('region-rect', v['region-rect']) : null;
  const out = outputFlag(v.out, 'pattern', [spec.path, ...flagFiles(v, 'region-mask')]);
  await withEngine(engineOptions(v as Record<string, unknown>), async (engine) => {
    const { detY, detX, scanY, scanX } = (await describeProtected(engine, spec, out, { scan: 0, pattern: 2 })).shape;
    let shape: RegionShape;
    if (rect) {
      shape = { kind: 'rectangle', ...rect };
    } else if (typeof v['region-polygon'] === 'string') {
      shape = { kind: 'polygon', points: v['region-polygon'].trim().split(/\s+/).map((p) => numbers('region-polygon', p, 2) as [number, number]) };
    } else {
      const m = readNpy2D(v['region-mask'] as string, 'region mask');
      shape = { kind: 'mask', width: m.width, height: m.height, values: m.values };
    }
    const region = compileRegion(shape, scanY, scanX);
    const r = await runJob(engine.regionPattern(spec, region), 'region pattern', v.quiet === true);
    const written = await writeFloat64Results(out, {
      mean_pattern: { data: r.mean, shape: [detY, detX] },
      max_pattern: { data: r.max, shape: [detY, detX] },
    }, {
      region: describeRegion(shape), positions: r.count, non_finite_inputs: r.nonFinite,
      source_path: r.descriptor.path, source_dataset: r.descriptor.datasetPath ?? '', source_fingerprint: r.descriptor.fingerprint, producer: 'scanfold pattern',
    });
    noteNonFiniteResults(written);
    if (v.quiet !== true) process.stderr.write(`wrote ${written.path}: mean and max pattern over ${r.count} probe position(s)\n`);
  }, out);
}
