import * as fs from 'node:fs';
import * as nodePath from 'node:path';
import type { DatasetDescriptor, Hdf5DatasetInfo, Hdf5DirectHint, Shape4D, SourceSpec } from '../../src-shared/model/dataset';
import { DTYPE_BYTES, DTYPES, isDType, typedView, type ByteOrder, type DType, type NumericArray } from '../../src-shared/model/dtype';
import { InputError } from '../../src-shared/model/errors';
import { fingerprint } from './fingerprint';
import { directLayout, fingerprintPositions, openHdf5Direct, plainDataset, rowAddress, type DirectLayout } from './hdf5-direct';
import { availableFilterNames, briefHdf5Error, filterName, getH5, isFilterAvailable, withFileOpenLog, type H5Runtime } from './h5wasm-module';
import { checkPatternRequest, checkRowRequest, type ReaderMemory, type TileSource } from './tile-source';
import { checkInputFile, errnoText, openInputFile, physicalPath, readFullyAt } from './input-file';
import { hdf5SignatureOffset } from './hdf5-signature';
import { scanShapeFor3D, validateShape } from './validate';
import { fmtBytes } from '../../src-shared/model/bytes';

/**
 * Above this a tile is read in several hyperslabs: every byte of a slice passes through
 * h5wasm's heap, which is capped at 2 GiB per thread and never shrinks.
 */
export const DEFAULT_MAX_SLICE_BYTES = 512 * 2 ** 20;

/** rowAlignment is capped so that one aligned group of rows still fits in one slice. */
const MAX_ALIGNMENT_BYTES = DEFAULT_MAX_SLICE_BYTES;

export interface Hdf5ReadOptions {
  /** Largest hyperslab read in one call, in bytes; smaller values exist for tests of the splitting. */
  maxSliceBytes?: number;
  /**
   * What the reader may hold in this worker (the engine's budget share). A dataset whose
   * chunks need more to decompress is refused at open, before any chunk is inflated.
   */
  memoryPerWorkerBytes?: number;
  /** Describe the file through the HDF5 library even where it is read here (for tests comparing the two). */
  throughLibrary?: boolean;
}

type H5File = InstanceType<H5Runtime['h5wasm']['File']>;
type H5Metadata = ReturnType<H5Runtime['Module']['get_dataset_metadata']>;
type H5Filter = ReturnType<H5Runtime['Module']['get_dataset_filters']>[number];

interface DatasetFacts {
  path: string;
  shape: number[] | null;
  /** NumPy-style name for numeric types, the HDF5 class otherwise. */
  dtype: string;
  numeric: boolean;
  byteOrder: ByteOrder;
  chunks: number[] | null;
  filters: H5Filter[];
  /** For a virtual dataset: where each mapped block comes from. */
  virtualSources: { file_name: string; dset_name: string }[];
}

/** Every numeric dataset in the file (soft and external links are not followed), with whether it can be opened. */
export async function listHdf5Datasets(path: string): Promise<Hdf5DatasetInfo[]> {
  const file = checkHdf5File(path);
  const rt = await getH5();
  const h5 = openH5File(rt, file);
  try {
    return listDatasets(rt, h5);
  } finally {
    h5.close();
  }
}

/** Open one 3-D or 4-D numeric dataset of an HDF5 file as a TileSource. */
export async function openHdf5(spec: SourceSpec, options: Hdf5ReadOptions = {}): Promise<TileSource> {
  const file = checkHdf5File(spec.path);
  const plain = options.throughLibrary ? null : openPlain(file, spec);
  if (plain) return plain;
  const rt = await getH5();
  const h5 = openH5File(rt, file);
  try {
    const datasetPath = spec.datasetPath ? normaliseDatasetPath(spec.datasetPath) : chooseOnlyCandidate(rt, h5, file);
    const what = `${file}:${datasetPath}`;
    const kind = entityKind(rt, h5, datasetPath);
    if (kind !== 'dataset') {
      const found = kind === 'missing' ? 'nothing' : `a ${kind}`;
      throw new InputError(`${what}: found ${found} at this path; expected a dataset. ${candidateSummary(listDatasets(rt, h5))}`, 'not-a-dataset');
    }
    let facts: DatasetFacts;
    try {
      facts = datasetFacts(rt, h5, datasetPath);
    } catch (e) {
      throw new InputError(`${what}: the HDF5 library could not describe the dataset (${briefHdf5Error(e)}); expected a readable dataset`, 'bad-input');
    }
    const storedShape = facts.shape ?? [];
    if (!isDType(facts.dtype)) {
      throw new InputError(
        `${what}: data type ${facts.dtype} is not supported; expected one of ${DTYPES.join(', ')} (little- or big-endian)`,
        'bad-dtype');
    }
    const dtype = facts.dtype;
    if (storedShape.length !== 3 && storedShape.length !== 4) {
      throw new InputError(
        `${what}: the dataset is ${storedShape.length}-D with shape (${storedShape.join(', ')}); ` +
        'expected 4-D (scan_y, scan_x, det_y, det_x) or 3-D (positions, det_y, det_x) with a scan shape',
        'bad-rank');
    }
    const rank = storedShape.length as 3 | 4;
    const shape = to4D(storedShape, spec.scanShape, what);
    const elementBytes = DTYPE_BYTES[dtype];
    validateShape(shape, elementBytes, what);
    for (const f of facts.filters) {
      if (!isFilterAvailable(f.id)) {
        throw new InputError(
          `${what}: the data is compressed with the HDF5 filter '${filterName(f.id, f.name)}' (filter id ${f.id}), which this build cannot decode; ` +
          `expected data stored uncompressed or with one of: ${availableFilterNames().join(', ')}`,
          'missing-filter');
      }
    }
    const byteSize = shape.scanY * shape.scanX * shape.detY * shape.detX * elementBytes;
    const chunkWorkBytes = checkChunkSize(facts, elementBytes, what, options.memoryPerWorkerBytes);
    // HDF5 fills the blocks of a missing virtual source with zeros without a word: check the mapping first.
    const sourceFiles = [file, ...checkVirtualSources(rt, file, facts.virtualSources, what, new Set([`${file}:${datasetPath}`]), 0)];
    const source = new Hdf5TileSource(rt, h5, {
      file, datasetPath, rank, shape, dtype, chunks: facts.chunks, maxSliceBytes: options.maxSliceBytes ?? DEFAULT_MAX_SLICE_BYTES,
    }, chunkWorkBytes);
    // Unfiltered little-endian data of whole rows per chunk: read straight from the file.
    if (facts.byteOrder === 'little' && facts.virtualSources.length === 0 && facts.filters.length === 0) {
      source.useDirectLayout(directLayout(file, datasetPath, storedShape, elementBytes, shape.scanX * shape.detY * shape.detX));
    }
    // readPiece already turns a failed read (a missing or irregular external file) into a message.
    const sampled = withFileOpenLog(() => source.samplePatterns());
    if (sampled.error !== undefined) throw sampled.error;
    // Files HDF5 opened to read the samples: external raw-data files.
    for (const o of sampled.opens) if (!o.failed && !sourceFiles.includes(o.path)) sourceFiles.push(o.path);
    const descriptor: DatasetDescriptor = {
      format: 'hdf5',
      path: file,
      datasetPath,
      shape,
      storedShape,
      dtype,
      byteSize,
      fingerprint: fingerprint({ format: 'hdf5', datasetPath, shape: storedShape, dtype }, sampled.result!),
      layout: {
        kind: 'hdf5',
        rank,
        chunks: facts.chunks,
        filters: facts.filters.map((f) => filterName(f.id, f.name)),
        byteOrder: facts.byteOrder,
      },
      spec: {
        ...spec,
        path: file,
        format: 'hdf5',
        datasetPath,
        ...(rank === 3 ? { scanShape: [shape.scanY, shape.scanX] as [number, number] } : {}),
      },
      sourceFiles,
      attributes: smallAttributes(h5, datasetPath),
    };
    source.descriptor = descriptor;
    const hint = source.directHint();
    if (hint) descriptor.spec = { ...descriptor.spec, hdf5Direct: hint };
    return source;
  } catch (e) {
    h5.close();
    throw e;
  }
}

/**
 * A plain dataset (see plainDataset) opened without the HDF5 library: the descriptor the
 * library path would give, and rows read straight from the file. Null: the library opens it.
 */
function openPlain(file: string, spec: SourceSpec): TileSource | null {
  const plain = plainDataset(file, spec.datasetPath ? normaliseDatasetPath(spec.datasetPath) : undefined);
  if (!plain) return null;
  const { datasetPath, storedShape, dtype } = plain;
  const what = `${file}:${datasetPath}`;
  const rank = storedShape.length as 3 | 4;
  const shape = to4D(storedShape, spec.scanShape, what);
  const elementBytes = DTYPE_BYTES[dtype];
  validateShape(shape, elementBytes, what);
  const layout = plain.layout(elementBytes, shape.scanX * shape.detY * shape.detX);
  if (!layout) return null;
  const byteSize = shape.scanY * shape.scanX * shape.detY * shape.detX * elementBytes;
  // The fingerprint's samples, the patterns the library path takes.
  const patternBytes = shape.detY * shape.detX * elementBytes;
  const rowBytes = shape.scanX * patternBytes;
  const f = openInputFile(file, 'an HDF5 file');
  let samples: Uint8Array[];
  let st: fs.Stats;
  try {
    st = fs.fstatSync(f.fd);
    samples = fingerprintPositions(shape.scanY, shape.scanX).map((p) => {
      const b = new Uint8Array(patternBytes);
      readFullyAt(f.fd, b, rowAddress(layout, Math.floor(p / shape.scanX), rowBytes) + (p % shape.scanX) * patternBytes, what);
      return b;
    });
  } finally {
    fs.closeSync(f.fd);
  }
  const descriptor: Omit<DatasetDescriptor, 'spec'> = {
    format: 'hdf5', path: file, datasetPath, shape, storedShape, dtype, byteSize,
    fingerprint: fingerprint({ format: 'hdf5', datasetPath, shape: storedShape, dtype }, samples),
    layout: { kind: 'hdf5', rank, chunks: plain.chunks, filters: [], byteOrder: 'little' },
    sourceFiles: [file],
    attributes: plain.attributes,
  };
  const hint: Hdf5DirectHint = { layout, descriptor, size: st.size, mtimeMs: st.mtimeMs };
  return openHdf5Direct({
    ...spec, path: file, format: 'hdf5', datasetPath,
    ...(rank === 3 ? { scanShape: [shape.scanY, shape.scanX] as [number, number] } : {}),
    hdf5Direct: hint,
  });
}

interface SourceGeometry {
  file: string;
  datasetPath: string;
  rank: 3 | 4;
  shape: Shape4D;
  dtype: DType;
  chunks: number[] | null;
  maxSliceBytes: number;
}

/** One hyperslab of the dataset and where its elements go in the tile. */
interface Piece {
  offset: number[];
  count: number[];
  /** Element index in dest. */
  destStart: number;
}

class Hdf5TileSource implements TileSource {
  descriptor!: DatasetDescriptor;
  readonly rowAlignment: number;
  private h5: H5File | null;
  private readonly elementBytes: number;
  private readonly patternElements: number;
  private readonly rowElements: number;

  /** Two copies of a tile (h5wasm's heap and kernel memory), plus h5wasm itself and room to inflate a chunk; one copy when read directly. */
  memory: ReaderMemory;

  constructor(private readonly rt: H5Runtime, h5: H5File, private readonly g: SourceGeometry, chunkWorkBytes: number) {
    this.memory = { tileCopies: 2, fixedBytes: H5WASM_BASE_BYTES + chunkWorkBytes };
    this.h5 = h5;
    this.elementBytes = DTYPE_BYTES[g.dtype];
    this.patternElements = g.shape.detY * g.shape.detX;
    this.rowElements = g.shape.scanX * this.patternElements;
    this.rowAlignment = rowAlignmentFor(g.rank, g.chunks, g.shape, this.rowElements * this.elementBytes);
  }

  readRows(row0: number, nRows: number, dest: NumericArray): void {
    const { file, shape, dtype } = this.g;
    if (this.h5 === null) throw new Error(`readRows on ${file}: the source is closed`);
    checkRowRequest(file, shape.scanY, this.rowElements, dtype, row0, nRows, dest);
    if (this.direct) {
      this.readDirect(row0, nRows, dest);
      return;
    }
    for (const piece of this.plan(row0, nRows)) this.readPiece(piece, dest);
  }

  /** Where the rows lie in the file (see hdf5-direct.ts), and the file opened for reading them; null: through the library. */
  private direct: { layout: DirectLayout; fd: number } | null = null;

  /**
   * Read rows straight from the file when the layout allows, after checking that patterns of
   * the first, middle and last rows read the same both ways (any difference: keep the library's reads).
   */
  useDirectLayout(layout: DirectLayout | null): void {
    if (!layout) return;
    let fd: number;
    try {
      fd = fs.openSync(this.g.file, fs.constants.O_RDONLY | (fs.constants.O_NONBLOCK ?? 0));
    } catch {
      return;
    }
    this.direct = { layout, fd };
    const { scanY } = this.g.shape;
    try {
      // The first and last pattern of the first, middle and last rows: each row's address and
      // the patterns' order within it (whole rows through the library took ~0.15 s on 8 MiB rows).
      const { scanX } = this.g.shape;
      const rowBytes = this.rowElements * this.elementBytes;
      const patternBytes = this.patternElements * this.elementBytes;
      for (const row of [...new Set([0, Math.floor(scanY / 2), scanY - 1])]) {
        for (const x of [...new Set([0, scanX - 1])]) {
          const a = new Uint8Array(patternBytes);
          const b = typedView(this.g.dtype, new ArrayBuffer(patternBytes), 0, this.patternElements);
          readFullyAt(fd, a, rowAddress(layout, row, rowBytes) + x * patternBytes, `${this.g.file}:${this.g.datasetPath}`);
          const p = row * scanX + x;
          this.readPiece(this.pieceForPositions(p, p + 1, p), b);
          if (!Buffer.from(a.buffer).equals(Buffer.from(b.buffer))) throw new Error('differs');
        }
      }
      // Rows now go straight from the file into the caller's memory: one copy of a tile.
      this.memory = { ...this.memory, tileCopies: 1 };
    } catch {
      fs.closeSync(fd);
      this.direct = null;
    }
  }

  /** The layout found for direct reads, with the descriptor, for other workers (see SourceSpec.hdf5Direct). */
  directHint(): Hdf5DirectHint | null {
    if (!this.direct) return null;
    const st = fs.fstatSync(this.direct.fd);
    const { spec: _spec, ...descriptor } = this.descriptor;
    void _spec;
    return { layout: this.direct.layout, descriptor, size: st.size, mtimeMs: st.mtimeMs };
  }

  private readDirect(row0: number, nRows: number, dest: NumericArray): void {
    const { layout, fd } = this.direct!;
    const rowBytes = this.rowElements * this.elementBytes;
    const bytes = new Uint8Array(dest.buffer, dest.byteOffset, nRows * rowBytes);
    const what = `${this.g.file}:${this.g.datasetPath}`;
    if (layout.kind === 'contiguous') {
      readFullyAt(fd, bytes, layout.address + row0 * rowBytes, what);
      return;
    }
    for (let r = row0; r < row0 + nRows;) {
      const c = Math.floor(r / layout.rowsPerChunk);
      const end = Math.min(row0 + nRows, (c + 1) * layout.rowsPerChunk);
      readFullyAt(fd, bytes.subarray((r - row0) * rowBytes, (end - row0) * rowBytes), layout.chunkAddress[c] + (r - c * layout.rowsPerChunk) * rowBytes, what);
      r = end;
    }
  }

  readPattern(y: number, x: number, dest: NumericArray): void {
    const { file, shape, dtype } = this.g;
    if (this.h5 === null) throw new Error(`readPattern on ${file}: the source is closed`);
    checkPatternRequest(file, shape, dtype, y, x, dest);
    const p = y * shape.scanX + x;
    this.readPiece(this.pieceForPositions(p, p + 1, p), dest);
  }

  /** Patterns at the first, middle and last position, for the fingerprint. */
  samplePatterns(): Uint8Array[] {
    const { scanY, scanX } = this.g.shape;
    return fingerprintPositions(scanY, scanX).map((p) => {
      const pattern = typedView(this.g.dtype, new ArrayBuffer(this.patternElements * this.elementBytes), 0, this.patternElements);
      this.readPiece(this.pieceForPositions(p, p + 1, p), pattern);
      return new Uint8Array(pattern.buffer, pattern.byteOffset, pattern.byteLength);
    });
  }

  close(): void {
    if (this.h5 === null) return;
    const h5 = this.h5;
    this.h5 = null;
    h5.close();
    if (this.direct) { fs.closeSync(this.direct.fd); this.direct = null; }
  }

  /**
   * Hyperslabs for rows [row0, row0 + nRows): whole rows while a slice stays under the cap,
   * cut at absolute multiples of the alignment so that each chunk is decompressed once;
   * a single row too large for one slice is cut along the scan into chunk-aligned runs.
   */
  private plan(row0: number, nRows: number): Piece[] {
    const { shape, maxSliceBytes, rank, chunks } = this.g;
    const rowBytes = this.rowElements * this.elementBytes;
    const pieces: Piece[] = [];
    const tileStart = row0 * shape.scanX;
    const end = row0 + nRows;
    if (rowBytes <= maxSliceBytes) {
      let step = Math.floor(maxSliceBytes / rowBytes);
      if (step >= this.rowAlignment) step -= step % this.rowAlignment;
      for (let r = row0; r < end;) {
        const next = Math.min(end, (Math.floor(r / step) + 1) * step);
        pieces.push(this.pieceForPositions(r * shape.scanX, next * shape.scanX, tileStart));
        r = next;
      }
      return pieces;
    }
    const patternBytes = this.patternElements * this.elementBytes;
    let step = Math.max(1, Math.floor(maxSliceBytes / patternBytes));
    // 4-D chunks along scan_x count from each row's start; 3-D chunks along positions from the dataset's start.
    const chunkAlong = chunks ? (rank === 4 ? chunks[1] : chunks[0]) : 1;
    if (step >= chunkAlong) step -= step % chunkAlong;
    for (let r = row0; r < end; r++) {
      const rowStart = r * shape.scanX;
      const origin = rank === 4 ? rowStart : 0;
      for (let p = rowStart; p < rowStart + shape.scanX;) {
        const next = Math.min(rowStart + shape.scanX, origin + (Math.floor((p - origin) / step) + 1) * step);
        pieces.push(this.pieceForPositions(p, next, tileStart));
        p = next;
      }
    }
    return pieces;
  }

  /** The hyperslab for positions [p0, p1), which must be whole rows or lie within one row for 4-D data. */
  private pieceForPositions(p0: number, p1: number, tileStart: number): Piece {
    const { shape, rank } = this.g;
    const destStart = (p0 - tileStart) * this.patternElements;
    if (rank === 3) return { offset: [p0, 0, 0], count: [p1 - p0, shape.detY, shape.detX], destStart };
    const r0 = Math.floor(p0 / shape.scanX), c0 = p0 % shape.scanX;
    if (c0 === 0 && p1 % shape.scanX === 0) {
      return { offset: [r0, 0, 0, 0], count: [(p1 - p0) / shape.scanX, shape.scanX, shape.detY, shape.detX], destStart };
    }
    if (Math.floor((p1 - 1) / shape.scanX) !== r0) throw new Error(`pieceForPositions: [${p0}, ${p1}) spans rows partially`);
    return { offset: [r0, c0, 0, 0], count: [1, p1 - p0, shape.detY, shape.detX], destStart };
  }

  /**
   * Read one hyperslab straight into a heap buffer of our own and copy it into dest once
   * (Dataset.slice would copy the heap into a fresh array first, doubling the traffic).
   */
  private readPiece(piece: Piece, dest: NumericArray): void {
    const { Module } = this.rt;
    const h5 = this.h5;
    if (h5 === null) throw new Error(`readRows on ${this.g.file}: the source is closed`);
    const dims = this.g.rank === 4
      ? [this.g.shape.scanY, this.g.shape.scanX, this.g.shape.detY, this.g.shape.detX]
      : [this.g.shape.scanY * this.g.shape.scanX, this.g.shape.detY, this.g.shape.detX];
    // HDF5 given an offset past the extent fails with a misleading allocation error; refuse first.
    piece.offset.forEach((o, i) => {
      if (o < 0 || piece.count[i] < 1 || o + piece.count[i] > dims[i]) {
        throw new Error(`readPiece on ${this.g.file}: hyperslab offset ${piece.offset} count ${piece.count} is outside shape ${dims}`);
      }
    });
    const n = piece.count.reduce((a, b) => a * b, 1);
    const nbytes = n * this.elementBytes;
    if (nbytes > Module.MAXIMUM_MEMORY) {
      throw new Error(`readPiece on ${this.g.file}: a ${nbytes}-byte slice exceeds h5wasm's ${Module.MAXIMUM_MEMORY}-byte heap`);
    }
    const ptr = Module._malloc(nbytes);
    if (ptr === 0) throw new Error(`readPiece on ${this.g.file}: h5wasm could not allocate ${nbytes} bytes for a slice`);
    try {
      const read = withFileOpenLog(() => Module.get_dataset_data(h5.file_id, this.g.datasetPath, piece.count.map(BigInt), piece.offset.map(BigInt),
        piece.count.map(() => 1n), BigInt(ptr)));
      if (read.error !== undefined) {
        const what = `${this.g.file}:${this.g.datasetPath}`;
        const missing = read.opens.find((o) => o.failed);
        if (missing) {
          const why = /^E[A-Z]+$/.test(missing.failed!) ? errnoText(missing.failed) : `it is ${missing.failed}, not a regular file`;
          throw new InputError(
            `${what}: the dataset keeps its data in the external file ${missing.path}, which could not be opened (${why}); ` +
            'expected that file to be present and regular (HDF5 looks for external data files relative to the current folder)',
            missing.failed === 'ENOENT' ? 'missing-file' : 'unreadable');
        }
        const text = read.error instanceof Error ? read.error.message : String(read.error);
        if (/enlarge memory|out of memory|memory allocation failed|can't allocate|resource unavailable/i.test(text)) {
          throw new InputError(
            `${what}: HDF5 ran out of memory reading positions at offset (${piece.offset.join(', ')}) (${briefHdf5Error(read.error)}); ` +
            `expected chunks that fit in the HDF5 library's ${fmtBytes(Module.MAXIMUM_MEMORY)} heap`, 'too-large');
        }
        throw new InputError(
          `${what}: reading positions at offset (${piece.offset.join(', ')}) failed: ${briefHdf5Error(read.error)}; ` +
          'expected an intact HDF5 file (was it truncated or changed while open?)',
          'bad-input');
      }
      // After the read: the heap may have grown, which replaces Module.HEAPU8's buffer.
      dest.set(typedView(this.g.dtype, Module.HEAPU8.buffer, ptr, n), piece.destStart);
    } finally {
      Module._free(ptr);
    }
  }
}

/** The dataset's numeric and text attributes of up to 16 values (calibration, labels); others are skipped. */
function smallAttributes(h5: H5File, datasetPath: string): Record<string, number | number[] | string> {
  const out: Record<string, number | number[] | string> = {};
  try {
    const ds = h5.get(datasetPath) as { attrs?: Record<string, { json_value?: unknown }> } | null;
    for (const [name, attr] of Object.entries(ds?.attrs ?? {})) {
      let v: unknown;
      try { v = attr.json_value; } catch { continue; }
      if (typeof v === 'number' && Number.isFinite(v)) out[name] = v;
      else if (typeof v === 'string' && v.length <= 500) out[name] = v;
      else if (Array.isArray(v) && v.length <= 16 && v.every((x) => typeof x === 'number' && Number.isFinite(x))) out[name] = v as number[];
    }
  } catch {
    // attributes are a convenience; a file whose attributes cannot be read still opens
  }
  return out;
}

/**
 * What a worker's h5wasm costs before any tile: the module and its initial heap (measured here:
 * about 33 MiB per reading HDF5 worker against 9 MiB for a raw or .npy one).
 */
export const H5WASM_BASE_BYTES = 24 * 2 ** 20;

/** Largest chunk HDF5 can inflate whole inside h5wasm's 2 GiB heap, with room for the tile and the compressed chunk. */
export const MAX_FILTERED_CHUNK_BYTES = 768 * 2 ** 20;

/**
 * Memory HDF5 needs to decompress one chunk (the inflated chunk and the filter's growing output
 * buffer), or 0 for unfiltered data, which HDF5 reads straight into the selection. A chunk that
 * cannot fit in h5wasm's heap at all is refused here, before any read, rather than failing
 * with an allocation error halfway through a pass.
 */
function checkChunkSize(facts: DatasetFacts, elementBytes: number, what: string, allowance: number | undefined): number {
  if (!facts.chunks || facts.filters.length === 0) return 0;
  const chunkBytes = facts.chunks.reduce((a, b) => a * b, 1) * elementBytes;
  const inflates = `each compressed chunk (${facts.chunks.join('×')} elements) inflates to ${fmtBytes(chunkBytes)}, which HDF5 must hold whole in memory`;
  if (chunkBytes > MAX_FILTERED_CHUNK_BYTES) {
    throw new InputError(
      `${what}: ${inflates}, more than the ${fmtBytes(MAX_FILTERED_CHUNK_BYTES)} this build's HDF5 library can decompress at once; ` +
      'expected smaller chunks (rewrite the file with chunks of a few scan rows, e.g. with h5repack)', 'too-large');
  }
  // Inflating needs the chunk and the filter's output buffer, and the tile read from it is copied twice.
  const work = 2 * chunkBytes;
  const need = H5WASM_BASE_BYTES + work + 2 * chunkBytes;
  if (allowance !== undefined && need > allowance) {
    throw new InputError(
      `${what}: ${inflates}; reading it takes about ${fmtBytes(need)} per worker, but each worker's share of the memory budget is ${fmtBytes(allowance)}; ` +
      `expected a budget that gives each worker at least ${fmtBytes(need)} (raise the budget, use fewer workers, or rewrite the file with smaller chunks)`, 'too-large');
  }
  return work;
}

/**
 * The files a virtual dataset maps its blocks from, each checked: present, a readable regular
 * file, holding the named dataset (itself checked if it is virtual too). HDF5 would fill a
 * missing source with zeros silently. Returns the absolute paths of every source file.
 */
function checkVirtualSources(rt: H5Runtime, vdsFile: string, sources: { file_name: string; dset_name: string }[], what: string, seen: Set<string>, depth: number): string[] {
  const files: string[] = [];
  for (const src of sources) {
    if (/%b/.test(src.file_name)) {
      throw new InputError(`${what}: is a virtual dataset whose source file names follow the pattern '${src.file_name}'; expected explicit source files (printf-style patterns are not supported)`, 'unsupported');
    }
    let file: string;
    if (src.file_name === '.') {
      file = vdsFile;
    } else {
      // HDF5 looks beside the virtual dataset's file first, then in the current folder.
      // Joined as text without folding "..": the system resolves it through symlinks, as HDF5 does.
      const candidates = nodePath.isAbsolute(src.file_name)
        ? [src.file_name]
        : [nodePath.dirname(vdsFile) + nodePath.sep + src.file_name, physicalPath(src.file_name)];
      const found = candidates.find((c) => fs.existsSync(c));
      if (!found) {
        throw new InputError(
          `${what}: is a virtual dataset whose source file ${src.file_name} (dataset ${src.dset_name}) is missing (looked for ${[...new Set(candidates)].join(' and ')}); ` +
          'HDF5 would read that part as zeros. Expected every source file of the virtual dataset to be present', 'missing-file');
      }
      file = checkHdf5File(found);
    }
    if (!files.includes(file)) files.push(file);
    const key = `${file}:${src.dset_name}`;
    if (seen.has(key)) continue;
    seen.add(key);
    const h5 = file === vdsFile ? null : openH5File(rt, file);
    try {
      const fileId = h5 ? h5.file_id : null;
      const kind = fileId === null ? 'dataset' : entityKindById(rt, fileId, src.dset_name);
      if (kind !== 'dataset') {
        throw new InputError(`${what}: is a virtual dataset whose source ${file}:${src.dset_name} is missing (found ${kind === 'missing' ? 'nothing' : `a ${kind}`}); HDF5 would read that part as zeros. Expected the source dataset to exist`, 'missing-file');
      }
      if (h5 && depth < 8) {
        const inner = datasetFacts(rt, h5, src.dset_name).virtualSources;
        for (const f of checkVirtualSources(rt, file, inner, `${file}:${src.dset_name}`, seen, depth + 1)) if (!files.includes(f)) files.push(f);
      }
    } finally {
      h5?.close();
    }
  }
  return files;
}

/**
 * Scan rows per chunk-aligned group: for 4-D the chunk extent along scan_y; for 3-D the
 * fewest whole rows that hold whole chunks along positions, lcm(chunk, scan_x) / scan_x.
 * Capped so that one group fits in one slice; when the cap bites for 3-D data, the rows one
 * chunk spans keep most chunks whole.
 */
export function rowAlignmentFor(rank: 3 | 4, chunks: number[] | null, shape: Shape4D, rowBytes: number): number {
  if (!chunks) return 1;
  const capRows = Math.max(1, Math.floor(MAX_ALIGNMENT_BYTES / rowBytes));
  let rows = rank === 4 ? chunks[0] : chunks[0] / gcd(chunks[0], shape.scanX);
  rows = Math.min(rows, shape.scanY);
  if (rows > capRows) rows = rank === 3 ? Math.min(capRows, Math.ceil(chunks[0] / shape.scanX)) : capRows;
  return Math.max(1, rows);
}

function gcd(a: number, b: number): number {
  while (b) [a, b] = [b, a % b];
  return a;
}

function to4D(stored: number[], scanShape: [number, number] | undefined, what: string): Shape4D {
  if (stored.length === 4) {
    const [scanY, scanX, detY, detX] = stored;
    if (scanShape && (scanShape[0] !== scanY || scanShape[1] !== scanX)) {
      throw new InputError(
        `${what}: the dataset is 4-D with scan shape ${scanY}×${scanX}, but scan shape ${scanShape[0]}×${scanShape[1]} was asked for; expected them to agree (or give none)`,
        'bad-shape');
    }
    return { scanY, scanX, detY, detX };
  }
  const [positions, detY, detX] = stored;
  const [scanY, scanX] = scanShapeFor3D(positions, scanShape, what);
  return { scanY, scanX, detY, detX };
}

/** The file as an absolute path, after checking it is a readable regular file with the HDF5 signature. */
function checkHdf5File(path: string): string {
  return checkInputFile(path, 'an HDF5 file', (f) => {
    if (hdf5SignatureOffset(f.fd, f.size) === null) {
      throw new InputError(`${f.path}: not an HDF5 file (no HDF5 signature at byte 0 or after a user block); expected an HDF5 file`, 'bad-input');
    }
  }).path;
}

function openH5File(rt: H5Runtime, file: string): H5File {
  try {
    return new rt.h5wasm.File(file, 'r');
  } catch (e) {
    throw new InputError(`${file}: the HDF5 library could not open it (${briefHdf5Error(e)}); expected an intact HDF5 file`, 'bad-input');
  }
}

function normaliseDatasetPath(p: string): string {
  const trimmed = p.trim().replace(/\/+$/, '');
  return trimmed.startsWith('/') ? trimmed : '/' + trimmed;
}

type EntityKind = 'dataset' | 'group' | 'soft link to nothing' | 'external link' | 'named datatype' | 'missing';

function entityKind(rt: H5Runtime, h5: H5File, path: string): EntityKind {
  return entityKindById(rt, h5.file_id, path);
}

function entityKindById(rt: H5Runtime, fileId: bigint, path: string): EntityKind {
  const { Module } = rt;
  let type: number;
  try {
    type = Module.get_type(fileId, path);
  } catch {
    return 'missing';
  }
  if (type === Module.H5G_DATASET) return 'dataset';
  if (type === Module.H5G_GROUP) return 'group';
  if (type === Module.H5G_LINK) return 'soft link to nothing';
  if (type === Module.H5G_UDLINK) return 'external link';
  if (type === Module.H5G_TYPE) return 'named datatype';
  return 'missing';
}

function datasetFacts(rt: H5Runtime, h5: H5File, path: string): DatasetFacts {
  const { Module } = rt;
  const meta: H5Metadata = Module.get_dataset_metadata(h5.file_id, path);
  const filters: H5Filter[] = Module.get_dataset_filters(h5.file_id, path);
  const C = Module.H5T_class_t;
  const numeric = meta.type === C.H5T_INTEGER.value || meta.type === C.H5T_FLOAT.value;
  return {
    path,
    shape: meta.shape,
    dtype: typeName(rt, meta),
    numeric,
    byteOrder: meta.littleEndian || meta.size === 1 ? 'little' : 'big',
    chunks: meta.chunks,
    filters,
    virtualSources: meta.virtual_sources ?? [],
  };
}

/**
 * NumPy-style name of a dataset's type for messages and listings. h5py stores complex
 * numbers as a compound of two floats named 'r' and 'i' (complex64: two float32,
 * complex128: two float64), and booleans as an integer enum {FALSE: 0, TRUE: 1}; those get
 * h5py's names, other compounds list their fields.
 */
function typeName(rt: H5Runtime, meta: H5Metadata): string {
  const C = rt.Module.H5T_class_t;
  switch (meta.type) {
    case C.H5T_INTEGER.value: return `${meta.signed ? 'int' : 'uint'}${meta.size * 8}`;
    case C.H5T_FLOAT.value: return `float${meta.size * 8}`;
    case C.H5T_STRING.value: return 'string';
    case C.H5T_COMPOUND.value: {
      const members = meta.compound_type?.members ?? [];
      const [r, i] = members;
      if (members.length === 2 && r.name === 'r' && i.name === 'i' &&
          r.type === C.H5T_FLOAT.value && i.type === C.H5T_FLOAT.value &&
          r.size === i.size && (r.size === 4 || r.size === 8)) {
        return `complex${r.size * 16}`;
      }
      return members.length ? `compound (fields ${members.map((m) => m.name).join(', ')})` : 'compound';
    }
    case C.H5T_ENUM.value: {
      const e = meta.enum_type;
      const names = e ? Object.keys(e.members) : [];
      if (e && e.type === C.H5T_INTEGER.value && names.length === 2 && e.members.FALSE === 0 && e.members.TRUE === 1) return 'bool';
      return 'enum';
    }
    case C.H5T_VLEN.value: return 'variable-length';
    case C.H5T_ARRAY.value: return 'array';
    case C.H5T_REFERENCE.value: return 'reference';
    case C.H5T_BITFIELD.value: return 'bitfield';
    case C.H5T_OPAQUE.value: return 'opaque';
    case C.H5T_TIME.value: return 'time';
    default: return `HDF5 type class ${meta.type}`;
  }
}

/**
 * Walk with HDF5's own link visitor (it does not traverse soft or external links and visits
 * each group once, so hard-link cycles cannot loop), then skip every link that is not hard.
 */
function listDatasets(rt: H5Runtime, h5: H5File): Hdf5DatasetInfo[] {
  const { Module } = rt;
  const out: Hdf5DatasetInfo[] = [];
  const names: string[] = Module.get_names(h5.file_id, '/', true);
  for (const name of names) {
    const path = '/' + name;
    let facts: DatasetFacts;
    try {
      if (Module.get_symbolic_link(h5.file_id, path) != null) continue;
      const ext = Module.get_external_link(h5.file_id, path) as { filename?: string } | null;
      if (ext && ext.filename !== undefined) continue;
      if (Module.get_type(h5.file_id, path) !== Module.H5G_DATASET) continue;
      facts = datasetFacts(rt, h5, path);
    } catch {
      // An entry HDF5 cannot describe is left out rather than spoiling the whole listing.
      continue;
    }
    if (!facts.numeric || facts.shape === null) continue;
    out.push(datasetInfo(facts));
  }
  return out;
}

function datasetInfo(f: DatasetFacts): Hdf5DatasetInfo {
  const shape = f.shape ?? [];
  const filters = f.filters.map((x) => filterName(x.id, x.name));
  const info: Hdf5DatasetInfo = { path: f.path, shape, dtype: f.dtype, chunks: f.chunks, filters, candidate: false };
  const rankOk = shape.length === 3 || shape.length === 4;
  const dtypeOk = isDType(f.dtype);
  info.candidate = rankOk && dtypeOk;
  const notes: string[] = [];
  if (!rankOk) notes.push(`${shape.length === 0 ? 'a single value' : `${shape.length}-D`}; expected 4-D (scan_y, scan_x, det_y, det_x) or 3-D (positions, det_y, det_x)`);
  if (!dtypeOk) notes.push(`data type ${f.dtype} is not supported`);
  if (info.candidate) {
    if (shape.length === 3) notes.push(`3-D: needs a scan shape whose product is ${shape[0]}`);
    if (shape.some((d) => d === 0)) notes.push('empty: an axis has length 0');
    const missing = f.filters.filter((x) => !isFilterAvailable(x.id));
    for (const x of missing) notes.push(`compressed with '${filterName(x.id, x.name)}' (filter id ${x.id}), which cannot be decoded here`);
  }
  if (notes.length) info.note = notes.join('; ');
  return info;
}

function candidateSummary(list: Hdf5DatasetInfo[]): string {
  const candidates = list.filter((d) => d.candidate);
  if (candidates.length === 0) return 'The file has no 3-D or 4-D numeric dataset of a supported type.';
  return `Datasets that can be opened: ${candidates.map((d) => `${d.path} (${d.shape.join('×')} ${d.dtype})`).join(', ')}.`;
}

function chooseOnlyCandidate(rt: H5Runtime, h5: H5File, file: string): string {
  const list = listDatasets(rt, h5);
  const candidates = list.filter((d) => d.candidate);
  if (candidates.length === 1) return candidates[0].path;
  if (candidates.length === 0) {
    throw new InputError(`${file}: no dataset path was given and ${candidateSummary(list).replace(/^The file/, 'the file')}`, 'not-a-dataset');
  }
  throw new InputError(
    `${file}: the file holds ${candidates.length} datasets that could be opened; expected a dataset path naming one of: ` +
    candidates.map((d) => `${d.path} (${d.shape.join('×')} ${d.dtype})`).join(', '),
    'not-a-dataset');
}
