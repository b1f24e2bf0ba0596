// The engine service: the one interface the command line, the desktop application (over
// Electron IPC), a browser in served mode (over a loopback WebSocket) and session files use.
// Requests and results are plain data (typed arrays allowed); every request is checked by
// validateRequest (./validate.ts) where it enters the engine, whatever the transport.
import type { DatasetDescriptor, Hdf5DatasetInfo, SourceSpec } from '../model/dataset';
import type { DetectorSpec, RegionShape } from '../model/detectors';
import type { JobInfo } from './jobs';
import type { AppSetup, SessionDatasetRef, SessionDocument, SessionMethod } from '../model/session';

/** An open dataset, named by the service. */
export type DatasetId = string;

export interface OpenedDataset {
  id: DatasetId;
  descriptor: DatasetDescriptor;
  /** Goes up whenever something about the dataset changes (first pass done, calibration set). */
  version: number;
}

export type Inspection =
  | { kind: 'dataset'; descriptor: DatasetDescriptor }
  | { kind: 'hdf5-listing'; path: string; datasets: Hdf5DatasetInfo[] };

/** Every long request may name its job, so a client can follow and cancel it over any transport. */
export interface JobOptions {
  /** A client-chosen id for the job (unique among running jobs); one is made up when omitted. */
  jobId?: string;
  /**
   * Keep the result in the engine's session under this key (replacing one kept under it), with
   * its request as the recipe; saveSession writes what is kept. Results of virtualImages,
   * comField, calibrate, regionPattern, pca, kmeans and fit can be kept.
   */
  keepAs?: string;
}

/** Hot and dead detector pixels: found on the mean and max pattern, or none. */
export type BadPixelsMode = 'auto' | 'none';

export interface BadPixels {
  /** detY × detX, 1 where a pixel is left out. */
  mask: Uint8Array;
  /** [y, x] of each pixel. */
  hot: [number, number][];
  dead: [number, number][];
}

export interface BrightFieldDisk {
  cx: number;
  cy: number;
  r: number;
  edgeConsistency: number;
}

export interface FirstPassRequest extends JobOptions {
  dataset: DatasetId;
}

export interface FirstPassResult {
  dataset: DatasetId;
  descriptor: DatasetDescriptor;
  meanPattern: Float64Array;
  maxPattern: Float64Array;
  /** Σ of each pattern over every pixel, bad ones included (scanY × scanX). */
  totalIntensity: Float64Array;
  /**
   * Σ of each pattern over the detector less the bad pixels found; null when none were found
   * (it is then totalIntensity) or when too many looked bad on the sample for the pass to watch.
   * A few hot pixels can outweigh the specimen's counts and flatten the plain total.
   */
  totalIntensityLessBadPixels: Float64Array | null;
  /** NaN/±Inf input values left out of the sums and maxima. */
  nonFiniteInputs: number;
  seconds: number;
  badPixels: BadPixels;
  /** The bright-field disk found on the mean pattern, or why none was found. */
  brightFieldDisk: BrightFieldDisk | { notFound: string };
  /** The preview cube stays in the engine; detector drags are answered from it (previewImages). */
  preview: { qY: number; qX: number; pY: number; pX: number; detBin: number; scanBin: number };
  /**
   * Exact virtual images taken in the same pass (scanY × scanX each): bright field over the disk
   * found on a sample of patterns and annular dark field from twice its radius to the detector's
   * edge, bad pixels of the sample left out; empty when no disk was found.
   */
  defaultImages: { label: string; detector: DetectorSpec; image: Float64Array }[];
}

export interface VirtualImagesRequest extends JobOptions {
  dataset: DatasetId;
  detectors: DetectorSpec[];
  badPixels?: BadPixelsMode;
}

export interface VirtualImagesResult {
  dataset: DatasetId;
  descriptor: DatasetDescriptor;
  /** One image per detector, scanY × scanX, in the order asked. */
  images: Float64Array[];
  labels: string[];
  badPixelsLeftOut: number;
  /** The bad pixels left out ([y, x]), when found. */
  badPixels?: { hot: [number, number][]; dead: [number, number][] };
  nonFiniteInputs: number;
  seconds: number;
}

export type DescanRequest =
  | { kind: 'none' | 'mean' | 'plane' }
  /** A reference area of the scan (e.g. vacuum), scan positions, corners inclusive. */
  | { kind: 'reference'; region: { x0: number; y0: number; x1: number; y1: number } };

export interface ComCalibration {
  mradPerPixel: number;
  energyKeV: number;
  scanStepNm: number;
}

export interface ComFieldRequest extends JobOptions {
  dataset: DatasetId;
  /** Only pixels inside this disk count (detector px); default the whole pattern. */
  maskDisk?: { cx: number; cy: number; r: number };
  /** Pixels below this value count as zero (a pixel equal to it counts); 0 means no threshold at all. */
  threshold?: number;
  descan?: DescanRequest;
  /** Estimated by least curl (auto), or given. */
  rotation?: 'auto' | { degrees: number; flip: boolean };
  badPixels?: BadPixelsMode;
  /** With it, COM is also given in mrad and the phase in radians. */
  calibration?: ComCalibration;
}

export interface ComMap {
  data: Float64Array;
  units: string;
  note?: string;
}

export interface ComFieldResult {
  dataset: DatasetId;
  descriptor: DatasetDescriptor;
  scanY: number;
  scanX: number;
  /** com_x, com_y, total_intensity, magnitude, direction, divergence, curl, phase, and with a calibration com_x_mrad, com_y_mrad, phase_radians. */
  maps: Record<string, ComMap>;
  rotation: {
    degrees: number;
    flip: boolean;
    source: 'estimated (least curl)' | 'given';
    alternativeDegrees?: number;
    curlRelative?: number;
    /** Gaussian width (scan steps) the field was smoothed by for the estimate only (the maps are not smoothed); 0 = none. */
    smoothingSigma?: number;
    halfTurnRule?: string;
    /** How clearly the rule told θ from θ + 180° (its score; near 0 is a guess). */
    halfTurnScore?: number;
    /** False when no vacuum settled the half-turn: the choice then rests on the phase's skewness alone. */
    halfTurnDetermined?: boolean;
  };
  /** The descan applied: 'reference (vacuum found)', 'reference (region given)', 'mean (no vacuum found)', 'mean', 'plane', or 'none (positions on the detector, …)'. */
  descan: string;
  /** Vacuum in the scan: found from the first pass (no request needed), given as the descan region, or none. */
  vacuum: { source: 'found' | 'given' | 'none'; positions: number; gapSigmas?: number };
  /** What the descan subtracted from each COM component (detector px): a + b·x + c·y over scan positions (b = c = 0 but for 'plane'). */
  descanRemoved: { x: { a: number; b: number; c: number }; y: { a: number; b: number; c: number } };
  threshold: number;
  comMask: string;
  /** Where Σ I, Σ I·x, Σ I·y came from: taken along in the dataset's first pass (no read of its own), or a pass of their own. */
  sumsFrom: 'first pass' | 'own pass';
  zeroTotalPatterns: number;
  badPixelsLeftOut: number;
  badPixels?: { hot: [number, number][]; dead: [number, number][] };
  nonFiniteInputs: number;
  calibration?: ComCalibration & { wavelengthPm: number; radiansPerPhaseUnit: number };
  /** Things the user should know (a weak rotation estimate…), one line each. */
  notes: string[];
  seconds: number;
}

export interface CalibrationRequest extends JobOptions {
  dataset: DatasetId;
  /** Beam energy; when omitted, read from the dataset's attributes (beam_energy_kev, …). */
  energyKeV?: number;
  /** At most one of the convergence semi-angle or a lattice spacing; with neither, the semi-angle is read from the dataset's attributes. */
  convergenceMrad?: number;
  latticeSpacingAngstrom?: number;
  /** With a lattice spacing: the distance of that Bragg disk from the centre, when known. */
  braggDistancePx?: number;
  scanStepNm?: number;
}

export interface CalibrationResult {
  dataset: DatasetId;
  /** The beam energy used (given, or read from the dataset's attributes). */
  energyKeV: number;
  wavelengthPm: number;
  disk: BrightFieldDisk;
  mradPerPixel: number;
  inverseAngstromPerPixel: number;
  braggDistancePx?: number;
  braggDistanceSource?: 'given' | 'the only ring of the mean and max patterns';
  scanStepNm?: number;
  source: 'convergence-angle' | 'lattice-spacing';
  badPixels: { hot: number; dead: number };
  /** Where each value came from: 'given', or 'attribute NAME of the dataset'. */
  valueSources: Record<string, string>;
  /** Rings of the mean and max patterns' azimuthal averages (lattice-spacing calibration), by radius; strength relative to the strongest of the same pattern. */
  rings?: { radius: number; strength: number }[];
}

export interface RegionPatternRequest extends JobOptions {
  dataset: DatasetId;
  region: RegionShape;
}

export interface RegionPatternResult {
  dataset: DatasetId;
  descriptor: DatasetDescriptor;
  mean: Float64Array;
  max: Float64Array;
  /** Probe positions in the region. */
  count: number;
  region: string;
  nonFiniteInputs: number;
  seconds: number;
}

/** Hover: the pattern at one probe position, read from the data (not the preview). */
export interface PatternAtRequest {
  dataset: DatasetId;
  /** Scan row and column. */
  y: number;
  x: number;
}

export interface PatternAtResult {
  detY: number;
  detX: number;
  /** As float64, whatever the stored type. */
  pattern: Float64Array;
}

/** Drag: detector images from the preview cube, at once, in the units of the exact images. */
export interface PreviewImagesRequest {
  dataset: DatasetId;
  detectors: DetectorSpec[];
}

export interface PreviewImagesResult {
  images: Float64Array[];
  qY: number;
  qX: number;
  scanBin: number;
}

/** How patterns are made into feature vectors for PCA (see compute/pattern-features.ts). */
export interface FeatureOptions {
  /** Detector binning 1, 2, 4 or 8; 'auto' (default): the least that brings the detector to at most 64 × 64 bins. */
  bin?: 1 | 2 | 4 | 8 | 'auto';
  /** Detector pixels kept, inclusive; default the whole detector (trimmed to whole bins). */
  crop?: { x0: number; y0: number; x1: number; y1: number };
  /** none (default), sqrt (variance-stabilising) or poisson (Keenan & Kotula 2004 weighting). */
  scaling?: 'none' | 'sqrt' | 'poisson';
  /** Divide each pattern by its total before scaling (default false). */
  normalize?: boolean;
  /** auto (default): bins holding a hot or dead pixel are left out; none keeps every pixel. */
  badPixels?: BadPixelsMode;
}

export interface PcaRequest extends JobOptions, FeatureOptions {
  dataset: DatasetId;
  /** Components wanted (k ≥ 1, at most the number of patterns and of features). */
  components: number;
  /** Extra sketch columns beyond k (default 10). */
  oversample?: number;
  /** Power iterations (default 2): the data are read this many times plus one. */
  powerIterations?: number;
  /**
   * 1: a one-pass sketch (Tropp, Yurtsever, Udell & Cevher 2017) that reads the data once, less
   * accurate than power iterations; default: powerIterations + 1 passes.
   */
  passes?: 1;
  /** false: PCA of the data as they are, the mean left in (its first component is then about the mean pattern). Default true. */
  centre?: boolean;
  /** Seed of the random sketch (default 0); the same input and seed give the same output. */
  seed?: number;
  /**
   * A preview: PCA of the in-memory preview cube (binned scan and detector), answered within
   * seconds with no read of the data, to show while the exact request runs.
   */
  preview?: boolean;
}

export interface PcaResult {
  dataset: DatasetId;
  descriptor: DatasetDescriptor;
  /** The k components found (fewer when the data have fewer independent directions). */
  k: number;
  singularValues: Float64Array;
  explainedVarianceRatio: Float64Array;
  totalVariance: number;
  /** k × outY × outX: each component as a pattern on the binned, cropped detector; NaN where a bin was left out. */
  components: Float64Array;
  /** k × scanY × scanX: each position's coordinate along each component. */
  loadings: Float64Array;
  /** outY × outX: the mean feature vector taken out; NaN where a bin was left out. */
  meanPattern: Float64Array;
  /** What was done, defaults included. */
  features: { bin: number; crop: { x0: number; y0: number; x1: number; y1: number }; outY: number; outX: number; nFeatures: number;
    binsLeftOut: number; scaling: 'none' | 'sqrt' | 'poisson'; normalize: boolean; badPixels: BadPixelsMode };
  method: { oversample: number; sketch: number; powerIterations: number; seed: number; passes: number; totalVarianceFrom: string };
  badPixels?: { hot: [number, number][]; dead: [number, number][] };
  /** Patterns whose features summed to zero (left as zero vectors). */
  zeroPatterns: number;
  /**
   * Set when this is a preview (PCA of the preview cube): loadings are then qY × qX, one per scan
   * bin of scanBin × scanBin positions, and components are on the cube's detBin-binned detector, binned by features.bin again.
   */
  preview?: { qY: number; qX: number; scanBin: number; detBin: number };
  seconds: number;
}

export interface KmeansRequest extends JobOptions, FeatureOptions {
  dataset: DatasetId;
  /** Clusters wanted (k ≥ 1). */
  clusters: number;
  /** pca (default): each position's coordinates along the first pcaComponents principal components; patterns: the feature vectors themselves, streamed (one pass per iteration). */
  features?: 'pca' | 'patterns';
  /** Each position's coordinates along the first N principal components (default 10). */
  pcaComponents?: number;
  /** patterns: at most this many iterations, each a pass over the data (default 30). */
  maxIterations?: number;
  /** k-means++ starts; the lowest inertia is kept (default 10). */
  restarts?: number;
  /** Seed of the PCA sketch and of the starts (default 0). */
  seed?: number;
  /** Power iterations of the PCA (default 1: the leading subspace is what clustering needs). */
  powerIterations?: number;
  /** A preview from the preview cube alone (no read of the data): labels per scan bin, cluster patterns on the cube's binned detector. */
  preview?: boolean;
  /** lloyd (full iterations, default up to 2²⁰ positions) or mini-batch (Sculley 2010; the default above). */
  algorithm?: 'lloyd' | 'mini-batch';
}

export interface KmeansResult {
  dataset: DatasetId;
  descriptor: DatasetDescriptor;
  k: number;
  /** scanY × scanX: the cluster of each position, 0 … k − 1. */
  labels: Int32Array;
  /** k × f: cluster centres in the feature space (PCA coordinates). */
  centers: Float64Array;
  /** k × detY × detX: the mean pattern of each cluster, at full resolution. */
  clusterPatterns: Float64Array;
  sizes: Int32Array;
  inertia: number;
  iterations: number;
  /** What was done, defaults included. */
  /** kind pca: `components` principal components explaining `explainedVariance`; kind patterns: `components` = the number of features. */
  features: PcaResult['features'] & { kind: 'pca' | 'patterns'; components: number; explainedVariance?: number };
  method: { algorithm: 'lloyd' | 'mini-batch'; restarts: number; seed: number; restartKept: number; pcaPasses: number; passes: number };
  badPixels?: { hot: [number, number][]; dead: [number, number][] };
  /** Set for a preview: labels are qY × qX (scan bins) and cluster patterns pY × pX (the cube's detector bins). */
  preview?: { qY: number; qX: number; pY: number; pX: number; scanBin: number; detBin: number };
  seconds: number;
}

export interface FitRequest extends JobOptions, FeatureOptions {
  dataset: DatasetId;
  /** Regions of the scan whose mean patterns are the references (1 to 16). */
  references: RegionShape[];
  /** Weights constrained to be ≥ 0 (default false). */
  nonnegative?: boolean;
}

export interface FitResult {
  dataset: DatasetId;
  descriptor: DatasetDescriptor;
  /** Number of references. */
  r: number;
  /** r × scanY × scanX: each position's weight of each reference. */
  coefficients: Float64Array;
  /** scanY × scanX: ‖f − Σ c_i r_i‖ / ‖f‖ per position, what no reference explains (NaN where the pattern is all zero). */
  residual: Float64Array;
  /** r × outY × outX: each reference as a pattern on the binned detector (NaN where a bin was left out). */
  references: Float64Array;
  /** Positions in each reference region. */
  counts: number[];
  /** Each reference region, described. */
  regions: string[];
  nonnegative: boolean;
  features: PcaResult['features'];
  badPixels?: { hot: [number, number][]; dead: [number, number][] };
  zeroPatterns: number;
  seconds: number;
}

/** The results each kept request gives. */
export interface SessionResultOf {
  virtualImages: VirtualImagesResult;
  comField: ComFieldResult;
  calibrate: CalibrationResult;
  regionPattern: RegionPatternResult;
  pca: PcaResult;
  kmeans: KmeansResult;
  fit: FitResult;
}

export interface SaveSessionRequest {
  /** The session file (NAME.scanfold.h5); replaced atomically when it exists. */
  path: string;
  /** The kept results to save; default all. */
  keys?: string[];
  /** The app's setup; its `dataset` is the engine's id of the dataset shown (saved as the session's own id). */
  app?: AppSetup;
}

export interface SessionSaved {
  path: string;
  results: number;
  datasets: number;
}

/** Autosave: the same content as saveSession, to the session's recovery file. */
export interface AutosaveRequest {
  /** The session file the work belongs to, or null while it has none. */
  session: string | null;
  keys?: string[];
  app?: AppSetup;
}

/** A recovery file left by a session that did not close cleanly. */
export interface Recoverable {
  recovery: string;
  session: string | null;
  modified: string;
  results: number;
}

export interface OpenSessionRequest {
  path: string;
  /** Where moved data now is: OLD (a recorded path, file name or session dataset id) → NEW path. */
  relink?: Record<string, string>;
  /** Open the data found, for new analyses (default true); false only reads the file. */
  openData?: boolean;
}

export interface SessionDatasetStatus {
  ref: SessionDatasetRef;
  /** found at its path, moved (found elsewhere, same fingerprint), missing, or different (other data where it was). */
  status: 'found' | 'moved' | 'missing' | 'different';
  path: string | null;
  how: string;
  /** The engine's handle when the data was found and opened. */
  opened: OpenedDataset | null;
}

/** A kept result: what made it, and the result itself. */
export interface KeptResult<M extends SessionMethod = SessionMethod> {
  key: string;
  method: M;
  /** The engine's id of its dataset when open, else null (the result is still shown). */
  dataset: DatasetId | null;
  /** The session's id of its dataset. */
  datasetRef: string;
  request: Record<string, unknown>;
  created: string;
  result: SessionResultOf[M];
}

export interface OpenedSession {
  path: string;
  document: SessionDocument;
  datasets: SessionDatasetStatus[];
  results: KeptResult[];
}

/** A kept result's recipe and arrays, without the result. */
export type KeptEntry = Omit<KeptResult, 'result'> & { arrays: { name: string; shape: number[]; dims: string[]; units: string }[] };

/** One array of a kept result, as a file for another program or a report. */
export interface ExportRequest {
  /** The kept result (its key) and one of its arrays (optional when it has one). */
  key: string;
  array?: string;
  /** png: a figure (colour map, colour bar, scale bar when calibrated); tiff: float32 values; npy: the array as stored; csv: 1-D or 2-D. */
  format: 'png' | 'tiff' | 'npy' | 'csv';
  /** One image of a 3-D stack (a component, a cluster, a detector). */
  index?: number;
  /** png only. */
  colormap?: string;
  scaling?: { kind: 'linear' } | { kind: 'log' } | { kind: 'gamma'; gamma: number };
  limits?: [number, number];
  /** png only: the scale bar's calibration when the session holds none (or another is wanted): nm per scan step for images of the scan, mrad per detector pixel for patterns. */
  scanStepNm?: number;
  mradPerPixel?: number;
}

export interface ExportedFile {
  bytes: Uint8Array;
  /** A file name to suggest: KEY-ARRAY[-INDEX].EXT. */
  fileName: string;
  mediaType: string;
  /** What was written, in one line (shape; for a figure its colour map, limits and scale bar). */
  description: string;
}

export type ServiceEvent =
  /** A job started, progressed, finished, failed or was cancelled. */
  | { kind: 'job'; job: JobInfo & { jobId: string } }
  | { kind: 'dataset'; dataset: DatasetId; version: number; change: 'opened' | 'first-pass' | 'closed' }
  /** Rows row0 … row0 + nRows − 1 of an image still being computed (the first pass's bright field, tile by tile). */
  | { kind: 'image-rows'; dataset: DatasetId; label: string; row0: number; nRows: number; scanY: number; scanX: number; values: Float64Array };

/** The engine service. Long requests run as jobs (events of kind 'job'); the promise settles with the result. */
export interface ScanfoldService {
  /** Describe a source, or list an HDF5 file's datasets, without opening it for analysis. */
  inspect(spec: SourceSpec): Promise<Inspection>;
  /** Open a dataset: validated, kept open in the workers until closed. */
  open(spec: SourceSpec): Promise<OpenedDataset>;
  /** Release everything the dataset holds (preview cube included). */
  close(dataset: DatasetId): Promise<void>;
  datasets(): Promise<OpenedDataset[]>;

  firstPass(req: FirstPassRequest): Promise<FirstPassResult>;
  virtualImages(req: VirtualImagesRequest): Promise<VirtualImagesResult>;
  comField(req: ComFieldRequest): Promise<ComFieldResult>;
  calibrate(req: CalibrationRequest): Promise<CalibrationResult>;
  regionPattern(req: RegionPatternRequest): Promise<RegionPatternResult>;
  /** PCA of all patterns by randomized SVD, streamed (q + 1 passes over the data). */
  pca(req: PcaRequest): Promise<PcaResult>;
  /** k-means of all patterns on their first principal components, and each cluster's mean pattern. */
  kmeans(req: KmeansRequest): Promise<KmeansResult>;
  /** Every pattern fitted as a least-squares combination of the mean patterns of chosen regions. */
  fit(req: FitRequest): Promise<FitResult>;

  /** Write the kept results, the datasets they and the app use, and the app's setup to a session file. */
  saveSession(req: SaveSessionRequest): Promise<SessionSaved>;
  /** Read a session file: its results become the kept results (shown even with the data absent); the data found is opened. */
  openSession(req: OpenSessionRequest): Promise<OpenedSession>;
  /** Write the work to its recovery file (beside the session, or in Scanfold's state folder); a saveSession to the session removes it. */
  autosave(req: AutosaveRequest): Promise<{ recovery: string }>;
  /** Recovery files still there (newer than their session file): work a crash would otherwise have lost. */
  recoverable(): Promise<Recoverable[]>;
  /** Remove a recovery file the engine wrote (false for any other path). */
  discardRecovery(recovery: string): Promise<boolean>;
  /** One array of a kept result as PNG, TIFF, .npy or CSV bytes (the front end saves them). */
  exportResult(req: ExportRequest): Promise<ExportedFile>;
  /** The kept results' recipes. */
  sessionEntries(): Promise<KeptEntry[]>;
  /** Forget every kept result (a new session). */
  forgetSession(): Promise<void>;
  /**
   * Forget the kept results under these keys (e.g. the image of a detector deleted beyond undo),
   * freeing their memory; returns the keys that were kept. Keys not kept are ignored.
   */
  forgetResults(keys: string[]): Promise<string[]>;

  /** Fast requests, outside the job queue. */
  patternAt(req: PatternAtRequest): Promise<PatternAtResult>;
  previewImages(req: PreviewImagesRequest): Promise<PreviewImagesResult>;

  /**
   * Every file the engine has read data from (datasets, external raw data, virtual sources),
   * with its device and inode: nothing a front end writes may replace one of them.
   */
  filesRead(): Promise<{ path: string; dev: number; ino: number }[]>;

  /** The Activity list. */
  jobs(): Promise<(JobInfo & { jobId: string })[]>;
  /** Cancel a running job; false when there is none by that id. */
  cancel(jobId: string): Promise<boolean>;

  /** Subscribe to events; returns the function that unsubscribes. */
  onEvent(listener: (e: ServiceEvent) => void): () => void;
  /** Stop every job and worker. */
  shutdown(): Promise<void>;
}

/** The request methods, for generic transports and the validator. */
export const SERVICE_METHODS = [
  'inspect', 'open', 'close', 'datasets', 'firstPass', 'virtualImages', 'comField', 'calibrate',
  'regionPattern', 'pca', 'kmeans', 'fit', 'saveSession', 'openSession', 'autosave', 'recoverable', 'discardRecovery', 'exportResult', 'sessionEntries', 'forgetSession', 'forgetResults', 'patternAt', 'previewImages', 'filesRead', 'jobs', 'cancel', 'shutdown',
] as const satisfies readonly (keyof ScanfoldService)[];

export type ServiceMethod = (typeof SERVICE_METHODS)[number];
