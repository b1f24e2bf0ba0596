// The one validator of the service's requests. The CLI's flags, IPC and WebSocket messages and
// (later) session files all arrive here, so a bad request gets the same message whatever its
// way in: "<method>: <field>: <what was wrong>; expected <what>".
import * as z from 'zod';
import { DTYPES } from '../model/dtype';
import { InputError } from '../model/errors';
import type { ServiceMethod } from './service';
import { SESSION_FORMAT, SESSION_FORMAT_VERSION, SESSION_METHODS, type SessionDocument } from '../model/session';

const finite = z.number().finite();
const positive = finite.positive();
const whole = z.number().int().nonnegative();
const positiveWhole = z.number().int().positive();
const numbers = z.custom<ArrayLike<number>>((v) => Array.isArray(v) || (ArrayBuffer.isView(v) && !(v instanceof DataView)), { message: 'expected an array of numbers' });
const point = z.tuple([finite, finite]);

/** Axis-aligned rectangle, corners inclusive, the smaller corner first. */
const rectangle = z.object({ x0: finite, y0: finite, x1: finite, y1: finite }).refine((r) => r.x0 <= r.x1 && r.y0 <= r.y1, {
  message: 'the corners are swapped; expected x0 ≤ x1 and y0 ≤ y1',
});

const sourceSpec = z.object({
  path: z.string().min(1, 'expected a file path'),
  format: z.enum(['hdf5', 'npy', 'raw']).optional(),
  datasetPath: z.string().min(1).optional(),
  scanShape: z.tuple([positiveWhole, positiveWhole]).optional(),
  raw: z.object({
    shape: z.object({ scanY: positiveWhole, scanX: positiveWhole, detY: positiveWhole, detX: positiveWhole }),
    dtype: z.enum(DTYPES as unknown as [string, ...string[]]),
    byteOrder: z.enum(['little', 'big']),
    offset: whole,
    trailer: whole.optional(),
  }).strict().optional(),
}).strict();

const maskShape = z.object({ kind: z.literal('mask'), width: positiveWhole, height: positiveWhole, values: numbers })
  .refine((m) => m.values.length === m.width * m.height, { message: 'values must hold width × height numbers' });

const detectorShape = z.discriminatedUnion('kind', [
  z.object({ kind: z.literal('disk'), cx: finite, cy: finite, r: positive }),
  z.object({ kind: z.literal('annulus'), cx: finite, cy: finite, rInner: finite.nonnegative(), rOuter: positive }),
  z.object({ kind: z.literal('rectangle'), x0: finite, y0: finite, x1: finite, y1: finite }),
  z.object({ kind: z.literal('polygon'), points: z.array(point).min(3, 'a polygon needs at least 3 points') }),
  z.object({ kind: z.literal('mask'), width: positiveWhole, height: positiveWhole, values: numbers }),
]);

const detectorSpec = z.object({ shape: detectorShape, weighted: z.boolean().optional(), label: z.string().optional() }).strict();

const regionShape = z.union([
  z.object({ kind: z.literal('rectangle'), x0: finite, y0: finite, x1: finite, y1: finite }),
  z.object({ kind: z.literal('polygon'), points: z.array(point).min(3, 'a polygon needs at least 3 points') }),
  maskShape,
]);

const dataset = z.string().min(1, 'expected a dataset id from open');
/** A session key: a plain name that is also an HDF5 group name. */
const sessionKey = z.string().regex(/^[A-Za-z0-9][A-Za-z0-9_.-]{0,63}$/, 'expected a name of letters, digits, _ . - (at most 64, not starting with . _ -)');
const job = { jobId: z.string().min(1).max(200).optional(), keepAs: sessionKey.optional() };
const badPixels = z.enum(['auto', 'none']).optional();

/** How patterns become feature vectors: the same fields for pca, kmeans and fit. */
const featureFields = {
  bin: z.custom<1 | 2 | 4 | 8 | 'auto'>((v) => [1, 2, 4, 8, 'auto'].includes(v as never), { message: 'expected 1, 2, 4, 8 or auto' }).optional(),
  crop: rectangle.optional(),
  scaling: z.enum(['none', 'sqrt', 'poisson']).optional(),
  normalize: z.boolean().optional(),
  badPixels,
};
const setupItem = <S extends z.ZodType>(shape: S) => z.object({ id: z.string().min(1), name: z.string(), colour: z.string(), visible: z.boolean(), shape }).strict();
const viewSettings = z.object({
  colormap: z.string().min(1),
  scaling: z.union([
    z.object({ kind: z.literal('linear') }).strict(),
    z.object({ kind: z.literal('log') }).strict(),
    z.object({ kind: z.literal('gamma'), gamma: positive }).strict(),
  ]),
  limits: z.tuple([finite, finite]).nullable(),
  limitsFor: z.string().nullable().optional(),
}).strict();
const shows = z.object({ kind: z.string().min(1) }).catchall(z.union([z.string(), finite]));

/** The app's setup as a session file holds it (model/session.ts, AppSetup). */
const appSetup = z.object({
  dataset: sessionKey.nullable(),
  detectors: z.array(setupItem(detectorShape)),
  regions: z.array(setupItem(regionShape)),
  calibration: z.object({ energyKeV: positive.optional(), convergenceMrad: positive.optional(), latticeSpacingAngstrom: positive.optional(), scanStepNm: positive.optional() }).strict(),
  analyses: z.object({
    pcaComponents: positiveWhole,
    kmeansClusters: positiveWhole,
    descanRegion: z.string().nullable(),
    fieldRotation: z.union([z.literal('auto'), z.object({ degrees: finite, flip: z.boolean() }).strict()]),
  }).strict(),
  shows: z.object({ scan: shows, pattern: shows }).strict(),
  activeDetector: z.string().nullable(),
  scanView: viewSettings,
  patternView: viewSettings,
}).strict();

const scalingAgrees = (r: { normalize?: boolean; scaling?: string }) => !(r.normalize && r.scaling === 'poisson');
const scalingMessage = { message: 'normalize and Poisson scaling exclude each other (Poisson weighting needs counts)' };

const SCHEMAS: Record<ServiceMethod, z.ZodType> = {
  inspect: sourceSpec,
  open: sourceSpec,
  close: dataset,
  datasets: z.undefined(),
  firstPass: z.object({ dataset, ...job }).strict(),
  virtualImages: z.object({ dataset, detectors: z.array(detectorSpec).min(1, 'expected at least one detector'), badPixels, ...job }).strict(),
  comField: z.object({
    dataset,
    maskDisk: z.object({ cx: finite, cy: finite, r: positive }).strict().optional(),
    threshold: finite.optional(),
    descan: z.union([
      z.object({ kind: z.enum(['none', 'mean', 'plane']) }).strict(),
      z.object({ kind: z.literal('reference'), region: rectangle }).strict(),
    ]).optional(),
    rotation: z.union([z.literal('auto'), z.object({ degrees: finite, flip: z.boolean() }).strict()]).optional(),
    badPixels,
    calibration: z.object({ mradPerPixel: positive, energyKeV: positive, scanStepNm: positive }).strict().optional(),
    ...job,
  }).strict(),
  calibrate: z.object({
    dataset,
    energyKeV: positive.optional(),
    convergenceMrad: positive.optional(),
    latticeSpacingAngstrom: positive.optional(),
    braggDistancePx: positive.optional(),
    scanStepNm: positive.optional(),
    ...job,
  }).strict()
    .refine((r) => r.convergenceMrad === undefined || r.latticeSpacingAngstrom === undefined, { message: 'give at most one of convergenceMrad or latticeSpacingAngstrom' })
    .refine((r) => r.braggDistancePx === undefined || r.latticeSpacingAngstrom !== undefined, { message: 'braggDistancePx goes with latticeSpacingAngstrom' }),
  regionPattern: z.object({ dataset, region: regionShape, ...job }).strict(),
  pca: z.object({
    dataset,
    components: positiveWhole,
    ...featureFields,
    oversample: whole.optional(),
    powerIterations: z.number().int().min(0).max(20, 'at most 20 power iterations (each reads the data once more)').optional(),
    seed: whole.optional(),
    preview: z.boolean().optional(),
    passes: z.literal(1, { message: 'expected 1 (the one-pass sketch) or none' }).optional(),
    centre: z.boolean().optional(),
    ...job,
  }).strict().refine(scalingAgrees, scalingMessage),
  kmeans: z.object({
    dataset,
    clusters: positiveWhole,
    ...featureFields,
    pcaComponents: positiveWhole.optional(),
    features: z.enum(['pca', 'patterns']).optional(),
    maxIterations: z.number().int().min(1).max(1000).optional(),
    restarts: z.number().int().min(1).max(1000).optional(),
    seed: whole.optional(),
    preview: z.boolean().optional(),
    algorithm: z.enum(['lloyd', 'mini-batch']).optional(),
    powerIterations: z.number().int().min(0).max(20, 'at most 20 power iterations (each reads the data once more)').optional(),
    ...job,
  }).strict().refine(scalingAgrees, scalingMessage),
  fit: z.object({
    dataset,
    references: z.array(regionShape).min(1, 'expected at least one reference region').max(16, 'at most 16 references'),
    nonnegative: z.boolean().optional(),
    ...featureFields,
    ...job,
  }).strict().refine(scalingAgrees, scalingMessage),
  patternAt: z.object({ dataset, y: whole, x: whole }).strict(),
  previewImages: z.object({ dataset, detectors: z.array(detectorSpec).min(1, 'expected at least one detector') }).strict(),
  filesRead: z.undefined(),
  saveSession: z.object({
    path: z.string().min(1, 'expected a file path'),
    keys: z.array(sessionKey).optional(),
    app: appSetup.optional(),
  }).strict(),
  openSession: z.object({
    path: z.string().min(1, 'expected a file path'),
    relink: z.record(z.string().min(1), z.string().min(1)).optional(),
    openData: z.boolean().optional(),
  }).strict(),
  autosave: z.object({
    session: z.string().min(1, 'expected a file path').nullable(),
    keys: z.array(sessionKey).optional(),
    app: appSetup.optional(),
  }).strict(),
  recoverable: z.undefined(),
  exportResult: z.object({
    key: sessionKey,
    array: z.string().min(1).optional(),
    format: z.enum(['png', 'tiff', 'npy', 'csv']),
    index: whole.optional(),
    colormap: z.string().min(1).optional(),
    scaling: viewSettings.shape.scaling.optional(),
    limits: z.tuple([finite, finite]).refine((l) => l[0] < l[1], { message: 'expected the lower limit below the upper' }).optional(),
    scanStepNm: positive.optional(),
    mradPerPixel: positive.optional(),
  }).strict(),
  discardRecovery: z.string().min(1, 'expected a recovery file path'),
  sessionEntries: z.undefined(),
  forgetSession: z.undefined(),
  forgetResults: z.array(sessionKey).max(10000, 'expected at most 10000 keys at once'),
  jobs: z.undefined(),
  cancel: z.string().min(1),
  shutdown: z.undefined(),
};

/** Check a request's argument; throws an InputError in the one message style. Returns it typed as given. */
export function validateRequest<T>(method: ServiceMethod, arg: T): T {
  const schema = SCHEMAS[method];
  if (!schema) throw new InputError(`${String(method)}: not a request this service knows`, 'bad-request');
  const r = schema.safeParse(arg);
  if (r.success) return arg;
  const issue = r.error.issues[0];
  const where = issue.path.length ? issue.path.map(String).join('.') : 'request';
  const more = r.error.issues.length > 1 ? ` (and ${r.error.issues.length - 1} more problem${r.error.issues.length > 2 ? 's' : ''})` : '';
  throw new InputError(`${method}: ${where}: ${describeIssue(issue, valueAt(arg, issue.path))}${more}`, 'bad-request');
}

function valueAt(v: unknown, path: PropertyKey[]): unknown {
  for (const k of path) v = v !== null && typeof v === 'object' ? (v as Record<PropertyKey, unknown>)[k] : undefined;
  return v;
}

function shown(v: unknown): string {
  if (v === undefined) return 'nothing';
  if (typeof v === 'number' || typeof v === 'boolean' || v === null) return String(v);
  if (typeof v === 'string') return JSON.stringify(v.length > 60 ? v.slice(0, 60) + '…' : v);
  return Array.isArray(v) ? `a list of ${v.length}` : `a ${typeof v}`;
}

/** One issue in our words: what was found; what was expected. */
function describeIssue(issue: z.core.$ZodIssue, value: unknown): string {
  switch (issue.code) {
    case 'invalid_type':
      if (issue.expected === 'int') return `got ${shown(value)}; expected a whole number`;
      return `got ${shown(value)}; expected ${issue.expected === 'undefined' ? 'no argument' : `a ${issue.expected}`}`;
    case 'too_small':
      if (issue.origin === 'array') return `got ${shown(value)}; expected at least ${issue.minimum}`;
      if (issue.origin === 'string') return `got ${shown(value)}; expected a non-empty text`;
      return `got ${shown(value)}; expected a number ${issue.inclusive ? '≥' : '>'} ${issue.minimum}`;
    case 'too_big':
      return `got ${shown(value)}; expected at most ${issue.maximum}`;
    case 'unrecognized_keys':
      return `unknown field${issue.keys.length > 1 ? 's' : ''} ${issue.keys.map((k) => JSON.stringify(k)).join(', ')}; expected only the fields this request takes`;
    case 'invalid_value':
      return `got ${shown(value)}; expected one of ${issue.values.map((x) => JSON.stringify(x)).join(', ')}`;
    case 'invalid_union':
      return `got ${shown(value)}; expected one of the forms this field takes${value && typeof value === 'object' && 'kind' in value ? ` (kind ${shown((value as { kind: unknown }).kind)} is not known or its fields are wrong)` : ''}`;
    default:
      return issue.message;
  }
}

const sessionDocument = z.object({
  format: z.literal(SESSION_FORMAT),
  formatVersion: positiveWhole,
  scanfoldVersion: z.string(),
  created: z.string(),
  modified: z.string(),
  datasets: z.array(z.object({
    id: sessionKey,
    name: z.string(),
    absolutePath: z.string().min(1),
    relativePath: z.string(),
    spec: sourceSpec,
    format: z.enum(['hdf5', 'npy', 'raw']),
    datasetPath: z.string().nullable(),
    shape: z.object({ scanY: positiveWhole, scanX: positiveWhole, detY: positiveWhole, detX: positiveWhole }).strict(),
    dtype: z.enum(DTYPES as unknown as [string, ...string[]]),
    byteSize: whole,
    fingerprint: z.string().min(1),
  }).strict()),
  entries: z.array(z.object({
    key: sessionKey,
    method: z.enum(SESSION_METHODS),
    dataset: sessionKey,
    request: z.record(z.string(), z.unknown()),
    created: z.string(),
    scanfoldVersion: z.string(),
    fingerprint: z.string(),
  }).strict()),
  app: appSetup.nullable(),
}).strict();

/**
 * Upgrades from each older format version to the next, applied in turn on load. Version 1 is
 * the first: there is nothing to upgrade yet, and a file claiming a version below 1 is refused.
 */
const UPGRADES: Record<number, (doc: Record<string, unknown>) => Record<string, unknown>> = {};

/**
 * Check a session document read from a file (`what` names it in messages): upgraded from an
 * older format version, refused when newer than this build, every recipe checked as the request
 * it replays. Throws an InputError ('bad-session' or 'newer-session').
 */
export function validateSessionDocument(raw: unknown, what: string): SessionDocument {
  if (raw === null || typeof raw !== 'object' || Array.isArray(raw)) throw new InputError(`${what}: the session document is not an object; the file is damaged or not a session`, 'bad-session');
  let doc = raw as Record<string, unknown>;
  const version = doc.formatVersion;
  if (typeof version !== 'number' || !Number.isInteger(version) || version < 1) {
    throw new InputError(`${what}: format version ${JSON.stringify(version)}; expected a whole number from 1 to ${SESSION_FORMAT_VERSION}`, 'bad-session');
  }
  if (version > SESSION_FORMAT_VERSION) {
    throw new InputError(`${what}: written in session format ${version} by Scanfold ${String(doc.scanfoldVersion)}; this Scanfold reads formats 1 to ${SESSION_FORMAT_VERSION}. Open it with that version or newer`, 'newer-session');
  }
  for (let v = version; v < SESSION_FORMAT_VERSION; v++) {
    const up = UPGRADES[v];
    if (!up) throw new InputError(`${what}: format version ${v} cannot be upgraded by this Scanfold`, 'bad-session');
    doc = { ...up(doc), formatVersion: v + 1 };
  }
  const r = sessionDocument.safeParse(doc);
  if (!r.success) {
    const issue = r.error.issues[0];
    const where = issue.path.length ? issue.path.map(String).join('.') : 'document';
    throw new InputError(`${what}: ${where}: ${describeIssue(issue, valueAt(doc, issue.path))}`, 'bad-session');
  }
  const out = doc as unknown as SessionDocument;
  const ids = new Set<string>();
  for (const d of out.datasets) {
    if (ids.has(d.id)) throw new InputError(`${what}: dataset id ${JSON.stringify(d.id)} appears twice`, 'bad-session');
    ids.add(d.id);
  }
  const keys = new Set<string>();
  for (const e of out.entries) {
    if (keys.has(e.key)) throw new InputError(`${what}: result ${JSON.stringify(e.key)} appears twice`, 'bad-session');
    keys.add(e.key);
    if (!ids.has(e.dataset)) throw new InputError(`${what}: result ${JSON.stringify(e.key)} names dataset ${JSON.stringify(e.dataset)}, which the session does not list`, 'bad-session');
    try {
      validateRequest(e.method, { ...e.request, dataset: e.dataset });
    } catch (err) {
      throw new InputError(`${what}: the recipe of result ${JSON.stringify(e.key)}: ${(err as Error).message}`, 'bad-session');
    }
  }
  if (out.app?.dataset != null && !ids.has(out.app.dataset)) throw new InputError(`${what}: app.dataset names ${JSON.stringify(out.app.dataset)}, which the session does not list`, 'bad-session');
  return out;
}
