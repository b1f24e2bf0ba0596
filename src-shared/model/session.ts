// The session file's document: which datasets an analysis used, the recipe of every result it
// holds (the service request that made it, so it can be replayed on other data), and the app's
// setup (detectors, regions, calibration, view settings). Plain JSON; the contract's validator
// (src-shared/contract/validate.ts, validateSessionDocument) checks it on every load.
import type { DType } from './dtype';
import type { Shape4D, SourceFormat, SourceSpec } from './dataset';

/** What the root's `format` attribute says. */
export const SESSION_FORMAT = 'scanfold-session';
/** The version this build writes; older ones are upgraded on load, newer ones refused. */
export const SESSION_FORMAT_VERSION = 1;
/** The file name ending the app and the command line suggest. */
export const SESSION_SUFFIX = '.scanfold.h5';

/** A dataset the session used, with everything needed to find it again and tell it is the same data. */
export interface SessionDatasetRef {
  /** Named by the session ("data-1", …); results refer to it. */
  id: string;
  /** The file's name, and the dataset's path inside an HDF5 file. */
  name: string;
  /** Where it was when saved. */
  absolutePath: string;
  /** From the session file's folder, so a folder copied whole (session beside its data) still opens. */
  relativePath: string;
  /** Reopens the data (its path is absolutePath). */
  spec: SourceSpec;
  format: SourceFormat;
  datasetPath: string | null;
  shape: Shape4D;
  dtype: DType;
  byteSize: number;
  /** Identifies the data wherever it moves (src-main/io/fingerprint.ts). */
  fingerprint: string;
}

/** The service requests whose results a session keeps (and `session apply` replays). */
export const SESSION_METHODS = ['virtualImages', 'comField', 'calibrate', 'regionPattern', 'pca', 'kmeans', 'fit'] as const;
export type SessionMethod = (typeof SESSION_METHODS)[number];

/** One result of the session and its recipe. */
export interface SessionEntry {
  /** Unique in the session; the result's group is /results/KEY. */
  key: string;
  method: SessionMethod;
  /** A SessionDatasetRef id. */
  dataset: string;
  /** The request as sent, without its dataset and job id: the recipe. */
  request: Record<string, unknown>;
  created: string;
  scanfoldVersion: string;
  /** The input's fingerprint when the result was computed. */
  fingerprint: string;
}

/** A detector or region as the app lists it. */
export interface SetupItem<Shape> {
  id: string;
  name: string;
  colour: string;
  visible: boolean;
  shape: Shape;
}

/** The app's setup: what the user drew and chose; the app checks it further against its own lists (colour maps). */
export interface AppSetup {
  /** The session dataset the app shows. */
  dataset: string | null;
  detectors: SetupItem<unknown>[];
  regions: SetupItem<unknown>[];
  calibration: Record<string, number>;
  analyses: Record<string, unknown>;
  shows: { scan: Record<string, unknown>; pattern: Record<string, unknown> };
  activeDetector: string | null;
  scanView: Record<string, unknown>;
  patternView: Record<string, unknown>;
}

export interface SessionDocument {
  format: typeof SESSION_FORMAT;
  formatVersion: number;
  scanfoldVersion: string;
  created: string;
  modified: string;
  datasets: SessionDatasetRef[];
  /** In the order they were made: replaying them in this order rebuilds the session. */
  entries: SessionEntry[];
  /** The app's setup, or null for a session built by the command line. */
  app: AppSetup | null;
}
