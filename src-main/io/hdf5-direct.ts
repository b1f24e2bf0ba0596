// Where an uncompressed HDF5 dataset's bytes lie in the file, so whole scan rows can be read with
// one pread each straight into kernel memory instead of through the HDF5 library's heap (which
// reads at a fraction of the speed). Only what is needed is parsed, from the published file
// format (HDF5 File Format Specification, version 3): superblocks 0–3, object headers 1 and 2,
// groups by symbol table (B-tree v1 + local heap) or compact links, the data layout message
// (contiguous; chunked with a version-1 B-tree, single-chunk, implicit or fixed-array index) and
// the filter pipeline (any filter: no direct path). Anything else answers null, and the caller
// reads through the library as before. The caller also checks a few rows both ways.
import fs from 'node:fs';
import type { DatasetDescriptor, Hdf5DirectHint, SourceSpec } from '../../src-shared/model/dataset';
import { DTYPE_BYTES, isDType, type DType } from '../../src-shared/model/dtype';
import { InputError } from '../../src-shared/model/errors';
import { openInputFile, readFullyAt } from './input-file';
import { checkPatternRequest, checkRowRequest, type TileSource } from './tile-source';

export type DirectLayout =
  | { kind: 'contiguous'; address: number }
  /** rowsPerChunk whole scan rows per chunk; chunkAddress[i] holds rows [i·rowsPerChunk, …). */
  | { kind: 'chunked'; rowsPerChunk: number; chunkAddress: number[] };

const SIGNATURE = [0x89, 0x48, 0x44, 0x46, 0x0d, 0x0a, 0x1a, 0x0a];
const UNDEFINED = -1;

/** Reads at HDF5 addresses, which count from the base address (the superblock, after a user block). */
class Reader {
  constructor(readonly fd: number, readonly size: number, readonly base = 0) {}
  bytes(at: number, n: number): Buffer {
    const abs = at + this.base;
    if (at < 0 || abs + n > this.size) throw new Error(`read beyond the file (${abs} + ${n} > ${this.size})`);
    const b = Buffer.alloc(n);
    fs.readSync(this.fd, b, 0, n, abs);
    return b;
  }
}

/** An unsigned little-endian integer of `n` bytes (1 to 8) at `at`; all ones reads as UNDEFINED for n ≥ 4. */
function uint(b: Buffer, at: number, n: number): number {
  if (n === 7 || n === 8) {
    const lo = b.readUInt32LE(at), hi = b.readUIntLE(at + 4, n - 4);
    if (lo === 0xffffffff && hi === 2 ** (8 * (n - 4)) - 1) return UNDEFINED;
    if (hi >= 2 ** 21) throw new Error('address beyond 2^53');
    return hi * 2 ** 32 + lo;
  }
  if (!(n >= 1 && n <= 6)) throw new Error(`an integer of ${n} bytes`);
  const v = b.readUIntLE(at, n);
  return v === 2 ** (8 * n) - 1 && n >= 4 ? UNDEFINED : v;
}

interface Sizes { o: number; l: number; base: number }

/** A header message; `shared`: it holds a reference to a message stored elsewhere (a committed type, a shared message). */
interface Message { type: number; data: Buffer; shared: boolean }

/** The messages of the object header at `addr` (versions 1 and 2), continuation blocks followed. */
function objectMessages(r: Reader, s: Sizes, addr: number): Message[] {
  const out: Message[] = [];
  const head = r.bytes(addr, 16);
  if (head.toString('latin1', 0, 4) === 'OHDR') {
    const flags = head[5];
    let at = 6 + (flags & 0x20 ? 16 : 0) + (flags & 0x10 ? 4 : 0);
    const sizeBytes = 1 << (flags & 3);
    const pre = r.bytes(addr, at + sizeBytes);
    const chunk0 = uint(pre, at, sizeBytes);
    at += sizeBytes;
    const blocks: [number, number][] = [[addr + at, chunk0]];
    for (let i = 0; i < blocks.length; i++) {
      const [start, len] = blocks[i];
      const b = r.bytes(start, len);
      let p = i === 0 ? 0 : 4; // continuation blocks start with "OCHK"
      const end = len - (i === 0 ? 0 : 4); // and end with a checksum (chunk 0's comes after `len`)
      while (p + 4 <= end) {
        const type = b[p], size = b.readUInt16LE(p + 1), mflags = b[p + 3];
        p += 4 + (flags & 0x04 ? 2 : 0);
        if (p + size > b.length) break;
        const data = b.subarray(p, p + size);
        p += size;
        if (type === 0x10) blocks.push([uint(data, 0, s.o), uint(data, s.o, s.l)]);
        else if (type !== 0) out.push({ type, data, shared: (mflags & 0x02) !== 0 });
      }
    }
    return out;
  }
  if (head[0] !== 1) throw new Error(`object header version ${head[0]}`);
  const count = head.readUInt16LE(2);
  const size = head.readUInt32LE(8);
  const blocks: [number, number][] = [[addr + 16, size]];
  for (let i = 0; i < blocks.length && out.length < count + 64; i++) {
    const [start, len] = blocks[i];
    const b = r.bytes(start, len);
    let p = 0;
    while (p + 8 <= len) {
      const type = b.readUInt16LE(p), msize = b.readUInt16LE(p + 2), mflags = b[p + 4];
      const data = b.subarray(p + 8, p + 8 + msize);
      p += 8 + msize;
      p = (p + 7) & ~7;
      if (type === 0x10) blocks.push([uint(data, 0, s.o), uint(data, s.o, s.l)]);
      else if (type !== 0) out.push({ type, data, shared: (mflags & 0x02) !== 0 });
    }
  }
  return out;
}

/** The object header address of `name` in the group whose header is at `addr` (a hard link), or null. */
function lookup(r: Reader, s: Sizes, addr: number, name: string): number | null {
  const found = groupChildren(r, s, objectMessages(r, s, addr)).find((c) => c.name === name);
  return found && found.hard ? found.addr : null;
}

/** Where scan row `row` starts in the file, for rows of `rowBytes` bytes. */
export function rowAddress(layout: DirectLayout, row: number, rowBytes: number): number {
  return layout.kind === 'contiguous' ? layout.address + row * rowBytes
    : layout.chunkAddress[Math.floor(row / layout.rowsPerChunk)] + (row % layout.rowsPerChunk) * rowBytes;
}

/** The scan positions (flat indices) whose patterns a dataset's fingerprint is taken from: the first, middle and last. */
export function fingerprintPositions(scanY: number, scanX: number): number[] {
  const last = scanY * scanX - 1;
  return [...new Set([0, Math.floor(last / 2), last])];
}

/** A file's structure as far as the readers here need it: sizes, the root group, and the base address. */
interface Structure { rel: Reader; s: Sizes; root: number; off: number }

function openStructure(fd: number): Structure | null {
  const r = new Reader(fd, fs.fstatSync(fd).size);
  // The superblock: at 0, 512, 1024, 2048, … (a user block may precede it).
  let sb = -1;
  for (let at = 0; at + 8 <= r.size; at = at === 0 ? 512 : at * 2) {
    const b = r.bytes(at, 8);
    if (SIGNATURE.every((v, i) => b[i] === v)) { sb = at; break; }
  }
  if (sb < 0) return null;
  const head = r.bytes(sb, Math.min(96, r.size - sb));
  const version = head[8];
  let s: Sizes, root: number;
  if (version <= 1) {
    s = { o: head[13], l: head[14], base: 0 };
    let p = version === 0 ? 24 : 28;
    s.base = uint(head, p, s.o);
    p += 4 * s.o; // base, free space, end of file, driver info
    root = uint(head, p + s.o, s.o); // root symbol table entry: name offset, header address
  } else if (version <= 3) {
    s = { o: head[9], l: head[10], base: 0 };
    s.base = uint(head, 12, s.o);
    root = uint(head, 12 + 3 * s.o, s.o);
  } else {
    return null;
  }
  if (![2, 4, 8].includes(s.o) || ![2, 4, 8].includes(s.l)) return null;
  // Addresses count from the base address: 0, or the superblock's own place after a user block.
  if (s.base !== 0 && s.base !== sb) return null;
  return { rel: new Reader(fd, r.size, s.base), s, root, off: s.base };
}

/** The object header address at `datasetPath` (hard links from the root group), or null. */
function walkPath(st: Structure, datasetPath: string): number | null {
  let addr = st.root;
  for (const part of datasetPath.split('/').filter(Boolean)) {
    const next = lookup(st.rel, st.s, addr, part);
    if (next === null || next === UNDEFINED) return null;
    addr = next;
  }
  return addr;
}

/**
 * The direct layout of the dataset at `datasetPath`, given its stored shape and element size:
 * only when its bytes are stored unfiltered, little-endian, and chunks (if any) hold whole scan
 * rows in C order. Null when that does not hold or the file uses structures not read here.
 */
export function directLayout(file: string, datasetPath: string, storedShape: number[], elementBytes: number, rowElements: number): DirectLayout | null {
  return withStructure(file, (st) => {
    const addr = walkPath(st, datasetPath);
    return addr === null ? null : layoutOf(st, objectMessages(st.rel, st.s, addr), storedShape, elementBytes, rowElements);
  });
}

/** `read` on the file's structure; null when the file cannot be opened, is not read here, or `read` throws. */
function withStructure<T>(file: string, read: (st: Structure) => T | null): T | null {
  let fd: number;
  try {
    fd = fs.openSync(file, 'r');
  } catch {
    return null;
  }
  try {
    const st = openStructure(fd);
    return st ? read(st) : null;
  } catch {
    return null;
  } finally {
    fs.closeSync(fd);
  }
}

/** The direct layout from a dataset's header messages (see directLayout); throws on structures not read here. */
function layoutOf(st: Structure, msgs: Message[], storedShape: number[], elementBytes: number, rowElements: number): DirectLayout | null {
  const { rel, s, off } = st;
  if (msgs.some((m) => m.type === 0x07)) return null; // data in external files
  const pipeline = msgs.find((m) => m.type === 0x0b);
  if (pipeline && pipeline.data[1] > 0) return null; // any filter: leave it to the library
  const layout = msgs.find((m) => m.type === 0x08);
  if (!layout) return null;
  const d = layout.data;
  const lv = d[0];
  const rank = storedShape.length;
  const rowBytes = rowElements * elementBytes;
  if (lv === 3 || lv === 4) {
    const cls = d[1];
    if (cls === 1) {
      const address = uint(d, 2, s.o);
      return address === UNDEFINED ? null : { kind: 'contiguous', address: address + off };
    }
    if (cls !== 2) return null;
    let dims: number[];
    let index: { type: number; address: number; p: number };
    if (lv === 3) {
      const dimensionality = d[2];
      const address = uint(d, 3, s.o);
      dims = Array.from({ length: dimensionality }, (_, i) => d.readUInt32LE(3 + s.o + 4 * i));
      index = { type: 0, address, p: 0 };
    } else {
      const flags = d[2];
      const dimensionality = d[3];
      const dimBytes = d[4];
      dims = Array.from({ length: dimensionality }, (_, i) => uint(d, 5 + i * dimBytes, dimBytes));
      let p = 5 + dimensionality * dimBytes;
      const type = d[p++];
      if (type === 1 && flags & 2) p += s.l + 4; // single chunk, filtered: size and mask
      else if (type === 3) p += 1; // fixed array: page bits
      else if (type !== 1 && type !== 2) return null;
      index = { type, address: uint(d, p, s.o), p };
      void flags;
    }
    // Chunk dims are (rank dims…, element size). Whole rows in C order only.
    if (dims.length !== rank + 1 || dims[rank] !== elementBytes) return null;
    const trailing = rank === 4 ? [1, 2, 3] : [1, 2];
    if (trailing.some((i) => dims[i] !== storedShape[i])) return null;
    const rowsLead = dims[0];
    let rowsPerChunk: number;
    if (rank === 4) rowsPerChunk = rowsLead;
    else {
      const scanX = rowElements / (storedShape[1] * storedShape[2]);
      if (rowsLead % scanX !== 0) return null;
      rowsPerChunk = rowsLead / scanX;
    }
    const nChunks = Math.ceil(storedShape[0] / dims[0]);
    const chunkBytes = rowsPerChunk * rowBytes;
    let chunkAddress: number[];
    if (index.type === 0) chunkAddress = chunkBTree(rel, s, index.address, rank, dims[0], nChunks);
    else if (index.type === 1) chunkAddress = nChunks === 1 ? [index.address] : [];
    else if (index.type === 2) chunkAddress = Array.from({ length: nChunks }, (_, i) => index.address + i * chunkBytes);
    else chunkAddress = fixedArray(rel, s, index.address, nChunks);
    if (chunkAddress.length !== nChunks || chunkAddress.some((a) => a === UNDEFINED || a < 0)) return null;
    return { kind: 'chunked', rowsPerChunk, chunkAddress: chunkAddress.map((a) => a + off) };
  }
  return null;
}

/** Chunk addresses by index along the first dimension, from a version-1 B-tree of chunks (node type 1). */
function chunkBTree(r: Reader, s: Sizes, root: number, rank: number, lead: number, nChunks: number): number[] {
  const out: number[] = new Array(nChunks).fill(UNDEFINED);
  const keyBytes = 8 + 8 * (rank + 1);
  const walk = (node: number, depth: number) => {
    if (depth > 32) throw new Error('chunk B-tree too deep');
    const h = r.bytes(node, 8 + 2 * s.o);
    if (h.toString('latin1', 0, 4) !== 'TREE' || h[4] !== 1) throw new Error('chunk B-tree signature');
    const level = h[5], used = h.readUInt16LE(6);
    const body = r.bytes(node + 8 + 2 * s.o, (used + 1) * keyBytes + used * s.o);
    for (let i = 0; i < used; i++) {
      const k = i * (keyBytes + s.o);
      const child = uint(body, k + keyBytes, s.o);
      if (level > 0) { walk(child, depth + 1); continue; }
      const filterMask = body.readUInt32LE(k + 4);
      if (filterMask !== 0) throw new Error('filtered chunk');
      // The chunk's offset along each dimension; only the first may be non-zero for whole rows.
      const first = uint(body, k + 8, 8);
      for (let dIdx = 1; dIdx < rank; dIdx++) if (uint(body, k + 8 + 8 * dIdx, 8) !== 0) throw new Error('chunk offset in a trailing dimension');
      if (first % lead !== 0 || first / lead >= nChunks) throw new Error('chunk offset');
      out[first / lead] = child;
    }
  };
  walk(root, 0);
  return out;
}

/** Chunk addresses from a fixed-array index (header "FAHD", one unpaged data block "FADB" of unfiltered entries). */
function fixedArray(r: Reader, s: Sizes, header: number, nChunks: number): number[] {
  const h = r.bytes(header, 8 + s.l + s.o);
  if (h.toString('latin1', 0, 4) !== 'FAHD' || h[5] !== 0) throw new Error('fixed array header');
  const entryBytes = h[6], pageBits = h[7];
  const count = uint(h, 8, s.l);
  if (count !== nChunks || entryBytes !== s.o || count > 2 ** pageBits) throw new Error('fixed array shape');
  const block = uint(h, 8 + s.l, s.o);
  const b = r.bytes(block, 6 + s.o + count * entryBytes);
  if (b.toString('latin1', 0, 4) !== 'FADB') throw new Error('fixed array data block');
  return Array.from({ length: count }, (_, i) => uint(b, 6 + s.o + i * entryBytes, s.o));
}

/**
 * An HDF5 dataset read with the layout another worker found (SourceSpec.hdf5Direct), without the
 * HDF5 library: the file must still have the size and modification time it had then.
 */
export function openHdf5Direct(spec: SourceSpec & { hdf5Direct: Hdf5DirectHint }): TileSource {
  const hint = spec.hdf5Direct;
  const f = openInputFile(spec.path, 'an HDF5 file');
  const st = fs.fstatSync(f.fd);
  if (st.size !== hint.size || st.mtimeMs !== hint.mtimeMs) {
    fs.closeSync(f.fd);
    throw new InputError(`${f.path}: the file changed while it was open (size or modification time); expected it unchanged during the analysis`, 'bad-input');
  }
  const d: DatasetDescriptor = { ...hint.descriptor, spec };
  const { scanX, detY, detX } = d.shape;
  const elementBytes = DTYPE_BYTES[d.dtype];
  const rowBytes = scanX * detY * detX * elementBytes;
  const patternBytes = detY * detX * elementBytes;
  const layout = hint.layout;
  const where = (row: number) => rowAddress(layout, row, rowBytes);
  const what = `${d.path}:${d.datasetPath}`;
  let fd: number | null = f.fd;
  return {
    descriptor: d,
    memory: { tileCopies: 1, fixedBytes: 0 },
    rowAlignment: layout.kind === 'chunked' ? layout.rowsPerChunk : 1,
    readRows(row0, nRows, dest) {
      if (fd === null) throw new Error(`readRows on ${d.path}: the source is closed`);
      checkRowRequest(d.path, d.shape.scanY, scanX * detY * detX, d.dtype, row0, nRows, dest);
      const bytes = new Uint8Array(dest.buffer, dest.byteOffset, nRows * rowBytes);
      for (let r = row0; r < row0 + nRows;) {
        const end = layout.kind === 'contiguous' ? row0 + nRows : Math.min(row0 + nRows, (Math.floor(r / layout.rowsPerChunk) + 1) * layout.rowsPerChunk);
        readFullyAt(fd, bytes.subarray((r - row0) * rowBytes, (end - row0) * rowBytes), where(r), what);
        r = end;
      }
    },
    readPattern(y, x, dest) {
      if (fd === null) throw new Error(`readPattern on ${d.path}: the source is closed`);
      checkPatternRequest(d.path, d.shape, d.dtype, y, x, dest);
      readFullyAt(fd, new Uint8Array(dest.buffer, dest.byteOffset, patternBytes), where(y) + x * patternBytes, what);
    },
    close() {
      if (fd !== null) { fs.closeSync(fd); fd = null; }
    },
  };
}

// ---------------------------------------------------------------------------------------------
// Describing a plain dataset without the HDF5 library. Starting the library costs a worker
// ~0.2 s before it reads a byte; for the common file (one uncompressed numeric dataset, a few
// numeric or text attributes) everything the descriptor needs is read here instead. Whatever
// is not read here (dense link or attribute storage, filters, external or virtual data, shared
// or unusual types, several candidate datasets, anything malformed) answers null, and the
// library describes the file, words any message, and checks the direct layout, as before.

/** A dataset as the library would describe it, for the descriptor. */
export interface PlainDataset {
  datasetPath: string;
  storedShape: number[];
  dtype: DType;
  /** Chunk shape, or null for contiguous storage. */
  chunks: number[] | null;
  /** As the library path's smallAttributes: finite numbers, up to 16 of them, and text up to 500 characters. */
  attributes: Record<string, number | number[] | string>;
  /** The direct layout once the 4-D shape is known (see directLayout). */
  layout(elementBytes: number, rowElements: number): DirectLayout | null;
}

class NotReadHere extends Error {}

interface TypeFacts { cls: number; size: number; little: boolean; signed: boolean; ieee: boolean; vlenString: boolean; charset?: number }

function typeFacts(d: Buffer): TypeFacts {
  const cls = d[0] & 0x0f, bits = d[1], size = d.readUInt32LE(4);
  const facts: TypeFacts = { cls, size, little: (bits & 1) === 0, signed: (bits & 0x08) !== 0, ieee: false, vlenString: false };
  if (cls === 0) {
    // fixed-point: bit offset 0 and every bit used
    if (d.readUInt16LE(8) !== 0 || d.readUInt16LE(10) !== 8 * size) throw new NotReadHere('padded integer');
  } else if (cls === 1) {
    if (bits & 0x40) throw new NotReadHere('VAX float');
    const offset = d.readUInt16LE(8), precision = d.readUInt16LE(10);
    const expAt = d[12], expBits = d[13], mantAt = d[14], mantBits = d[15], bias = d.readUInt32LE(16);
    // IEEE 754 binary32 and binary64 (other float layouts are left to the library)
    // sign bit at the top, mantissa normalised with an implied leading 1
    facts.ieee = offset === 0 && d[2] === 8 * size - 1 && ((bits >> 4) & 3) === 2 && ((size === 4 && precision === 32 && expAt === 23 && expBits === 8 && mantAt === 0 && mantBits === 23 && bias === 127)
      || (size === 8 && precision === 64 && expAt === 52 && expBits === 11 && mantAt === 0 && mantBits === 52 && bias === 1023));
  } else if (cls === 9) {
    facts.vlenString = (bits & 0x0f) === 1;
    facts.charset = d[2] & 0x0f;
  }
  return facts;
}

/** NumPy-style name of a numeric type (as the library path names it), or null for any other. */
function numericName(t: TypeFacts): string | null {
  if (t.cls === 0) return `${t.signed ? 'int' : 'uint'}${t.size * 8}`;
  if (t.cls === 1) return `float${t.size * 8}`;
  return null;
}

/** Dimensions of a dataspace message; null for a null dataspace. */
function dataspace(d: Buffer, s: Sizes): number[] | null {
  const version = d[0], rank = d[1];
  if (version === 1) return Array.from({ length: rank }, (_, i) => uint(d, 8 + i * s.l, s.l));
  if (version === 2) {
    if (d[3] === 2) return null;
    return Array.from({ length: rank }, (_, i) => uint(d, 4 + i * s.l, s.l));
  }
  throw new NotReadHere(`dataspace version ${version}`);
}

/** An object in the global heap collection at `addr` (where variable-length strings live). */
function globalHeapObject(r: Reader, s: Sizes, addr: number, index: number): Buffer {
  const head = r.bytes(addr, 8 + s.l);
  if (head.toString('latin1', 0, 4) !== 'GCOL') throw new NotReadHere('global heap signature');
  const size = uint(head, 8, s.l);
  const b = r.bytes(addr, size);
  for (let p = 8 + s.l; p + 8 + s.l <= size;) {
    const i = b.readUInt16LE(p), n = uint(b, p + 8, s.l);
    if (i === 0) break;
    if (i === index) return b.subarray(p + 8 + s.l, p + 8 + s.l + n);
    p += 8 + s.l + Math.ceil(n / 8) * 8;
  }
  throw new NotReadHere('global heap object');
}

/**
 * The objects a fractal heap holds for the records of a version-2 B-tree: dense link or
 * attribute storage (a name index whose records hold managed heap IDs). Leaf-only B-trees and
 * managed objects in direct blocks (the root one, or those of a root indirect block) are read;
 * anything else throws.
 */
function denseObjects(r: Reader, s: Sizes, heapAddr: number, btreeAddr: number, kind: 'links' | 'attributes'): Buffer[] {
  const h = r.bytes(heapAddr, 22 + 12 * s.l + 3 * s.o);
  if (h.toString('latin1', 0, 4) !== 'FRHP' || h[4] !== 0) throw new NotReadHere('fractal heap header');
  const idLength = h.readUInt16LE(5), filterBytes = h.readUInt16LE(7);
  if (filterBytes !== 0) throw new NotReadHere('filtered fractal heap');
  let p = 10 + 4 + s.l + s.o + s.l + s.o + 8 * s.l;
  const tableWidth = h.readUInt16LE(p); p += 2;
  const startBlock = uint(h, p, s.l); p += s.l;
  const maxDirect = uint(h, p, s.l); p += s.l;
  const maxHeapBits = h.readUInt16LE(p); p += 2;
  p += 2; // starting rows of the root indirect block
  const root = uint(h, p, s.o); p += s.o;
  const rootRows = h.readUInt16LE(p);
  const offsetBytes = Math.ceil(maxHeapBits / 8);
  // Bytes of a managed object's length in its heap ID: the fewer of those that encode the largest
  // direct block's offsets and the largest managed object (as the HDF5 library sizes them).
  const lengthBytes = Math.min(Math.floor((Math.log2(maxDirect) + 7) / 8), Math.floor(Math.floor(Math.log2(h.readUInt32LE(10))) / 8) + 1);
  // Direct blocks by their offset in the heap's address space.
  const blocks: { start: number; size: number; addr: number }[] = [];
  if (rootRows === 0) {
    blocks.push({ start: 0, size: startBlock, addr: root });
  } else {
    const sizeOfRow = (row: number) => (row < 2 ? startBlock : startBlock * 2 ** (row - 1));
    const maxDirectRows = Math.log2(maxDirect / startBlock) + 2;
    const directRows = Math.min(rootRows, maxDirectRows);
    if (rootRows > maxDirectRows) throw new NotReadHere('fractal heap with indirect children');
    const ib = r.bytes(root, 5 + s.o + offsetBytes + directRows * tableWidth * s.o);
    if (ib.toString('latin1', 0, 4) !== 'FHIB') throw new NotReadHere('fractal heap indirect block');
    let q = 5 + s.o + offsetBytes, start = 0;
    for (let row = 0; row < directRows; row++) {
      for (let c = 0; c < tableWidth; c++) {
        const addr = uint(ib, q, s.o); q += s.o;
        if (addr !== UNDEFINED) blocks.push({ start, size: sizeOfRow(row), addr });
        start += sizeOfRow(row);
      }
    }
  }
  const bt = r.bytes(btreeAddr, 16 + s.o + 2 + s.l);
  // Name indexes: type 5 records (links) are [hash, heap ID], type 8 (attributes) [heap ID, flags, order, hash].
  const recordType = kind === 'links' ? 5 : 8, idAt = kind === 'links' ? 4 : 0;
  if (bt.toString('latin1', 0, 4) !== 'BTHD' || bt[4] !== 0 || bt[5] !== recordType) throw new NotReadHere('name index');
  const recordSize = bt.readUInt16LE(10), depth = bt.readUInt16LE(12);
  const rootNode = uint(bt, 16, s.o), count = bt.readUInt16LE(16 + s.o);
  if (depth !== 0) throw new NotReadHere('name index deeper than one node');
  if (count === 0) return [];
  const leaf = r.bytes(rootNode, 6 + count * recordSize);
  if (leaf.toString('latin1', 0, 4) !== 'BTLF' || leaf[4] !== 0 || leaf[5] !== recordType) throw new NotReadHere('name index leaf');
  const out: Buffer[] = [];
  for (let i = 0; i < count; i++) {
    const id = leaf.subarray(6 + i * recordSize + idAt, 6 + i * recordSize + idAt + idLength);
    if ((id[0] & 0xf0) !== 0) throw new NotReadHere('huge or tiny heap object, or another heap ID version');
    const offset = uint(Buffer.concat([id.subarray(1, 1 + offsetBytes), Buffer.alloc(8)]), 0, 8);
    const length = uint(Buffer.concat([id.subarray(1 + offsetBytes, 1 + offsetBytes + lengthBytes), Buffer.alloc(8)]), 0, 8);
    const block = blocks.find((b) => offset >= b.start && offset + length <= b.start + b.size);
    if (!block) throw new NotReadHere('heap object outside the direct blocks read');
    out.push(r.bytes(block.addr + (offset - block.start), length));
  }
  return out;
}

/** A stored text as the library path reads it: up to the first NUL; ASCII byte by byte, UTF-8 strictly. */
function textOf(bytes: Buffer, charset: number): string {
  const z = bytes.indexOf(0);
  const b = z < 0 ? bytes : bytes.subarray(0, z);
  if (charset === 0) return b.toString('latin1');
  if (charset !== 1) throw new NotReadHere(`character set ${charset}`);
  try {
    return new TextDecoder('utf-8', { fatal: true }).decode(b);
  } catch {
    throw new NotReadHere('text that is not UTF-8');
  }
}

/** The attributes the library path keeps (smallAttributes), from the header's attribute messages or dense storage. */
function attributesOf(r: Reader, s: Sizes, msgs: Message[]): Record<string, number | number[] | string> {
  if (msgs.some((m) => m.type === 0x0c && m.shared)) throw new NotReadHere('shared attribute');
  const stored = msgs.filter((x) => x.type === 0x0c).map((m) => m.data);
  const info = msgs.find((m) => m.type === 0x15);
  if (info) {
    // With creation order indexed the library lists attributes in that order: not followed here.
    if (info.data[1] & 2) throw new NotReadHere('attributes indexed by creation order');
    const at = 2 + (info.data[1] & 1 ? 2 : 0);
    const heap = uint(info.data, at, s.o), nameIndex = uint(info.data, at + s.o, s.o);
    if (heap !== UNDEFINED) stored.push(...denseObjects(r, s, heap, nameIndex, 'attributes'));
  }
  // Kept in the library's order, by name (byte order of the UTF-8 names): a caller looking a
  // value up by several spellings takes the first it finds, as on the library path.
  const found: [string, number | number[] | string][] = [];
  const out = { set(name: string, v: number | number[] | string) { found.push([name, v]); } };
  for (const d of stored) {
    const version = d[0];
    if (version !== 1 && version !== 2 && version !== 3) throw new NotReadHere(`attribute version ${version}`);
    if (version > 1 && (d[1] & 3) !== 0) throw new NotReadHere('shared attribute type or space');
    const nameSize = d.readUInt16LE(2), typeSize = d.readUInt16LE(4), spaceSize = d.readUInt16LE(6);
    const pad = (n: number) => (version === 1 ? Math.ceil(n / 8) * 8 : n);
    let p = version === 3 ? 9 : 8;
    const name = d.toString('utf8', p, p + nameSize).replace(/\0+$/, '');
    p += pad(nameSize);
    const t = typeFacts(d.subarray(p, p + typeSize));
    p += pad(typeSize);
    const dims = dataspace(d.subarray(p, p + spaceSize), s);
    p += pad(spaceSize);
    if (dims === null || dims.length > 1) throw new NotReadHere('attribute of rank > 1 or no space');
    const count = dims.length === 0 ? 1 : dims[0];
    const data = d.subarray(p);
    if (t.vlenString) {
      // [length, collection address, object index] per element; a single text is kept, and an
      // empty list (no texts, so no number that is not finite), as the library path keeps them.
      if (dims.length !== 0) {
        if (count === 0) out.set(name, []);
        continue;
      }
      const text = textOf(globalHeapObject(r, s, uint(data, 4, s.o), data.readUInt32LE(4 + s.o)), t.charset ?? -1);
      if (text.length <= 500) out.set(name, text);
      continue;
    }
    if (!((t.cls === 0 && (t.size === 1 || t.size === 2 || t.size === 4 || t.size === 8)) || (t.cls === 1 && t.ieee))) throw new NotReadHere(`attribute type class ${t.cls}`);
    if (!t.little && t.size > 1) throw new NotReadHere('big-endian attribute');
    if (data.length < count * t.size) throw new NotReadHere('short attribute');
    const values: number[] = [];
    for (let i = 0; i < count; i++) {
      const at = i * t.size;
      // 64-bit integers become the nearest number, as the library path gives them.
      values.push(t.cls === 1 ? (t.size === 4 ? data.readFloatLE(at) : data.readDoubleLE(at))
        : t.size === 8 ? Number(t.signed ? data.readBigInt64LE(at) : data.readBigUInt64LE(at))
          : t.signed ? data.readIntLE(at, t.size) : data.readUIntLE(at, t.size));
    }
    if (dims.length === 0) {
      if (Number.isFinite(values[0])) out.set(name, values[0]);
    } else if (count <= 16 && values.every(Number.isFinite)) {
      out.set(name, values);
    }
  }
  found.sort(([a], [b]) => Buffer.compare(Buffer.from(a, 'utf8'), Buffer.from(b, 'utf8')));
  return Object.fromEntries(found);
}

interface DatasetHeader { shape: number[] | null; type: TypeFacts; msgs: Message[] }

/** A dataset's shape, type and messages, or null for another kind of object; throws where the library must decide. */
function datasetHeader(s: Sizes, msgs: Message[]): DatasetHeader | null {
  const layout = msgs.find((m) => m.type === 0x08);
  if (!layout) return null;
  // A committed datatype or a shared message: its content is elsewhere, for the library to read.
  if (msgs.some((m) => m.shared)) throw new NotReadHere('shared message');
  const space = msgs.find((m) => m.type === 0x01), type = msgs.find((m) => m.type === 0x03);
  if (!space || !type) throw new NotReadHere('dataset without space or type');
  if (msgs.some((m) => m.type === 0x07)) throw new NotReadHere('external data');
  const pipeline = msgs.find((m) => m.type === 0x0b);
  if (pipeline && pipeline.data[1] > 0) throw new NotReadHere('filters');
  return { shape: dataspace(space.data, s), type: typeFacts(type.data), msgs };
}

function isCandidate(h: DatasetHeader): boolean {
  const name = numericName(h.type);
  return name !== null && isDType(name) && h.shape !== null && (h.shape.length === 3 || h.shape.length === 4);
}

/** A link message's name, whether it is a hard link, and (hard) the object's address. */
function parseLink(d: Buffer, s: Sizes): { name: string; hard: boolean; addr: number } {
  if (d[0] !== 1) throw new NotReadHere(`link message version ${d[0]}`);
  const flags = d[1];
  let p = 2, linkType = 0;
  if (flags & 0x08) linkType = d[p++];
  if (flags & 0x04) p += 8;
  if (flags & 0x10) p += 1;
  const lenBytes = 1 << (flags & 3);
  const len = uint(d, p, lenBytes);
  p += lenBytes;
  const name = d.toString('utf8', p, p + len);
  p += len;
  return { name, hard: linkType === 0, addr: linkType === 0 ? uint(d, p, s.o) : UNDEFINED };
}

/**
 * The links of a group, from its header messages: compact link messages, dense storage (a
 * fractal heap of link messages), or an old-style symbol table (soft links there are marked not hard).
 */
function groupChildren(r: Reader, s: Sizes, msgs: Message[]): { name: string; hard: boolean; addr: number }[] {
  const out = msgs.filter((m) => m.type === 0x06).map((m) => parseLink(m.data, s));
  const info = msgs.find((m) => m.type === 0x02);
  if (info) {
    const at = 2 + (info.data[1] & 1 ? 8 : 0);
    const heap = uint(info.data, at, s.o), nameIndex = uint(info.data, at + s.o, s.o);
    if (heap !== UNDEFINED) out.push(...denseObjects(r, s, heap, nameIndex, 'links').map((d) => parseLink(d, s)));
  }
  const table = msgs.find((m) => m.type === 0x11);
  if (table) {
    const heap = uint(table.data, s.o, s.o);
    const h = r.bytes(heap, 8 + 2 * s.l + s.o);
    if (h.toString('latin1', 0, 4) !== 'HEAP') throw new NotReadHere('local heap signature');
    const heapData = uint(h, 8 + 2 * s.l, s.o);
    const nameAt = (o: number) => {
      const b = r.bytes(heapData + o, Math.min(1024, r.size - r.base - heapData - o));
      const z = b.indexOf(0);
      return b.toString('utf8', 0, z < 0 ? b.length : z);
    };
    const walk = (node: number, depth: number) => {
      if (depth > 32) throw new NotReadHere('group B-tree too deep');
      const nh = r.bytes(node, 8 + 2 * s.o);
      if (nh.toString('latin1', 0, 4) !== 'TREE' || nh[4] !== 0) throw new NotReadHere('group B-tree signature');
      const level = nh[5], used = nh.readUInt16LE(6);
      const body = r.bytes(node + 8 + 2 * s.o, (used + 1) * s.l + used * s.o);
      for (let i = 0; i < used; i++) {
        const child = uint(body, s.l + i * (s.l + s.o), s.o);
        if (level > 0) { walk(child, depth + 1); continue; }
        const sn = r.bytes(child, 8);
        if (sn.toString('latin1', 0, 4) !== 'SNOD') throw new NotReadHere('symbol node signature');
        const n = sn.readUInt16LE(6), entry = 2 * s.o + 24;
        const entries = r.bytes(child + 8, n * entry);
        for (let e = 0; e < n; e++) {
          const cacheType = entries.readUInt32LE(e * entry + 2 * s.o);
          out.push({ name: nameAt(uint(entries, e * entry, s.o)), hard: cacheType !== 2, addr: uint(entries, e * entry + s.o, s.o) });
        }
      }
    };
    walk(uint(table.data, 0, s.o), 0);
  }
  return out;
}

/** Every dataset below the group at `addr`, by path (hard links only, as the library path lists them). */
function listDatasetsFrom(st: Structure, addr: number, prefix: string, seen: Set<number>, out: { path: string; header: DatasetHeader }[]): void {
  if (seen.has(addr)) throw new NotReadHere('a group reached twice');
  seen.add(addr);
  const { rel: r, s } = st;
  const msgs = objectMessages(r, s, addr);
  const children = groupChildren(r, s, msgs).filter((c) => c.hard);
  for (const c of children) {
    if (c.addr === UNDEFINED) throw new NotReadHere('link to nothing');
    const childMsgs = objectMessages(r, s, c.addr);
    const header = datasetHeader(s, childMsgs);
    const path = `${prefix}/${c.name}`;
    if (header) out.push({ path, header });
    else if (childMsgs.some((m) => m.type === 0x11 || m.type === 0x02 || m.type === 0x06)) listDatasetsFrom(st, c.addr, path, seen, out);
  }
}

/**
 * The dataset to open, described without the HDF5 library: the one at `datasetPath`, or with
 * none given, the file's only dataset that could be opened. Null whenever the library should
 * decide instead (see above).
 */
export function plainDataset(file: string, datasetPath: string | undefined): PlainDataset | null {
  return withStructure(file, (st) => {
    let found: { path: string; header: DatasetHeader } | null = null;
    if (datasetPath !== undefined) {
      const addr = walkPath(st, datasetPath);
      if (addr === null) return null;
      const header = datasetHeader(st.s, objectMessages(st.rel, st.s, addr));
      if (header) found = { path: datasetPath, header };
    } else {
      const all: { path: string; header: DatasetHeader }[] = [];
      listDatasetsFrom(st, st.root, '', new Set(), all);
      const candidates = all.filter((d) => isCandidate(d.header));
      if (candidates.length === 1) found = candidates[0];
    }
    if (!found || !isCandidate(found.header)) return null;
    const { header } = found;
    if (!header.type.little && header.type.size > 1) return null;
    const storedShape = header.shape!;
    const ld = header.msgs.find((m) => m.type === 0x08)!.data;
    let chunks: number[] | null = null;
    if ((ld[0] === 3 || ld[0] === 4) && ld[1] === 2) {
      const dims = ld[0] === 3 ? Array.from({ length: ld[2] }, (_, i) => ld.readUInt32LE(3 + st.s.o + 4 * i))
        : Array.from({ length: ld[3] }, (_, i) => uint(ld, 5 + i * ld[4], ld[4]));
      chunks = dims.slice(0, storedShape.length);
    } else if (!((ld[0] === 3 || ld[0] === 4) && ld[1] === 1)) {
      return null; // compact, virtual or an old layout version: the library's
    }
    const attributes = attributesOf(st.rel, st.s, header.msgs);
    const msgs = header.msgs;
    return {
      datasetPath: found.path, storedShape, dtype: numericName(header.type) as DType, chunks, attributes,
      layout: (elementBytes, rowElements) => withStructure(file, (again) => layoutOf(again, msgs, storedShape, elementBytes, rowElements)),
    };
  });
}
