// `scanfold pca`: flags → one request to the engine service → files. The features, the
// randomized SVD and its passes are the service's; this file only parses, asks and writes.
import { InputError } from '../../src-shared/model/errors';
import type { FitRequest, KmeansRequest, PcaRequest } from '../../src-shared/contract/service';
import type { RegionShape } from '../../src-shared/model/detectors';
import { readClusterLabels } from '../io/npy-array';
import { resultArrays } from '../io/result-arrays';
import type { EngineOptions } from '../engine/engine';
import { analysisOutput, badPixelAttrs, noteNonFiniteResults, openProtected, provenance, SESSION_FLAGS, sessionTarget, withService, wrote, writeResults } from './analysis-commands';
import { parseFlags, rectangleFlag, rejectExtraPositionals, SOURCE_OPTIONS, sourceSpecFromFlags, wholeNumber } from './source-flags';

type Flags = Record<string, string | boolean | (string | boolean)[] | undefined>;
type EngineFlags = Record<string, { type: 'string' | 'boolean' }>;

/**
 * What cutting the detector to whole bins left out, for the line a command prints (the crop is
 * also an attribute): e.g. "; the detector cut to 8×12 px, whole bins: 47 edge pixels left out".
 */
function trimmed(f: { crop: { x0: number; y0: number; x1: number; y1: number } }, shape: { detY: number; detX: number }, asked: unknown): string {
  if (asked) return '';
  const kept = (f.crop.x1 - f.crop.x0 + 1) * (f.crop.y1 - f.crop.y0 + 1);
  const all = shape.detY * shape.detX;
  return kept < all ? `; the detector cut to ${f.crop.y1 - f.crop.y0 + 1}×${f.crop.x1 - f.crop.x0 + 1} px, whole bins: ${all - kept} edge pixels left out` : '';
}

/** --bin, --crop, --scaling, --normalize, --bad-pixels: how patterns become feature vectors. */
export const FEATURE_FLAGS = {
  bin: { type: 'string' }, crop: { type: 'string' }, scaling: { type: 'string' }, normalize: { type: 'boolean' }, 'bad-pixels': { type: 'string' },
} as const;

function featureOptions(v: Flags): Pick<PcaRequest, 'bin' | 'crop' | 'scaling' | 'normalize' | 'badPixels'> {
  const out: Pick<PcaRequest, 'bin' | 'crop' | 'scaling' | 'normalize' | 'badPixels'> = {};
  if (typeof v.bin === 'string') {
    if (v.bin === 'auto') out.bin = 'auto';
    else {
      const b = Number(v.bin);
      if (![1, 2, 4, 8].includes(b) || !/^\d+$/.test(v.bin)) throw new InputError(`--bin ${v.bin}: expected 1, 2, 4, 8 or auto`);
      out.bin = b as 1 | 2 | 4 | 8;
    }
  }
  if (typeof v.crop === 'string') out.crop = rectangleFlag('crop', v.crop);
  if (typeof v.scaling === 'string') {
    if (v.scaling !== 'none' && v.scaling !== 'sqrt' && v.scaling !== 'poisson') throw new InputError(`--scaling ${v.scaling}: expected none, sqrt or poisson`);
    out.scaling = v.scaling;
  }
  if (v.normalize === true) out.normalize = true;
  if (typeof v['bad-pixels'] === 'string') {
    if (v['bad-pixels'] !== 'auto' && v['bad-pixels'] !== 'none') throw new InputError(`--bad-pixels ${v['bad-pixels']}: expected auto or none`);
    out.badPixels = v['bad-pixels'];
  }
  return out;
}

export async function cmdPca(args: string[], engineOptions: (v: Record<string, unknown>) => EngineOptions, engineFlags: EngineFlags): Promise<void> {
  const parsed = parseFlags(args, {
    ...SESSION_FLAGS,
    ...SOURCE_OPTIONS, ...engineFlags, ...FEATURE_FLAGS, out: { type: 'string' }, components: { type: 'string' },
    oversample: { type: 'string' }, 'power-iterations': { type: 'string' }, seed: { type: 'string' }, preview: { type: 'boolean' }, passes: { type: 'string' }, uncentred: { type: 'boolean' },
  });
  const v = parsed.values as Flags;
  rejectExtraPositionals(parsed.positionals, 'pca');
  const spec = sourceSpecFromFlags(parsed.positionals[0], v as Record<string, unknown>);
  if (typeof v.components !== 'string') throw new InputError('pca needs --components K (how many components to find)');
  const components = wholeNumber('components', v.components, 1, 'a whole number ≥ 1');
  const features = featureOptions(v);
  const optional = (flag: string, min: number) => (typeof v[flag] === 'string' ? wholeNumber(flag, v[flag] as string, min) : undefined);
  const out = analysisOutput(v, 'pca', [spec.path]);
  const session = sessionTarget(v, 'pca');
  await withService(engineOptions(v as Record<string, unknown>), v.quiet === true, async (service, keep) => {
    const opened = await openProtected(service, spec, out, { scan: components, pattern: components + 1 });
    const { scanY, scanX } = opened.descriptor.shape;
    const request: PcaRequest = {
      dataset: opened.id, components, ...features,
      ...(optional('oversample', 0) !== undefined ? { oversample: optional('oversample', 0) } : {}),
      ...(optional('power-iterations', 0) !== undefined ? { powerIterations: optional('power-iterations', 0) } : {}),
      ...(optional('seed', 0) !== undefined ? { seed: optional('seed', 0) } : {}),
      ...(v.preview === true ? { preview: true } : {}),
      ...(v.uncentred === true ? { centre: false } : {}),
    };
    if (typeof v.passes === 'string') {
      if (v.passes !== '1') throw new InputError(`--passes ${v.passes}: expected 1 (the one-pass sketch); otherwise the passes are --power-iterations + 1`);
      if (typeof v['power-iterations'] === 'string') throw new InputError('--passes 1 and --power-iterations exclude each other (the one-pass sketch makes no power iteration)');
      request.passes = 1;
    }
    const r = await service.pca({ ...request, ...keep });
    const f = r.features;
    // A preview's loadings are per scan bin of the preview cube.
    const [ly, lx] = r.preview ? [r.preview.qY, r.preview.qX] : [scanY, scanX];
    const written = await writeResults(service, out, resultArrays('pca', r), {
      components_found: r.k, total_variance: r.totalVariance, bin: f.bin, crop_x0_y0_x1_y1: JSON.stringify([f.crop.x0, f.crop.y0, f.crop.x1, f.crop.y1]),
      features: f.nFeatures, bins_left_out: f.binsLeftOut, scaling: f.scaling, normalize: f.normalize ? 'yes' : 'no', bad_pixels: f.badPixels,
      oversample: r.method.oversample, sketch_columns: r.method.sketch, power_iterations: r.method.powerIterations, seed: r.method.seed,
      sketch_kind: r.method.passes === 1 && request.passes === 1 ? 'one pass: range and co-range sketches (Tropp, Yurtsever, Udell & Cevher 2017)'
        : r.method.powerIterations === 0 ? 'range sketch, no power iteration' : `range sketch with ${r.method.powerIterations} power iteration${r.method.powerIterations === 1 ? '' : 's'}`,
      passes_over_data: r.method.passes, total_variance_from: r.method.totalVarianceFrom, zero_total_patterns: r.zeroPatterns,
      method: `randomized SVD of the ${request.centre === false ? 'uncentred' : 'mean-centred'} features (Halko, Martinsson & Tropp 2011)`,
      centred: request.centre === false ? 'no' : 'yes',
      ...(r.preview ? { preview: 'yes: PCA of the preview cube, not of the full data', preview_scan_bin: r.preview.scanBin, preview_detector_bin: r.preview.detBin } : {}),
      ...provenance(r.descriptor, 'scanfold pca', request), ...badPixelAttrs(r.badPixels),
    });
    // Bins left out are NaN by design in /components and /mean_pattern; anything else is news.
    const expectedNaN = { components: f.binsLeftOut * r.k, mean_pattern: f.binsLeftOut };
    const unexpected = Object.entries(written?.nonFiniteResults ?? {}).some(([name, count]) => count !== (expectedNaN as Record<string, number>)[name]);
    if (unexpected) noteNonFiniteResults(written, ' (bins left out are NaN in /components and /mean_pattern)');
    if (v.quiet !== true) {
      const top = Array.from(r.explainedVarianceRatio.slice(0, 5), (x) => `${(100 * x).toFixed(1)} %`).join(', ');
      const what = r.preview ? `a preview (preview cube binned ${r.preview.scanBin}× over the scan, ${r.preview.detBin}× on the detector), no pass over the data`
        : r.method.passes === 1 ? '1 pass' : `${r.method.passes} passes`;
      const bins = r.preview ? `bin ${f.bin} of the preview cube's ${r.preview.detBin}×${r.preview.detBin}-pixel bins` : `bin ${f.bin}`;
      process.stderr.write(`${wrote(written)}: ${r.k} components of ${f.outY}×${f.outX} bins (${bins}${trimmed(f, r.descriptor.shape, request.crop ?? r.preview)}), ${what}; explained variance ${top}${r.k > 5 ? ', …' : ''}\n`);
    }
  }, out, session);
}

export async function cmdKmeans(args: string[], engineOptions: (v: Record<string, unknown>) => EngineOptions, engineFlags: EngineFlags): Promise<void> {
  const parsed = parseFlags(args, {
    ...SESSION_FLAGS,
    ...SOURCE_OPTIONS, ...engineFlags, ...FEATURE_FLAGS, out: { type: 'string' }, clusters: { type: 'string' }, features: { type: 'string' },
    restarts: { type: 'string' }, seed: { type: 'string' }, 'power-iterations': { type: 'string' }, preview: { type: 'boolean' }, algorithm: { type: 'string' },
    'max-iterations': { type: 'string' },
  });
  const v = parsed.values as Flags;
  rejectExtraPositionals(parsed.positionals, 'kmeans');
  const spec = sourceSpecFromFlags(parsed.positionals[0], v as Record<string, unknown>);
  if (typeof v.clusters !== 'string') throw new InputError('kmeans needs --clusters K (how many clusters to find)');
  const clusters = wholeNumber('clusters', v.clusters, 1, 'a whole number ≥ 1');
  let pcaComponents: number | undefined;
  let kind: 'pca' | 'patterns' | undefined;
  if (typeof v.features === 'string') {
    const m = /^pca:(\d+)$/.exec(v.features);
    if (v.features === 'patterns') kind = 'patterns';
    else if (!m) throw new InputError(`--features ${v.features}: expected pca:N (the first N principal components of every pattern, e.g. pca:10) or patterns`);
    else if (Number(m[1]) < 1) throw new InputError(`--features ${v.features}: expected pca:N with N ≥ 1`);
    else { kind = 'pca'; pcaComponents = wholeNumber('features', m[1], 1, 'pca:N with N ≥ 1'); }
  }
  const features = featureOptions(v);
  const optional = (flag: string, min: number) => (typeof v[flag] === 'string' ? wholeNumber(flag, v[flag] as string, min) : undefined);
  const out = analysisOutput(v, 'kmeans', [spec.path]);
  const session = sessionTarget(v, 'kmeans');
  await withService(engineOptions(v as Record<string, unknown>), v.quiet === true, async (service, keep) => {
    const opened = await openProtected(service, spec, out, { scan: 1, pattern: clusters });
    const { scanY, scanX, detY, detX } = opened.descriptor.shape;
    const request: KmeansRequest = {
      dataset: opened.id, clusters, ...features, ...(pcaComponents !== undefined ? { pcaComponents } : {}), ...(kind ? { features: kind } : {}),
      ...(optional('restarts', 1) !== undefined ? { restarts: optional('restarts', 1) } : {}),
      ...(optional('seed', 0) !== undefined ? { seed: optional('seed', 0) } : {}),
      ...(optional('power-iterations', 0) !== undefined ? { powerIterations: optional('power-iterations', 0) } : {}),
      ...(optional('max-iterations', 1) !== undefined ? { maxIterations: optional('max-iterations', 1) } : {}),
      ...(v.preview === true ? { preview: true } : {}),
    };
    if (typeof v.algorithm === 'string') {
      if (v.algorithm !== 'lloyd' && v.algorithm !== 'mini-batch') throw new InputError(`--algorithm ${v.algorithm}: expected lloyd or mini-batch`);
      request.algorithm = v.algorithm;
    }
    const r = await service.kmeans({ ...request, ...keep });
    const f = r.features;
    const pv = r.preview;
    const [ly, lx, py, px] = pv ? [pv.qY, pv.qX, pv.pY, pv.pX] : [scanY, scanX, detY, detX];
    const written = await writeResults(service, out, resultArrays('kmeans', r), {
      clusters: r.k, inertia: r.inertia, iterations: r.iterations, algorithm: r.method.algorithm, restarts: r.method.restarts, restart_kept: r.method.restartKept, seed: r.method.seed,
      features_kind: f.kind, ...(f.kind === 'pca' ? { pca_components: f.components, pca_explained_variance: f.explainedVariance!, pca_passes_over_data: r.method.pcaPasses } : { features: f.components }),
      passes_over_data: pv ? 0 : r.method.passes,
      bin: f.bin, crop_x0_y0_x1_y1: JSON.stringify([f.crop.x0, f.crop.y0, f.crop.x1, f.crop.y1]), scaling: f.scaling, normalize: f.normalize ? 'yes' : 'no', bad_pixels: f.badPixels,
      method: r.method.algorithm === 'lloyd' ? 'greedy k-means++ seeding (Arthur & Vassilvitskii 2007; the best of 2 + ln k draws per centre), Lloyd iterations, lowest inertia of the restarts'
        : 'mini-batch k-means (Sculley 2010) from k-means++ centres on a sample',
      ...(pv ? { preview: 'yes: clusters of the preview cube, not of the full data', preview_scan_bin: pv.scanBin, preview_detector_bin: pv.detBin } : {}),
      ...provenance(r.descriptor, 'scanfold kmeans', request), ...badPixelAttrs(r.badPixels),
    });
    noteNonFiniteResults(written, ' (an empty cluster has a NaN mean pattern)');
    if (v.quiet !== true) {
      const where = pv ? ` (a preview: scan bins of ${pv.scanBin}×${pv.scanBin} positions from the preview cube, no pass over the data)` : ' positions';
      process.stderr.write(`${wrote(written)}: ${r.k} clusters of ${Array.from(r.sizes).join(', ')}${where}; inertia ${r.inertia.toPrecision(6)} on ${f.kind === 'pca' ? `${f.components} principal components` : `the patterns (${f.components} features, ${r.iterations} iterations)`}${trimmed(f, r.descriptor.shape, request.crop ?? pv)}\n`);
    }
  }, out, session);
}

export async function cmdFit(args: string[], engineOptions: (v: Record<string, unknown>) => EngineOptions, engineFlags: EngineFlags): Promise<void> {
  const parsed = parseFlags(args, {
    ...SESSION_FLAGS,
    ...SOURCE_OPTIONS, ...engineFlags, ...FEATURE_FLAGS, out: { type: 'string' }, 'reference-region': { type: 'string', multiple: true }, nonnegative: { type: 'boolean' },
    'reference-clusters': { type: 'string' },
  });
  const v = parsed.values as Flags;
  rejectExtraPositionals(parsed.positionals, 'fit');
  const spec = sourceSpecFromFlags(parsed.positionals[0], v as Record<string, unknown>);
  const given = v['reference-region'];
  const list = Array.isArray(given) ? given : typeof given === 'string' ? [given] : [];
  const clusterFile = typeof v['reference-clusters'] === 'string' ? v['reference-clusters'] : null;
  if (list.length === 0 && !clusterFile) {
    throw new InputError('fit needs at least one --reference-region X0,Y0,X1,Y1 (scan positions whose mean pattern is a reference; repeat it for more) or --reference-clusters KMEANS.h5');
  }
  const references: RegionShape[] = list.map((s) => ({ kind: 'rectangle' as const, ...rectangleFlag('reference-region', String(s)) }));
  if (clusterFile) {
    // Every cluster of a kmeans output is a reference: its positions' mean pattern.
    const c = await readClusterLabels(clusterFile);
    for (let k = 0; k < c.clusters; k++) references.push({ kind: 'mask', width: c.width, height: c.height, values: Uint8Array.from(c.labels, (x) => (x === k ? 1 : 0)) });
  }
  const features = featureOptions(v);
  const out = analysisOutput(v, 'fit', [spec.path, ...(clusterFile ? [clusterFile] : [])]);
  const session = sessionTarget(v, 'fit');
  await withService(engineOptions(v as Record<string, unknown>), v.quiet === true, async (service, keep) => {
    const opened = await openProtected(service, spec, out, { scan: references.length + 1, pattern: references.length });
    const { scanY, scanX } = opened.descriptor.shape;
    const request: FitRequest = { dataset: opened.id, references, ...features, ...(v.nonnegative === true ? { nonnegative: true } : {}) };
    const r = await service.fit({ ...request, ...keep });
    const f = r.features;
    const written = await writeResults(service, out, resultArrays('fit', r), {
      references: r.r, reference_regions: JSON.stringify(r.regions), reference_positions: JSON.stringify(r.counts), nonnegative: r.nonnegative ? 'yes' : 'no',
      bin: f.bin, crop_x0_y0_x1_y1: JSON.stringify([f.crop.x0, f.crop.y0, f.crop.x1, f.crop.y1]), features: f.nFeatures, bins_left_out: f.binsLeftOut,
      scaling: f.scaling, normalize: f.normalize ? 'yes' : 'no', bad_pixels: f.badPixels, zero_total_patterns: r.zeroPatterns, passes_over_data: 2,
      method: r.nonnegative ? 'non-negative least squares on the normal equations (Lawson & Hanson active set)' : 'linear least squares on the normal equations (Cholesky)',
      ...provenance(r.descriptor, 'scanfold fit', request), ...badPixelAttrs(r.badPixels),
    });
    // NaN by design: bins left out (references) and all-zero patterns, which have nothing to explain (residual).
    let mean = 0, explained = 0;
    for (const x of r.residual) if (Number.isFinite(x)) { mean += x; explained++; }
    const expectedNaN = { references: f.binsLeftOut * r.r, residual: r.residual.length - explained };
    if (Object.entries(written?.nonFiniteResults ?? {}).some(([name, count]) => count !== (expectedNaN as Record<string, number>)[name])) noteNonFiniteResults(written);
    if (v.quiet !== true) {
      const zero = r.residual.length - explained;
      process.stderr.write(`${wrote(written)}: ${r.r} reference(s) fitted to every pattern; mean relative residual ${explained ? (mean / explained).toFixed(4) : 'none'}` +
        `${zero ? ` (${zero} all-zero pattern(s) left out: residual NaN, nothing to explain)` : ''}${trimmed(f, r.descriptor.shape, request.crop)}\n`);
    }
  }, out, session);
}
