// The engine behind the service contract (src-shared/contract/service.ts): datasets opened
// once and named by id, every request validated where it comes in, long requests run as jobs
// with events, and the pipelines (bad pixels → bright-field disk, the COM field, calibration)
// done here so that no front end repeats them.
import { userSpec, type SourceSpec } from '../../src-shared/model/dataset';
import type { CompiledDetector, DetectorSpec } from '../../src-shared/model/detectors';
import { CancelledError, InputError, isInputError } from '../../src-shared/model/errors';
import type { JobInfo } from '../../src-shared/contract/jobs';
import type {
  BadPixels, BadPixelsMode, BrightFieldDisk, CalibrationRequest, CalibrationResult, ComFieldRequest, ComFieldResult,
  DatasetId, FeatureOptions, FirstPassRequest, FirstPassResult, FitRequest, FitResult, Inspection, KmeansRequest, KmeansResult, OpenedDataset, PatternAtRequest, PatternAtResult, PcaRequest, PcaResult,
  PreviewImagesRequest, PreviewImagesResult, RegionPatternRequest, RegionPatternResult, ScanfoldService, ServiceEvent,
  VirtualImagesRequest, VirtualImagesResult,
} from '../../src-shared/contract/service';
import { validateRequest } from '../../src-shared/contract/validate';
import { accumulateRegionPatterns, meanOfFinite } from '../../src-shared/compute/region-pattern';
import { compileDetector, describeDetector } from '../../src-shared/compute/detector-masks';
import { compileRegion, describeRegion } from '../../src-shared/compute/region-masks';
import { findBadPixels, replaceBadPixels } from '../../src-shared/compute/bad-pixels';
import { findBrightFieldDisk } from '../../src-shared/compute/bright-field-disk';
import { calibrate } from '../../src-shared/compute/calibration';
import { braggRingCandidates } from '../../src-shared/compute/radial-profile';
import { Engine, type EngineOptions } from './engine';
import { fmtBytes } from '../../src-shared/model/bytes';
import type { FirstPassSummary } from './first-pass';
import type { FirstPassComPlan } from '../workers/tile-worker';
import type { Job } from './job';
import { previewDetectorImages } from './preview';
import { previewImages } from '../../src-shared/compute/preview-image';
import { comDefaults, comFieldFromSums, comSumsLessBadPixels, mayHaveCounts } from './com-field';
import { cacheKey, defaultCacheDir, readCachedFirstPass, writeCachedFirstPass, type CachedFirstPass } from './first-pass-cache';
import { findVacuum, type VacuumFinding } from '../../src-shared/compute/vacuum';
import { trace } from './trace';
import { featuresToImage, planFeatures, type FeaturePlan } from '../../src-shared/compute/pattern-features';
import { previewPca } from './statistics';
import { kmeans, kmeansMiniBatch } from '../../src-shared/compute/kmeans';
import type { SessionMethod } from '../../src-shared/model/session';
import type { AutosaveRequest, ExportedFile, ExportRequest, KeptEntry, OpenSessionRequest, OpenedSession, Recoverable, SaveSessionRequest, SessionDatasetStatus, SessionSaved } from '../../src-shared/contract/service';
import fs from 'node:fs';
import nodePath from 'node:path';
import { defaultStateDir, RecoveryIndex } from '../session/recovery';
import { attributeValue, CONVERGENCE_ATTRIBUTES, ENERGY_ATTRIBUTES, SCAN_STEP_ATTRIBUTES, unusableAttribute } from './attributes';
import { OutputFile } from '../io/output-file';
import { SessionKeeper, datasetRecordOf, type DatasetRecordOf } from '../session/keeper';
import { isSessionFile, readSessionDocument, readSessionFile, writeSessionFile } from '../session/session-file';
import { locateDataset, relinkMatches, sessionSpecAt } from '../session/relink';

interface FirstResults extends CachedFirstPass {
  /** The pass itself, with its preview cube; null when the results came from the cache. */
  summary: FirstPassSummary | null;
  seconds: number;
  /** The pass was made for a command and took no default images along; a viewer's request adds them. */
  defaultImagesLeftOut?: boolean;
  /** Their pass, while it runs (a second viewer's request waits for it). */
  addingImages?: Promise<void>;
  /**
   * Images of the detectors a command asked for, taken along by the pass it started (each over
   * the detector less the pixels that looked bad on the sample), for that command alone.
   */
  along?: { specs: DetectorSpec[]; images: Float64Array[] };
}

interface DatasetRecord {
  id: DatasetId;
  opened: OpenedDataset;
  /** The last first pass's results (from a pass, with its preview cube, or from the cache, without). */
  first: FirstResults | null;
  /** The first pass running now, if one is. */
  firstPending?: Promise<FirstResults> | null;
}

type ServiceJobInfo = JobInfo & { jobId: string };

/** What was done to make the features, defaults included, as results report it. */
function featureSummary(plan: FeaturePlan, badPixels: BadPixelsMode): PcaResult['features'] {
  return {
    bin: plan.bin, crop: plan.crop, outY: plan.outY, outX: plan.outX, nFeatures: plan.nFeatures,
    binsLeftOut: plan.binsLeftOut, scaling: plan.scaling, normalize: plan.normalize, badPixels,
  };
}

/** An opened dataset as clients see it: the engine's internal read hint and file version left out of its spec. */
function publicOpened(o: OpenedDataset): OpenedDataset {
  return { ...o, descriptor: { ...o.descriptor, spec: userSpec(o.descriptor.spec) } };
}

/** The least detector binning (1, 2, 4, 8) that brings the (cropped) detector to at most 64 × 64 bins. */
function autoFeatureBin(detY: number, detX: number, crop?: { x0: number; y0: number; x1: number; y1: number }): 1 | 2 | 4 | 8 {
  const h = crop ? crop.y1 - crop.y0 + 1 : detY, w = crop ? crop.x1 - crop.x0 + 1 : detX;
  for (const b of [1, 2, 4] as const) if (Math.floor(h / b) * Math.floor(w / b) <= 64 * 64) return b;
  return 8;
}

/** Positions above which k-means defaults to mini-batches (full Lloyd iterations over 2²⁰ points × restarts take minutes). */
const MINI_BATCH_ABOVE = 2 ** 20;

/** Patterns sampled (a side × side grid over the scan) to guess the bad pixels before the first pass. */
const COM_SAMPLE_SIDE = 4;
/** Pixels whose values the first pass keeps per position for its centre-of-mass sums, at most. */
const COM_MAX_WATCHED = 64;


/** The spec that reopens exactly the dataset (the descriptor's resolved one). */
const specOf = (r: DatasetRecord): SourceSpec => r.opened.descriptor.spec;

/**
 * Memory of the COM field per scan position: about 14 float64 maps (sums, COM, descan, rotated,
 * derived, calibrated) and the integration's complex spectra on the 2× mirrored scan.
 */
const COM_BYTES_PER_POSITION = 14 * 8 + 3 * 4 * 16;

/**
 * The images a viewer opens with: bright field (the disk) and annular dark field (twice its
 * radius out to the largest circle inside the detector), when the detector reaches that far.
 */
function defaultImageSpecs(disk: { cx: number; cy: number; r: number }, detY: number, detX: number): DetectorSpec[] {
  const edge = Math.min(disk.cx, disk.cy, detX - 1 - disk.cx, detY - 1 - disk.cy);
  const specs: DetectorSpec[] = [{ shape: { kind: 'disk', cx: disk.cx, cy: disk.cy, r: disk.r }, label: 'bright field' }];
  if (edge > 2 * disk.r + 1) specs.push({ shape: { kind: 'annulus', cx: disk.cx, cy: disk.cy, rInner: 2 * disk.r, rOuter: edge }, label: 'annular dark field' });
  return specs;
}

/** Whether sorted `indices` hold `i`. */
function isInside(indices: Uint32Array, i: number): boolean {
  let lo = 0, hi = indices.length - 1;
  while (lo <= hi) {
    const mid = (lo + hi) >> 1;
    if (indices[mid] === i) return true;
    if (indices[mid] < i) lo = mid + 1; else hi = mid - 1;
  }
  return false;
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

export class EngineService implements ScanfoldService {
  readonly engine: Engine;
  private readonly records = new Map<DatasetId, DatasetRecord>();
  private readonly listeners = new Set<(e: ServiceEvent) => void>();
  /** Running jobs by the client's id, with their info as events show it. */
  private readonly running = new Map<string, { job: Job<unknown>; info: () => ServiceJobInfo }>();
  /** Requests in progress under a client job id, and whether the client cancelled them. */
  private readonly requests = new Map<string, { cancelled: boolean }>();
  private readonly finished: ServiceJobInfo[] = [];
  private nextDataset = 1;
  private nextJob = 1;
  /** Results kept under a key, to be saved in a session file. */
  private readonly session = new SessionKeeper();
  /** Recovery files written by autosave. */
  private readonly recovery: RecoveryIndex;

  /** Where first-pass results are kept between commands; null: no cache. */
  private readonly cacheDir: string | null;

  constructor(options: EngineOptions & { cacheDir?: string | null; stateDir?: string } = {}) {
    this.engine = new Engine(options);
    this.recovery = new RecoveryIndex(options.stateDir ?? defaultStateDir());
    this.cacheDir = options.cacheDir === undefined ? defaultCacheDir() : options.cacheDir;
  }

  /** What the engine changed from what was asked (workers capped…), one line each. */
  get notes(): string[] {
    return this.engine.notes;
  }

  onEvent(listener: (e: ServiceEvent) => void): () => void {
    this.listeners.add(listener);
    return () => this.listeners.delete(listener);
  }

  private emit(e: ServiceEvent): void {
    for (const l of this.listeners) l(e);
  }

  async inspect(spec: SourceSpec): Promise<Inspection> {
    validateRequest('inspect', spec);
    return this.engine.inspect(spec);
  }

  async open(spec: SourceSpec): Promise<OpenedDataset> {
    validateRequest('open', spec);
    const descriptor = await this.engine.describe(spec);
    const id = `dataset-${this.nextDataset++}`;
    const opened: OpenedDataset = { id, descriptor, version: 1 };
    this.records.set(id, { id, opened, first: null });
    this.emit({ kind: 'dataset', dataset: id, version: 1, change: 'opened' });
    return publicOpened(opened);
  }

  async close(dataset: DatasetId): Promise<void> {
    validateRequest('close', dataset);
    const r = this.record(dataset);
    if (r.first?.summary) this.engine.release(r.first.summary);
    this.records.delete(dataset);
    await this.engine.pool.each((w) => w.closeSource(r.opened.descriptor.spec)).catch(() => undefined);
    this.emit({ kind: 'dataset', dataset, version: r.opened.version + 1, change: 'closed' });
  }

  async datasets(): Promise<OpenedDataset[]> {
    return [...this.records.values()].map((r) => publicOpened(r.opened));
  }

  private record(dataset: DatasetId): DatasetRecord {
    const r = this.records.get(dataset);
    if (!r) throw new InputError(`dataset ${JSON.stringify(dataset)} is not open; expected an id returned by open`, 'bad-request');
    return r;
  }

  /** Follow an engine job: events, the Activity list, cancel by the client's id. */
  /**
   * Run one request under the client's job id (if any), so a cancel that arrives before its job
   * starts, between its jobs, or when it needs no job at all still cancels it.
   */
  private async request<T>(jobId: string | undefined, fn: () => Promise<T>): Promise<T> {
    if (jobId === undefined) return fn();
    if (this.requests.has(jobId)) throw new InputError(`job id ${JSON.stringify(jobId)} is already running; expected a new id`, 'bad-request');
    const state = { cancelled: false };
    this.requests.set(jobId, state);
    try {
      const out = await fn();
      if (state.cancelled) throw new CancelledError();
      return out;
    } finally {
      this.requests.delete(jobId);
    }
  }

  /** A request whose result may be kept in the session (JobOptions.keepAs). */
  private async requestKept<T>(method: SessionMethod, req: { jobId?: string; keepAs?: string; dataset: DatasetId }, fn: () => Promise<T>): Promise<T> {
    const generation = this.session.generation;
    const out = await this.request(req.jobId, fn);
    if (req.keepAs) this.session.keep(method, req as never, out, datasetRecordOf(this.record(req.dataset).opened.descriptor), generation);
    return out;
  }

  /** Session writes one at a time, in the order asked (a save and an autosave never interleave). */
  private sessionWrites: Promise<unknown> = Promise.resolve();
  private oneWriteAtATime<T>(fn: () => Promise<T>): Promise<T> {
    const next = this.sessionWrites.then(fn, fn);
    this.sessionWrites = next.catch(() => undefined);
    return next;
  }

  private openIdOf = (fingerprint: string): DatasetId | null => {
    for (const r of this.records.values()) if (r.opened.descriptor.fingerprint === fingerprint) return r.id;
    return null;
  };

  async saveSession(req: SaveSessionRequest): Promise<SessionSaved> {
    validateRequest('saveSession', req);
    return this.oneWriteAtATime(async () => {
      const saved = await this.writeSession(req.path, req.app, req.keys, false);
      // Saved whole: this instance's recovery file of it is out of date.
      this.recovery.remove(this.recovery.pathFor(saved.path));
      return saved;
    });
  }

  async autosave(req: AutosaveRequest): Promise<{ recovery: string }> {
    validateRequest('autosave', req);
    const session = req.session === null ? null : nodePath.resolve(req.session);
    return this.oneWriteAtATime(async () => {
      const path = this.recovery.pathFor(session);
      fs.mkdirSync(nodePath.dirname(path), { recursive: true, mode: 0o700 });
      const saved = await this.writeSession(path, req.app, req.keys, true);
      this.recovery.add({ recovery: saved.path, session });
      return { recovery: saved.path };
    });
  }

  async recoverable(): Promise<Recoverable[]> {
    validateRequest('recoverable', undefined);
    const out: Recoverable[] = [];
    for (const e of this.recovery.entries()) {
      // This instance's own recovery files are the work going on now, not a crash's.
      if (this.recovery.isOwn(e.recovery)) continue;
      let rec: fs.Stats;
      try { rec = fs.statSync(e.recovery); } catch { continue; }
      // A session saved after its recovery was written needs no recovery.
      try { if (e.session && fs.statSync(e.session).mtimeMs >= rec.mtimeMs) continue; } catch { /* session never saved or gone: recover */ }
      try {
        const { doc } = await readSessionDocument(e.recovery);
        out.push({ recovery: e.recovery, session: e.session, modified: doc.modified, results: doc.entries.length });
      } catch { /* damaged: not offered */ }
    }
    return out;
  }

  async discardRecovery(recovery: string): Promise<boolean> {
    validateRequest('discardRecovery', recovery);
    return this.recovery.remove(recovery);
  }

  private async writeSession(target: string, app: SaveSessionRequest['app'], keys: string[] | undefined, recovery: boolean): Promise<SessionSaved> {
    const open = [...this.records.values()].map((r) => ({ id: r.id, data: datasetRecordOf(r.opened.descriptor) }));
    const protect = [...this.records.values()].flatMap((r) => r.opened.descriptor.sourceFiles).concat(this.session.dataPaths());
    const out = OutputFile.create(target, { flag: recovery ? 'recovery file' : 'session file', protect });
    try {
      // A session replaces only a session: never a data file or anything else under that name.
      if (!recovery && fs.existsSync(out.path) && !(await isSessionFile(out.path))) {
        throw new InputError(`${target}: exists and is not a Scanfold session file; a session is written only to a new name or over a session. Choose another name`, 'bad-output');
      }
      out.protectIdentities(await this.filesRead());
      const { doc, results } = this.session.document(out.path, open, app, keys);
      const path = await writeSessionFile(out, doc, results);
      if (!recovery) this.session.saved(path, doc);
      return { path, results: doc.entries.length, datasets: doc.datasets.length };
    } finally {
      out.discard();
    }
  }

  async openSession(req: OpenSessionRequest): Promise<OpenedSession> {
    validateRequest('openSession', req);
    const { path, doc, results } = await readSessionFile(req.path);
    const relink = Object.entries(req.relink ?? {});
    for (const [old] of relink) {
      if (!doc.datasets.some((d) => relinkMatches(d, old))) {
        throw new InputError(`--relink ${old}=…: the session has no dataset by that path, name or id; it has ${doc.datasets.map((d) => `${d.id} (${d.absolutePath})`).join(', ')}`, 'bad-request');
      }
    }
    const statuses: SessionDatasetStatus[] = [];
    const found = new Map<string, DatasetRecordOf>();
    for (const ref of doc.datasets) {
      const to = relink.find(([old]) => relinkMatches(ref, old))?.[1];
      const where = await locateDataset(ref, path, to, (spec) => this.engine.describe(spec));
      let opened: OpenedDataset | null = null;
      if (where.descriptor) {
        found.set(ref.id, datasetRecordOf(where.descriptor));
        if (req.openData !== false) {
          const id = this.openIdOf(ref.fingerprint);
          opened = id ? publicOpened(this.record(id).opened) : await this.open(sessionSpecAt(ref, where.path!));
        }
      }
      statuses.push({ ref, status: where.status, path: where.path, how: where.how, opened });
    }
    this.session.load(path, doc, results, found);
    // Results name the dataset this session's reference opened (none when its data was not found).
    const statusOf = (fp: string) => statuses.find((d) => d.ref.fingerprint === fp);
    return { path, document: doc, datasets: statuses, results: this.session.entries((fp) => statusOf(fp)?.opened?.id ?? null, (fp) => statusOf(fp)?.ref.id ?? '') };
  }

  async exportResult(req: ExportRequest): Promise<ExportedFile> {
    validateRequest('exportResult', req);
    // Loaded on demand: the image and TIFF encoders and the colour maps are no part of an analysis's start.
    const { exportResult } = await import('../session/export');
    return exportResult(this.session.entries(this.openIdOf, (fp) => this.session.refIdOf(fp)), req, this.session.appScanStepNm);
  }

  async sessionEntries(): Promise<KeptEntry[]> {
    validateRequest('sessionEntries', undefined);
    return this.session.recipes(this.openIdOf);
  }

  async forgetSession(): Promise<void> {
    validateRequest('forgetSession', undefined);
    this.session.forget();
  }

  async forgetResults(keys: string[]): Promise<string[]> {
    validateRequest('forgetResults', keys);
    return this.session.drop(keys);
  }

  private async track<T>(job: Job<T>, jobId: string | undefined, label: string): Promise<T> {
    const id = jobId ?? `job-${this.nextJob++}`;
    if (jobId !== undefined && [...this.requests].some(([id, req]) => req.cancelled && (jobId === id || jobId.startsWith(`${id}/`)))) job.cancel();
    if (this.running.has(id)) {
      job.cancel('duplicate job id');
      throw new InputError(`job id ${JSON.stringify(id)} is already running; expected a new id`, 'bad-request');
    }
    const info = (): ServiceJobInfo => ({ ...job.info(), label, jobId: id });
    this.running.set(id, { job: job as Job<unknown>, info });
    this.emit({ kind: 'job', job: info() });
    const off = job.onProgress(() => this.emit({ kind: 'job', job: info() }));
    try {
      return await job.result;
    } finally {
      off();
      this.running.delete(id);
      const last = info();
      this.finished.push(last);
      if (this.finished.length > 200) this.finished.shift();
      this.emit({ kind: 'job', job: last });
    }
  }

  /**
   * The first pass's results: those already at hand, else the cache's (unless the preview cube
   * itself is needed), else a pass over the data, whose results then go to the cache.
   */
  private async ensureFirstPass(r: DatasetRecord, jobId: string | undefined, label: string, needPreview = false, along?: DetectorSpec[]): Promise<FirstResults> {
    if (r.first && (r.first.summary || !needPreview)) {
      if (needPreview && r.first.defaultImagesLeftOut) await this.addDefaultImages(r, r.first, jobId, label);
      return r.first;
    }
    const d = r.opened.descriptor;
    const key = this.cacheDir ? cacheKey(d) : null;
    if (!needPreview && key && this.cacheDir) {
      const cached = readCachedFirstPass(this.cacheDir, key, d);
      if (cached) {
        r.first = { ...cached, summary: null, seconds: 0 };
        return r.first;
      }
    }
    // One pass per dataset at a time: a request arriving while one runs (the app asks as soon as
    // its page loads, the engine may have started at open) waits for it.
    if (r.firstPending) {
      const f = await r.firstPending;
      if (needPreview && f.defaultImagesLeftOut) await this.addDefaultImages(r, f, jobId, label);
      return f;
    }
    // The default images are for a viewer (asked for with the preview cube); a command that
    // only needs bad pixels, the disk or the COM sums spares the pass their kernel.
    const pending = this.runFirstPass(r, key, jobId, label, needPreview, along);
    r.firstPending = pending;
    try {
      return await pending;
    } finally {
      if (r.firstPending === pending) r.firstPending = null;
    }
  }

  private async runFirstPass(r: DatasetRecord, key: string | null, jobId: string | undefined, label: string, withImages: boolean, along?: DetectorSpec[]): Promise<FirstResults> {
    const comPlan = await this.comPlanForPass(r, withImages, along);
    trace('first pass: plan made from the sample');
    // The first default image (bright field) goes out row by row as tiles finish, so a view can fill in.
    const { scanY: sy, scanX: sx } = r.opened.descriptor.shape;
    const rows = comPlan?.imageSpecs.length
      ? (row0: number, nRows: number, images: Float64Array[]) => this.emit({
        kind: 'image-rows', dataset: r.id, label: comPlan.imageSpecs[0].label ?? 'bright field', row0, nRows, scanY: sy, scanX: sx, values: images[0].slice(),
      })
      : undefined;
    const summary = await this.track(this.engine.firstPass(specOf(r), comPlan ? { mask: comPlan.mask, watch: comPlan.watch, images: comPlan.images } : undefined, rows), jobId, label);
    trace('first pass: tiles done');
    const { detY, detX, scanY, scanX } = summary.descriptor.shape;
    const found = aboutFile(summary.descriptor.path, () => findBadPixels(summary.meanPattern, summary.maxPattern, detY, detX, { patternCount: scanY * scanX }));
    const badPixels: BadPixels = { mask: found.mask, hot: found.hot.map(([y, x]) => [y, x]), dead: found.dead.map(([y, x]) => [y, x]) };
    let disk: BrightFieldDisk | { notFound: string };
    try {
      const mean = replaceBadPixels(summary.meanPattern, detY, detX, found.mask);
      const fd = findBrightFieldDisk(mean, detY, detX, { excludePixels: found.mask });
      disk = { cx: fd.cx, cy: fd.cy, r: fd.r, edgeConsistency: fd.edgeConsistency };
    } catch (e) {
      if (!isInputError(e)) throw e;
      disk = { notFound: e.message };
    }
    trace('first pass: bad pixels and disk found');
    const vacuum = 'notFound' in disk ? null : this.findVacuum(summary, badPixels.mask, disk);
    trace('first pass: vacuum found');
    // Another request may have finished a first pass meanwhile: keep one.
    const previous = r.first as DatasetRecord['first'];
    if (previous?.summary) this.engine.release(previous.summary);
    r.first = {
      summary, seconds: summary.seconds, meanPattern: summary.meanPattern, maxPattern: summary.maxPattern,
      totalIntensity: summary.totalIntensity, nonFinite: summary.nonFinite, badPixels, disk, vacuum,
      com: summary.com ? comSumsLessBadPixels(summary.com, found.mask, summary.meanPattern, summary.maxPattern, detX) : null,
      defaultImages: summary.com && comPlan ? comPlan.imageSpecs.map((spec, k) => ({
        label: spec.label ?? describeDetector(spec), detector: spec, image: summary.com!.images[k],
      })) : [],
      ...(comPlan && !withImages ? { defaultImagesLeftOut: true } : {}),
      ...(summary.com && comPlan?.alongSpecs ? { along: { specs: comPlan.alongSpecs, images: summary.com.images.slice(comPlan.imageSpecs.length) } } : {}),
    };
    if (key && this.cacheDir) writeCachedFirstPass(this.cacheDir, key, r.first);
    r.opened = { ...r.opened, version: r.opened.version + 1 };
    this.emit({ kind: 'dataset', dataset: r.id, version: r.opened.version, change: 'first-pass' });
    return r.first;
  }

  /**
   * The centre-of-mass sums the first pass takes along (so `com` needs no pass of its own): over
   * the whole detector less the pixels that look bad on a sample of patterns spread over the
   * scan, whose values are kept per position so any that the pass clears can be added back.
   * Null when too many pixels look bad for their values to be kept.
   */
  private async comPlanForPass(r: DatasetRecord, withImages: boolean, along?: DetectorSpec[]): Promise<(FirstPassComPlan & { imageSpecs: DetectorSpec[]; alongSpecs: DetectorSpec[] | null }) | null> {
    const { scanY, scanX, detY, detX } = r.opened.descriptor.shape;
    const side = Math.min(COM_SAMPLE_SIDE, scanY, scanX);
    const positions: [number, number][] = [];
    for (let i = 0; i < side; i++) {
      for (let j = 0; j < side; j++) positions.push([Math.floor(((i + 0.5) * scanY) / side), Math.floor(((j + 0.5) * scanX) / side)]);
    }
    const sum = new Float64Array(detY * detX);
    const max = new Float64Array(detY * detX).fill(-Infinity);
    const lacking = new Float64Array(detY * detX);
    // Read on every worker at once; for chunked data each read may inflate a chunk.
    trace('sample: reading');
    const patterns = await Promise.all(positions.map(([y, x]) => this.engine.pool.run((w) => w.readPattern(specOf(r), y, x))));
    trace('sample: read');
    const one = Uint8Array.of(1);
    for (const p of patterns) accumulateRegionPatterns(p, 1, detY * detX, one, sum, max, lacking);
    // Each pixel over the sampled patterns where it is finite, as the first pass's mean.
    const mean = meanOfFinite(sum, positions.length, lacking);
    const seen = findBadPixels(mean, max, detY, detX, { patternCount: positions.length });
    let nWatch = 0;
    for (const v of seen.mask) if (v) nWatch++;
    const watch = new Uint32Array(nWatch);
    for (let i = 0, k = 0; k < nWatch; i++) if (seen.mask[i]) watch[k++] = i;
    if (watch.length > COM_MAX_WATCHED || watch.length >= detY * detX) return null;
    const mask = watch.length
      ? this.compileDetectors(r, [{ shape: { kind: 'rectangle', x0: 0, y0: 0, x1: detX - 1, y1: detY - 1 } }], seen.mask)[0]
      : null;
    // Default images taken along: from the disk found on the sample.
    let imageSpecs: DetectorSpec[] = [];
    if (withImages) {
      try {
        const disk = findBrightFieldDisk(replaceBadPixels(mean, detY, detX, seen.mask), detY, detX, { excludePixels: seen.mask });
        imageSpecs = defaultImageSpecs(disk, detY, detX);
      } catch (e) {
        if (!isInputError(e)) throw e;
      }
    }
    const images = imageSpecs.map((spec) => this.compileDetectors(r, [spec], seen.mask)[0]);
    // A command's own detectors too (see virtualImages), unless one lies wholly on suspect pixels.
    let alongSpecs: DetectorSpec[] | null = null;
    if (along?.length) {
      try {
        images.push(...this.compileDetectors(r, along, seen.mask));
        alongSpecs = along;
      } catch (e) {
        if (!isInputError(e)) throw e;
      }
    }
    return { mask, watch, images, imageSpecs, alongSpecs };
  }

  /**
   * The images of `specs` taken along by the first pass, made exact for the final bad pixels:
   * watched pixels that proved good are added back from their kept values. Null (the caller
   * then makes its own pass) when the pass took none for these detectors, or a bad pixel inside
   * a detector was not watched and may have counts. Integer data and binary detectors only
   * (the caller's condition), so every sum is of whole numbers and equals its own pass's exactly.
   */
  private imagesTakenAlong(r: DatasetRecord, specs: DetectorSpec[], plain: CompiledDetector[], bad: Uint8Array | undefined): Float64Array[] | null {
    const f = r.first;
    const along = f?.along;
    if (!f || !along || along.specs !== specs) return null;
    delete f.along;
    const com = f.summary?.com;
    if (!com) return null;
    const watched = new Uint8Array(f.meanPattern.length);
    for (const i of com.watch) watched[i] = 1;
    const nW = com.watch.length;
    const pixels: Uint32Array[] = [];
    for (const full of plain) {
      if (full.mode !== 'indices') return null;
      for (const i of full.indices) if (bad?.[i] && !watched[i] && mayHaveCounts(i, f.meanPattern, f.maxPattern)) return null;
      pixels.push(full.indices);
    }
    // The images are this request's alone (taken off the first pass above): completed in place.
    return pixels.map((indices, k) => {
      const image = along.images[k];
      for (let j = 0; j < nW; j++) {
        const i = com.watch[j];
        if (bad?.[i] || !isInside(indices, i)) continue;
        for (let p = 0; p < image.length; p++) image[p] += com.watchValues[p * nW + j];
      }
      return image;
    });
  }

  /**
   * The default images of a pass that left them out (made for a command, now wanted by a
   * viewer): one pass of their own, about the disk the first pass found.
   */
  private addDefaultImages(r: DatasetRecord, f: FirstResults, jobId: string | undefined, label: string): Promise<void> {
    f.addingImages ??= this.runDefaultImages(r, f, jobId, label).finally(() => { delete f.addingImages; });
    return f.addingImages;
  }

  private async runDefaultImages(r: DatasetRecord, f: FirstResults, jobId: string | undefined, label: string): Promise<void> {
    const { detY, detX } = r.opened.descriptor.shape;
    const specs = 'notFound' in f.disk ? [] : defaultImageSpecs(f.disk, detY, detX);
    if (specs.length) {
      const compiled = this.compileDetectors(r, specs, f.badPixels.mask);
      const v = await this.track(this.engine.virtualImages(specOf(r), compiled), jobId, `${label} (default images)`);
      f.defaultImages = specs.map((spec, k) => ({ label: spec.label ?? describeDetector(spec), detector: spec, image: v.images[k] }));
    }
    delete f.defaultImagesLeftOut;
  }

  private async badPixelMask(r: DatasetRecord, mode: BadPixelsMode | undefined, jobId: string | undefined, along?: DetectorSpec[]): Promise<{ mask: Uint8Array | undefined; count: number; list?: { hot: [number, number][]; dead: [number, number][] } }> {
    if (mode === 'none') return { mask: undefined, count: 0 };
    const f = await this.ensureFirstPass(r, jobId ? `${jobId}/first-pass` : undefined, 'first pass (bad pixels)', false, along);
    return { mask: f.badPixels.mask, count: f.badPixels.hot.length + f.badPixels.dead.length, list: { hot: f.badPixels.hot, dead: f.badPixels.dead } };
  }

  async firstPass(req: FirstPassRequest): Promise<FirstPassResult> {
    validateRequest('firstPass', req);
    return this.request(req.jobId, async () => {
      const r = this.record(req.dataset);
      // Asked for explicitly: a real pass, with its preview cube for detector drags; one already
      // made (by `serve FILE` while the page loaded, or an earlier request) is the same, so it is
      // given again rather than read again. Results from the cache alone have no preview cube.
      const f = await this.ensureFirstPass(r, req.jobId, 'first pass', true);
      const s = f.summary!;
      return {
        dataset: r.id, descriptor: s.descriptor, meanPattern: s.meanPattern, maxPattern: s.maxPattern, totalIntensity: s.totalIntensity,
        totalIntensityLessBadPixels: f.com && f.badPixels.hot.length + f.badPixels.dead.length > 0 ? f.com.total : null,
        nonFiniteInputs: s.nonFinite, seconds: s.seconds, badPixels: f.badPixels, brightFieldDisk: f.disk, defaultImages: f.defaultImages,
        preview: { qY: s.preview.qY, qX: s.preview.qX, pY: s.preview.pY, pX: s.preview.pX, detBin: s.preview.detBin, scanBin: s.preview.scanBin },
      };
    });
  }

  private compileDetectors(r: DatasetRecord, detectors: DetectorSpec[], exclude?: Uint8Array): CompiledDetector[] {
    const { detY, detX } = r.opened.descriptor.shape;
    return aboutFile(r.opened.descriptor.path, () =>
      detectors.map((s) => ({ ...compileDetector(s, detY, detX, exclude ? { excludePixels: exclude } : {}), label: s.label ?? describeDetector(s) })));
  }

  async virtualImages(req: VirtualImagesRequest): Promise<VirtualImagesResult> {
    validateRequest('virtualImages', req);
    return this.requestKept('virtualImages', req, async () => {
      const r = this.record(req.dataset);
      // Every detector is checked before any pass over the data.
      const plain = this.compileDetectors(r, req.detectors);
      // A first pass still to make (for the bad pixels) takes the images along: one read, not
      // two. Integer data and binary detectors, whose sums it can make exact afterwards.
      const d = r.opened.descriptor;
      const along = req.badPixels !== 'none' && !r.first && !r.firstPending && !d.dtype.startsWith('float') && plain.every((c) => c.mode === 'indices')
        ? req.detectors : undefined;
      const bad = await this.badPixelMask(r, req.badPixels, req.jobId, along);
      const compiled = this.compileDetectors(r, req.detectors, bad.mask);
      const taken = along ? this.imagesTakenAlong(r, along, plain, bad.mask) : null;
      const v = taken
        ? { descriptor: d, images: taken, nonFinite: 0, seconds: r.first?.seconds ?? 0 }
        : await this.track(this.engine.virtualImages(specOf(r), compiled), req.jobId, 'virtual images');
      return {
        dataset: r.id, descriptor: v.descriptor, images: v.images, labels: req.detectors.map((s) => s.label ?? describeDetector(s)),
        badPixelsLeftOut: bad.count, ...(bad.list ? { badPixels: bad.list } : {}), nonFiniteInputs: v.nonFinite, seconds: v.seconds,
      };
    });
  }

  async comField(req: ComFieldRequest): Promise<ComFieldResult> {
    validateRequest('comField', req);
    return this.requestKept('comField', req, async () => {
      const r = this.record(req.dataset);
      const { detY, detX, scanY, scanX } = r.opened.descriptor.shape;
      const file = r.opened.descriptor.path;
      // Everything asked for is checked before any pass over the data.
      if (req.descan?.kind === 'reference') aboutFile(file, () => comDefaults(req, scanY, scanX, null));
      // The field's maps and the Fourier integration (on the scan mirrored to twice its size) live
      // in memory at once: about COM_BYTES_PER_POSITION per scan position. Refuse before any pass.
      const fieldBytes = COM_BYTES_PER_POSITION * scanY * scanX;
      if (fieldBytes > this.engine.limits.budgetBytes) {
        throw new InputError(`${file}: the centre-of-mass maps of a ${scanY}×${scanX} scan and their Fourier integration need about ${fmtBytes(fieldBytes)}, ` +
          `more than the memory budget of ${fmtBytes(this.engine.limits.budgetBytes)}; expected a larger budget (or a smaller scan region)`, 'too-large');
      }
      const maskSpec: DetectorSpec | null = req.maskDisk ? { shape: { kind: 'disk', ...req.maskDisk } } : null;
      if (maskSpec) this.compileDetectors(r, [maskSpec]);
      // The first pass gives the bad pixels, the disk centre and, from its preview, the vacuum.
      // With all of them given or not wanted (the plain definition), no pass is spent on it.
      const rotation = req.rotation ?? 'auto';
      const needsFirst = req.badPixels !== 'none' || req.descan === undefined || rotation === 'auto'
        || (req.descan.kind === 'none' && (rotation.degrees % 360 !== 0 || rotation.flip));
      const first = needsFirst ? await this.ensureFirstPass(r, req.jobId ? `${req.jobId}/first-pass` : undefined, 'first pass') : null;
      const bad = await this.badPixelMask(r, req.badPixels, req.jobId);
      const disk = first && !('notFound' in first.disk) ? first.disk : null;
      const defaults = aboutFile(file, () => comDefaults(req, scanY, scanX, first?.vacuum ?? null));
      if (!maskSpec && bad.count >= detY * detX) {
        throw new InputError(`${file}: every detector pixel was flagged as hot, dead or non-finite on the mean/max pattern, so no centre of mass can be computed; expected patterns with counts (or leave bad pixels in)`);
      }
      // Bad pixels leave the COM through the mask; with no mask given the mask is the whole detector.
      const mask = maskSpec || bad.count > 0
        ? this.compileDetectors(r, [maskSpec ?? { shape: { kind: 'rectangle', x0: 0, y0: 0, x1: detX - 1, y1: detY - 1 } }], bad.mask)[0]
        : null;
      // With the defaults (whole detector less the bad pixels, no threshold) the first pass took the sums along.
      const fromPass = !maskSpec && (req.threshold ?? 0) === 0 && req.badPixels !== 'none' && first?.com ? first.com : null;
      const sums = fromPass
        ? { descriptor: r.opened.descriptor, ...fromPass, seconds: 0 }
        : await this.track(this.engine.comSums(specOf(r), { mask, threshold: req.threshold ?? 0 }), req.jobId, 'centre of mass');
      const origin = disk ? { x: disk.cx, y: disk.cy } : { x: (detX - 1) / 2, y: (detY - 1) / 2 };
      trace('com: sums ready');
      const field = aboutFile(file, () => comFieldFromSums(sums, req, {
        defaults, origin, comMask: maskSpec ? describeDetector(maskSpec) : 'whole pattern', badPixelsLeftOut: bad.count, seconds: sums.seconds,
        sumsFrom: fromPass ? 'first pass' : 'own pass',
      }));
      return { dataset: r.id, ...field, ...(bad.list ? { badPixels: bad.list } : {}) };
    });
  }

  /**
   * Vacuum from the preview cube, with no pass over the data: each position's counts outside the
   * bright-field disk against its total, at the preview's scan binning. Whole detector bins are
   * used, never fractions of one: "inside" is every bin with a pixel within the disk (2 px margin),
   * "outside" every other bin, and a bin holding a bad pixel is in neither. So vacuum, which has
   * no counts beyond its disk, reads exactly zero outside at any binning of the cube.
   */
  private findVacuum(s: FirstPassSummary, badMask: Uint8Array, disk: BrightFieldDisk): VacuumFinding {
    const { detY, detX, scanY, scanX } = s.descriptor.shape;
    const { detBin, pY, pX } = s.preview;
    const touches = new Uint8Array(pY * pX), bad = new Uint8Array(pY * pX);
    const reach = disk.r + 2;
    for (let y = 0; y < detY; y++) {
      for (let x = 0; x < detX; x++) {
        const b = Math.floor(y / detBin) * pX + Math.floor(x / detBin);
        if (badMask[y * detX + x]) bad[b] = 1;
        if (Math.hypot(x - disk.cx, y - disk.cy) <= reach) touches[b] = 1;
      }
    }
    const inside = new Float64Array(pY * pX), outside = new Float64Array(pY * pX);
    for (let b = 0; b < pY * pX; b++) {
      if (bad[b]) continue;
      if (touches[b]) inside[b] = 1; else outside[b] = 1;
    }
    const pv = s.preview;
    const [inImage, outImage] = pv.imager ? pv.imager.images([inside, outside]) : previewImages(pv.data, pv.qY, pv.qX, pY, pX, [inside, outside]);
    const total = inImage.map((v, q) => v + outImage[q]);
    const coarse = findVacuum(outImage, total);
    if (!coarse.mask || pv.scanBin === 1) return coarse;
    const mask = new Uint8Array(scanY * scanX);
    let positions = 0;
    for (let y = 0; y < scanY; y++) {
      for (let x = 0; x < scanX; x++) {
        const v = coarse.mask[Math.floor(y / pv.scanBin) * pv.qX + Math.floor(x / pv.scanBin)];
        mask[y * scanX + x] = v;
        positions += v;
      }
    }
    return { ...coarse, mask, positions };
  }

  async calibrate(req: CalibrationRequest): Promise<CalibrationResult> {
    const CALIBRATION_FLAGS: Record<string, string> = { energyKeV: '--energy-kev', convergenceMrad: '--convergence-mrad', scanStepNm: '--scan-step-nm' };
    validateRequest('calibrate', req);
    return this.requestKept('calibrate', req, async () => {
      const r = this.record(req.dataset);
      const d = r.opened.descriptor;
      const file = d.path;
      // Values not given are read from the dataset's attributes, and the result says which.
      const sources: Record<string, string> = {};
      // A value needed (energy, semi-angle) stored unusably is refused, naming it; an optional one
      // (the scan step) is left out, and the sources say why.
      const pick = (key: string, given: number | undefined, names: readonly string[], needed = true): number | undefined => {
        if (given !== undefined) { sources[key] = 'given'; return given; }
        const found = attributeValue(d.attributes, names);
        if (found) sources[key] = `attribute ${found.name} of the dataset`;
        else {
          const bad = unusableAttribute(d.attributes, names);
          if (bad && !needed) sources[key] = `not used: the dataset's attribute ${bad.name} = ${bad.text} is not one positive number`;
          else if (bad) throw new InputError(`${file}: the dataset's attribute ${bad.name} = ${bad.text} is not a usable value (expected one positive number); give the value by hand instead (${CALIBRATION_FLAGS[key]} in the command line)`, 'bad-input');
        }
        return found?.value;
      };
      const energyKeV = pick('energyKeV', req.energyKeV, ENERGY_ATTRIBUTES);
      if (energyKeV === undefined) {
        throw new InputError(`${file}: no beam energy was given and the dataset stores none (looked for ${ENERGY_ATTRIBUTES.join(', ')}); expected the beam energy in keV`, 'bad-request');
      }
      const lattice = req.latticeSpacingAngstrom;
      const alpha = lattice === undefined ? pick('convergenceMrad', req.convergenceMrad, CONVERGENCE_ATTRIBUTES) : undefined;
      if (lattice === undefined && alpha === undefined) {
        throw new InputError(`${file}: neither a convergence semi-angle nor a lattice spacing was given, and the dataset stores no semi-angle (looked for ${CONVERGENCE_ATTRIBUTES.join(', ')}); expected one of them`, 'bad-request');
      }
      const scanStepNm = pick('scanStepNm', req.scanStepNm, SCAN_STEP_ATTRIBUTES, false);
      const f = await this.ensureFirstPass(r, req.jobId, 'first pass');
      const { detY, detX } = d.shape;
      if ('notFound' in f.disk) throw new InputError(`${file}: ${f.disk.notFound}`);
      const disk = f.disk;
      return aboutFile(file, () => {
        let braggPx: number | undefined;
        let rings: { radius: number; strength: number }[] | undefined;
        if (lattice !== undefined) {
          if (req.braggDistancePx !== undefined) {
            braggPx = req.braggDistancePx;
            sources.braggDistancePx = 'given';
          } else {
            // Never assign a spacing to a ring silently: only when a single ring of Bragg disks (disks
            // of the bright-field disk's size) stands out, in the mean pattern (polycrystals) and in
            // the max pattern (disks of a few grains, which the mean dilutes). A broad amorphous
            // halo is not a candidate.
            const mean = replaceBadPixels(f.meanPattern, detY, detX, f.badPixels.mask);
            const max = replaceBadPixels(f.maxPattern, detY, detX, f.badPixels.mask);
            // Radii from the max pattern first: there the disks stand highest above a halo.
            const found = braggRingCandidates(max, detY, detX, disk.cx, disk.cy, disk.r, f.badPixels.mask);
            for (const c of braggRingCandidates(mean, detY, detX, disk.cx, disk.cy, disk.r, f.badPixels.mask)) {
              if (!found.some((m) => Math.abs(m.radius - c.radius) < 1.5)) found.push(c);
            }
            found.sort((a, b) => a.radius - b.radius);
            rings = found.map((c) => ({ radius: c.radius, strength: c.strength }));
            if (found.length === 0) throw new InputError(`no ring of Bragg disks found beyond ${(2.6 * disk.r + 1).toFixed(1)} px from the centre; expected the distance of a ring given by hand (--bragg-distance-px in the command line)`, 'ambiguous');
            if (found.length > 1) {
              throw new InputError(`several rings could be the one of spacing ${lattice} Å: ${found.map((c) => `${c.radius.toFixed(1)} px (strength ${c.strength.toFixed(2)})`).join(', ')}; ` +
                'expected the distance of the right ring from the centre given by hand (--bragg-distance-px in the command line)', 'ambiguous');
            }
            braggPx = found[0].radius;
            sources.braggDistancePx = 'the only ring of the mean and max patterns';
          }
        }
        const cal = calibrate(lattice === undefined
          ? { source: 'convergence-angle', energyKeV, convergenceSemiAngleMrad: alpha!, diskRadiusPx: disk.r, scanStepNm }
          : { source: 'lattice-spacing', energyKeV, latticeSpacingAngstrom: lattice, braggDistancePx: braggPx!, scanStepNm });
        return {
          dataset: r.id,
          energyKeV,
          wavelengthPm: cal.wavelengthPm,
          disk,
          mradPerPixel: cal.mradPerPixel,
          inverseAngstromPerPixel: cal.inverseAngstromPerPixel,
          ...(braggPx !== undefined ? { braggDistancePx: braggPx, braggDistanceSource: req.braggDistancePx !== undefined ? 'given' as const : 'the only ring of the mean and max patterns' as const } : {}),
          ...(scanStepNm !== undefined ? { scanStepNm } : {}),
          source: lattice === undefined ? 'convergence-angle' as const : 'lattice-spacing' as const,
          badPixels: { hot: f.badPixels.hot.length, dead: f.badPixels.dead.length },
          valueSources: sources,
          ...(rings ? { rings } : {}),
        };
      });
    });
  }

  async pca(req: PcaRequest): Promise<PcaResult> {
    validateRequest('pca', req);
    return this.requestKept('pca', req, () => this.runPca(this.record(req.dataset), req));
  }

  /**
   * PCA of the preview cube (no read of the data): the cube's detector bins are the pixels the
   * request's features bin again; its bins holding a bad pixel are left out.
   */
  private async runPreviewPca(r: DatasetRecord, req: PcaRequest): Promise<PcaResult> {
    const t0 = performance.now();
    const d = r.opened.descriptor;
    const f = await this.ensureFirstPass(r, req.jobId ? `${req.jobId}/first-pass` : undefined, 'first pass', true);
    const cube = f.summary!.preview;
    const { detY, detX } = d.shape;
    const scaling = req.scaling ?? 'none';
    const badMode = req.badPixels ?? 'auto';
    const cubeBad = new Uint8Array(cube.pY * cube.pX);
    if (badMode === 'auto') {
      for (let y = 0; y < detY; y++) for (let x = 0; x < detX; x++) if (f.badPixels.mask[y * detX + x]) cubeBad[Math.floor(y / cube.detBin) * cube.pX + Math.floor(x / cube.detBin)] = 1;
    }
    const crop = req.crop ? { x0: Math.floor(req.crop.x0 / cube.detBin), y0: Math.floor(req.crop.y0 / cube.detBin), x1: Math.floor(req.crop.x1 / cube.detBin), y1: Math.floor(req.crop.y1 / cube.detBin) } : undefined;
    const bin = req.bin === undefined || req.bin === 'auto' ? autoFeatureBin(cube.pY, cube.pX, crop) : req.bin;
    // The cube's mean over positions, per bin, for Poisson weighting.
    let mean: Float64Array | null = null;
    if (scaling === 'poisson') {
      const data = cube.imager ? cube.imager.cube() : cube.data;
      const per = cube.pY * cube.pX, q = cube.qY * cube.qX;
      mean = new Float64Array(per);
      for (let i = 0; i < q; i++) for (let j = 0; j < per; j++) mean[j] += data[i * per + j] / q;
    }
    const plan = aboutFile(d.path, () => planFeatures({ bin, crop, scaling, normalize: req.normalize ?? false }, cube.pY, cube.pX, badMode === 'auto' ? cubeBad : null, mean));
    const n = cube.qY * cube.qX;
    if (req.components > Math.min(n, plan.nFeatures)) {
      throw new InputError(`${d.path}: ${req.components} components asked for, but the preview cube has ${n} positions of ${plan.nFeatures} features; expected at most ${Math.min(n, plan.nFeatures)}`, 'bad-request');
    }
    const options = { components: req.components, oversample: req.oversample ?? 10, powerIterations: req.passes === 1 ? 0 : req.powerIterations ?? 2, seed: req.seed ?? 0, onePass: req.passes === 1, centre: req.centre !== false };
    const { pca: p, zeroPatterns } = await previewPca(cube, plan, options);
    const bins = plan.outY * plan.outX;
    const components = new Float64Array(p.k * bins);
    for (let c = 0; c < p.k; c++) components.set(featuresToImage(p.components.subarray(c * plan.nFeatures, (c + 1) * plan.nFeatures), plan), c * bins);
    return {
      dataset: r.id, descriptor: d, k: p.k, singularValues: p.singularValues, explainedVarianceRatio: p.explainedVarianceRatio,
      totalVariance: p.totalVariance, components, loadings: p.loadings, meanPattern: featuresToImage(p.mean, plan),
      features: featureSummary(plan, badMode),
      method: { oversample: options.oversample, sketch: p.sketch, powerIterations: options.powerIterations, seed: options.seed, passes: 0, totalVarianceFrom: p.totalVarianceFrom },
      ...(badMode === 'auto' ? { badPixels: { hot: f.badPixels.hot, dead: f.badPixels.dead } } : {}),
      zeroPatterns, preview: { qY: cube.qY, qX: cube.qX, scanBin: cube.scanBin, detBin: cube.detBin }, seconds: (performance.now() - t0) / 1000,
    };
  }

  private async runPca(r: DatasetRecord, req: PcaRequest): Promise<PcaResult> {
    if (req.preview) return this.runPreviewPca(r, req);
    const d = r.opened.descriptor;
    const { scanY, scanX } = d.shape;
    const { plan, features, badPixels } = await this.featurePlan(r, req);
    const n = scanY * scanX;
    if (req.components > Math.min(n, plan.nFeatures)) {
      throw new InputError(`${d.path}: ${req.components} components asked for, but the data have ${n} patterns of ${plan.nFeatures} features ` +
        `(${plan.outY}×${plan.outX} bins${plan.binsLeftOut ? `, ${plan.binsLeftOut} left out` : ''}); expected at most ${Math.min(n, plan.nFeatures)}`, 'bad-request');
    }
    const options = { components: req.components, oversample: req.oversample ?? 10, powerIterations: req.passes === 1 ? 0 : req.powerIterations ?? 2, seed: req.seed ?? 0, onePass: req.passes === 1, centre: req.centre !== false };
    const job = await this.track(this.engine.pca(specOf(r), plan, options), req.jobId, 'PCA');
    const p = job.pca;
    const bins = plan.outY * plan.outX;
    const components = new Float64Array(p.k * bins);
    for (let c = 0; c < p.k; c++) components.set(featuresToImage(p.components.subarray(c * plan.nFeatures, (c + 1) * plan.nFeatures), plan), c * bins);
    return {
      dataset: r.id, descriptor: job.descriptor, k: p.k, singularValues: p.singularValues, explainedVarianceRatio: p.explainedVarianceRatio,
      totalVariance: p.totalVariance, components, loadings: p.loadings, meanPattern: featuresToImage(p.mean, plan),
      features,
      method: { oversample: options.oversample, sketch: p.sketch, powerIterations: options.powerIterations, seed: options.seed, passes: p.passes, totalVarianceFrom: p.totalVarianceFrom },
      ...(badPixels ? { badPixels } : {}),
      zeroPatterns: job.zeroPatterns, seconds: job.seconds,
    };
  }

  /** The feature plan of a request (bad pixels and Poisson's mean pattern from the first pass). */
  private async featurePlan(r: DatasetRecord, req: FeatureOptions & { jobId?: string }) {
    const d = r.opened.descriptor;
    const { detY, detX } = d.shape;
    const scaling = req.scaling ?? 'none';
    const badMode = req.badPixels ?? 'auto';
    const bin = req.bin === undefined || req.bin === 'auto' ? autoFeatureBin(detY, detX, req.crop) : req.bin;
    const first = badMode === 'auto' || scaling === 'poisson'
      ? await this.ensureFirstPass(r, req.jobId ? `${req.jobId}/first-pass` : undefined, 'first pass') : null;
    const plan = aboutFile(d.path, () => planFeatures({ bin, crop: req.crop, scaling, normalize: req.normalize ?? false }, detY, detX,
      badMode === 'auto' ? first!.badPixels.mask : null, first?.meanPattern ?? null));
    const features = featureSummary(plan, badMode);
    const badPixels = first && badMode === 'auto' ? { hot: first.badPixels.hot, dead: first.badPixels.dead } : undefined;
    return { plan, features, badPixels };
  }

  async fit(req: FitRequest): Promise<FitResult> {
    validateRequest('fit', req);
    return this.requestKept('fit', req, async () => {
      const r = this.record(req.dataset);
      const d = r.opened.descriptor;
      const { scanY, scanX } = d.shape;
      const regions = aboutFile(d.path, () => req.references.map((shape) => compileRegion(shape, scanY, scanX)));
      const { plan, features, badPixels } = await this.featurePlan(r, req);
      if (req.references.length > plan.nFeatures) {
        throw new InputError(`${d.path}: ${req.references.length} references for ${plan.nFeatures} features; expected at most as many references as features`, 'bad-request');
      }
      const job = await this.track(this.engine.referenceFit(specOf(r), plan, regions, req.nonnegative ?? false), req.jobId, 'reference fit');
      const rr = req.references.length;
      const n = scanY * scanX;
      const coefficients = new Float64Array(rr * n);
      for (let i = 0; i < n; i++) for (let c = 0; c < rr; c++) coefficients[c * n + i] = job.coefficients[i * rr + c];
      const bins = plan.outY * plan.outX;
      const references = new Float64Array(rr * bins);
      for (let c = 0; c < rr; c++) references.set(featuresToImage(job.references.subarray(c * plan.nFeatures, (c + 1) * plan.nFeatures), plan), c * bins);
      return {
        dataset: r.id, descriptor: job.descriptor, r: rr, coefficients, residual: job.residual, references, counts: Array.from(job.counts),
        regions: req.references.map((s) => describeRegion(s)), nonnegative: req.nonnegative ?? false, features,
        ...(badPixels ? { badPixels } : {}), zeroPatterns: job.zeroPatterns, seconds: job.seconds,
      };
    });
  }

  /** k-means on the feature vectors themselves, streamed; then each cluster's mean pattern. */
  private async kmeansOfPatterns(r: DatasetRecord, req: KmeansRequest, t0: number): Promise<KmeansResult> {
    if (req.preview) throw new InputError('kmeans: a preview clusters principal components of the preview cube; expected features pca with preview', 'bad-request');
    const d = r.opened.descriptor;
    const { plan, features, badPixels } = await this.featurePlan(r, req);
    const restarts = req.restarts ?? 10, seed = req.seed ?? 0;
    const km = await this.track(this.engine.streamedKmeans(specOf(r), plan, req.clusters, { restarts, seed, maxIterations: req.maxIterations ?? 30, sampleRows: 16 }), req.jobId, 'k-means');
    const clusterPatterns = await this.clusterPatternsPass(r, km.labels, req.clusters, req.jobId);
    return {
      dataset: r.id, descriptor: d, k: req.clusters, labels: km.labels, centers: km.centers, clusterPatterns,
      sizes: km.sizes, inertia: km.inertia, iterations: km.iterations,
      features: { ...features, kind: 'patterns', components: plan.nFeatures },
      method: { algorithm: 'lloyd', restarts, seed, restartKept: 0, pcaPasses: 0, passes: km.passes + 1 },
      ...(badPixels ? { badPixels } : {}),
      seconds: (performance.now() - t0) / 1000,
    };
  }

  /** The mean pattern of every cluster at full resolution: one pass, a job of its own under the request's id. */
  private async clusterPatternsPass(r: DatasetRecord, labels: Int32Array, k: number, jobId: string | undefined): Promise<Float64Array> {
    return (await this.track(this.engine.clusterPatterns(specOf(r), labels, k), jobId ? `${jobId}/cluster-patterns` : undefined, 'cluster patterns')).means;
  }

  async kmeans(req: KmeansRequest): Promise<KmeansResult> {
    validateRequest('kmeans', req);
    return this.requestKept('kmeans', req, async () => {
      const r = this.record(req.dataset);
      const t0 = performance.now();
      const d = r.opened.descriptor;
      const n = d.shape.scanY * d.shape.scanX;
      if (req.clusters > n) throw new InputError(`${d.path}: ${req.clusters} clusters asked for, but the scan has ${n} positions; expected at most ${n}`, 'bad-request');
      if (req.features === 'patterns') return this.kmeansOfPatterns(r, req, t0);
      // Not asked for: 10 components, or fewer when the data have fewer patterns or features.
      const f = req.pcaComponents ?? Math.min(10, n, (await this.featurePlan(r, req)).plan.nFeatures);
      const pca = await this.runPca(r, {
        dataset: req.dataset, components: f, bin: req.bin, crop: req.crop, scaling: req.scaling, normalize: req.normalize, badPixels: req.badPixels,
        // One power iteration: clustering needs the leading subspace, not its last digits (one read fewer).
        seed: req.seed, powerIterations: req.powerIterations ?? 1, ...(req.preview ? { preview: true } : {}), ...(req.jobId ? { jobId: `${req.jobId}/pca` } : {}),
      });
      // Each position's (or, for a preview, scan bin's) coordinates along the components found.
      const k = pca.k;
      const m = pca.preview ? pca.preview.qY * pca.preview.qX : n;
      const points = new Float64Array(m * k);
      for (let c = 0; c < k; c++) for (let i = 0; i < m; i++) points[i * k + c] = pca.loadings[c * m + i];
      const restarts = req.restarts ?? 10, seed = req.seed ?? 0;
      const algorithm = req.algorithm ?? (m > MINI_BATCH_ABOVE ? 'mini-batch' : 'lloyd');
      const km = aboutFile(d.path, () => algorithm === 'mini-batch'
        ? kmeansMiniBatch(points, m, k, req.clusters, { batch: 4096, iterations: 200, seed })
        : kmeans(points, m, k, req.clusters, { restarts, seed, maxIterations: 300, tol: 1e-4 }));
      let clusterPatterns: Float64Array;
      let preview: KmeansResult['preview'];
      if (pca.preview) {
        // The mean cube row of each cluster, on the cube's binned detector.
        const cube = r.first!.summary!.preview;
        const data = cube.imager ? cube.imager.cube() : cube.data;
        const per = cube.pY * cube.pX;
        clusterPatterns = new Float64Array(req.clusters * per);
        for (let i = 0; i < m; i++) for (let j = 0; j < per; j++) clusterPatterns[km.labels[i] * per + j] += data[i * per + j];
        for (let c = 0; c < req.clusters; c++) for (let j = 0; j < per; j++) clusterPatterns[c * per + j] /= km.sizes[c];
        preview = { qY: cube.qY, qX: cube.qX, pY: cube.pY, pX: cube.pX, scanBin: cube.scanBin, detBin: cube.detBin };
      } else {
        clusterPatterns = await this.clusterPatternsPass(r, km.labels, req.clusters, req.jobId);
      }
      let explained = 0;
      for (const x of pca.explainedVarianceRatio) explained += x;
      return {
        dataset: r.id, descriptor: d, k: req.clusters, labels: km.labels, centers: km.centers, clusterPatterns,
        sizes: km.sizes, inertia: km.inertia, iterations: km.iterations,
        features: { ...pca.features, kind: 'pca', components: k, explainedVariance: explained },
        method: { algorithm, restarts: algorithm === 'lloyd' ? restarts : 1, seed, restartKept: km.restart, pcaPasses: pca.method.passes, passes: pca.method.passes + (pca.preview ? 0 : 1) },
        ...(pca.badPixels ? { badPixels: pca.badPixels } : {}),
        ...(preview ? { preview } : {}),
        seconds: (performance.now() - t0) / 1000,
      };
    });
  }

  async regionPattern(req: RegionPatternRequest): Promise<RegionPatternResult> {
    validateRequest('regionPattern', req);
    return this.requestKept('regionPattern', req, async () => {
      const r = this.record(req.dataset);
      const { scanY, scanX } = r.opened.descriptor.shape;
      const region = aboutFile(r.opened.descriptor.path, () => compileRegion(req.region, scanY, scanX));
      const p = await this.track(this.engine.regionPattern(specOf(r), region), req.jobId, 'region pattern');
      return {
        dataset: r.id, descriptor: p.descriptor, mean: p.mean, max: p.max, count: p.count,
        region: describeRegion(req.region), nonFiniteInputs: p.nonFinite, seconds: p.seconds,
      };
    });
  }

  async patternAt(req: PatternAtRequest): Promise<PatternAtResult> {
    validateRequest('patternAt', req);
    const r = this.record(req.dataset);
    const { scanY, scanX, detY, detX } = r.opened.descriptor.shape;
    if (req.y >= scanY || req.x >= scanX) {
      throw new InputError(`patternAt: position (y ${req.y}, x ${req.x}) is outside the ${scanY}×${scanX} scan of ${r.opened.descriptor.path}`, 'bad-request');
    }
    // On the engine's quick worker: a job's tiles never hold it up.
    const pattern = await this.engine.quick.run((w) => w.readPattern(specOf(r), req.y, req.x));
    return { detY, detX, pattern };
  }

  async previewImages(req: PreviewImagesRequest): Promise<PreviewImagesResult> {
    validateRequest('previewImages', req);
    const r = this.record(req.dataset);
    if (!r.first?.summary) throw new InputError(`previewImages: ${r.opened.descriptor.path} has no preview yet; expected a first pass first`, 'bad-request');
    const compiled = this.compileDetectors(r, req.detectors, r.first.badPixels.mask);
    return previewDetectorImages(r.first.summary.preview, compiled);
  }

  async filesRead(): Promise<{ path: string; dev: number; ino: number }[]> {
    const seen = new Map<string, { path: string; dev: number; ino: number }>();
    for (const list of await this.engine.eachWorker((w) => w.filesRead())) {
      for (const f of list) seen.set(`${f.dev}:${f.ino}`, f);
    }
    return [...seen.values()];
  }

  async jobs(): Promise<ServiceJobInfo[]> {
    return [...this.finished, ...[...this.running.values()].map((r) => r.info())];
  }

  /**
   * Cancel a request by the client's job id: its running job (and the first pass it waits on)
   * stops, and the request rejects with CancelledError even when it was between jobs or needed
   * none. False when nothing runs under that id.
   */
  async cancel(jobId: string): Promise<boolean> {
    validateRequest('cancel', jobId);
    let hit = false;
    for (const [id, r] of this.running) {
      if (id === jobId || id.startsWith(`${jobId}/`)) { r.job.cancel(); hit = true; }
    }
    const req = this.requests.get(jobId);
    if (req) { req.cancelled = true; hit = true; }
    return hit;
  }

  /** Cancel whatever runs (Ctrl-C in the CLI). */
  cancelAll(reason = 'interrupted'): number {
    for (const r of this.running.values()) r.job.cancel(reason);
    return this.running.size;
  }

  async shutdown(): Promise<void> {
    this.records.clear();
    await this.engine.close();
  }
}
