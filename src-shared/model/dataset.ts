import type { ByteOrder, DType } from './dtype';

/** Shape of a 4D-STEM dataset: a scan of probe positions, a diffraction pattern at each. */
export interface Shape4D {
  scanY: number;
  scanX: number;
  detY: number;
  detX: number;
}

export type SourceFormat = 'hdf5' | 'npy' | 'raw';

/** The user's description of a raw binary stack. */
export interface RawLayoutSpec {
  shape: Shape4D;
  dtype: DType;
  byteOrder: ByteOrder;
  /** Bytes to skip at the start of the file. */
  offset: number;
  /**
   * Bytes after the data that are not part of it (a footer); absent: none. A file longer than
   * offset + data + trailer is refused: a wrong shape, dtype or offset reads patterns out of step.
   */
  trailer?: number;
}

/** What the user asks to open. Serializable: workers receive it and open their own reader. */
export interface SourceSpec {
  path: string;
  /** Detected from the file's content and name when omitted. */
  format?: SourceFormat;
  /** HDF5: the dataset inside the file. */
  datasetPath?: string;
  /** For 3-D data (positions, det_y, det_x): the scan shape. */
  scanShape?: [number, number];
  /** Raw binary: required. */
  raw?: RawLayoutSpec;
  /**
   * Set by the engine, never by a client (the validator refuses it): where an uncompressed HDF5
   * dataset's rows lie and its descriptor, found by the first worker that opened it, so the
   * others read the rows straight from the file without starting the HDF5 library.
   */
  hdf5Direct?: Hdf5DirectHint;
  /**
   * Set by the engine's workers, never by a client (the validator refuses it): the file's device,
   * inode, size and modification time when it was opened. A read under a spec holding it fails if
   * the file has changed since, so a dataset never mixes two versions of a file.
   */
  fileState?: string;
}

export interface Hdf5DirectHint {
  layout: { kind: 'contiguous'; address: number } | { kind: 'chunked'; rowsPerChunk: number; chunkAddress: number[] };
  descriptor: Omit<DatasetDescriptor, 'spec'>;
  /** The file's size and modification time when the layout was read: another file, another layout. */
  size: number;
  mtimeMs: number;
}

/** How the bytes are stored, for the readers. */
export type StorageLayout =
  | { kind: 'contiguous'; dataOffset: number; byteOrder: ByteOrder }
  | { kind: 'hdf5'; rank: 3 | 4; chunks: number[] | null; filters: string[]; byteOrder: ByteOrder };

/** A validated dataset, as every reader returns it. */
export interface DatasetDescriptor {
  format: SourceFormat;
  /** Absolute path of the file. */
  path: string;
  /** HDF5 dataset path, or null. */
  datasetPath: string | null;
  shape: Shape4D;
  /** Shape as stored (3-D HDF5 / 4-D), for display. */
  storedShape: number[];
  dtype: DType;
  /** Size of the data itself in bytes (shape × element size). */
  byteSize: number;
  /** Identifies the data without hashing all of it: sampled bytes + shape + dtype. */
  fingerprint: string;
  layout: StorageLayout;
  /** The spec that reopens exactly this dataset. */
  spec: SourceSpec;
  /**
   * Every file the data is read from (absolute paths): the file itself and, for HDF5, the
   * source files of a virtual dataset and the external files seen holding raw data. Nothing
   * Scanfold writes may land on any of them.
   */
  sourceFiles: string[];
  /** Small numeric and text attributes stored with the dataset (HDF5), e.g. beam_energy_kev. */
  attributes?: Record<string, number | number[] | string>;
}

/** One numeric dataset found in an HDF5 file, whether or not it can be opened as 4D-STEM. */
export interface Hdf5DatasetInfo {
  path: string;
  shape: number[];
  dtype: string;
  chunks: number[] | null;
  filters: string[];
  /** True when rank is 3 or 4 with a supported dtype. */
  candidate: boolean;
  /** Why it is not a candidate, or a caveat. */
  note?: string;
}

export const MAX_SAFE_BYTES = 2 ** 53;

export function patternsCount(s: Shape4D): number {
  return s.scanY * s.scanX;
}

export function patternSize(s: Shape4D): number {
  return s.detY * s.detX;
}

/** A spec as a user gives it: without what the engine adds (the HDF5 read hint, the file's version). */
export function userSpec(spec: SourceSpec): SourceSpec {
  const { hdf5Direct: _hint, fileState: _state, ...plain } = spec;
  return plain;
}

/** A dataset's shape in words, for listings and messages. */
export function shapeText(s: Shape4D): string {
  return `${s.scanY}×${s.scanX} positions × ${s.detY}×${s.detX} pixels`;
}
