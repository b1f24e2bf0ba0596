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
import { DTYPE_BYTES } from '../../src-shared/model/dtype';
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

/** An unsigned little-endian integer of `n` bytes (1, 2, 4 or 8) at `at`; all ones reads as UNDEFINED. */
function uint(b: Buffer, at: number, n: number): number {
  if (n === 8) {
    const lo = b.readUInt32LE(at), hi = b.readUInt32LE(at + 4);
    if (lo === 0xffffffff && hi === 0xffffffff) return UNDEFINED;
    if (hi >= 2 ** 21) throw new Error('address beyond 2^53');
    return hi * 2 ** 32 + lo;
  }
  const v = n === 4 ? b.readUInt32LE(at) : n === 2 ? b.readUInt16LE(at) : b.readUInt8(at);
  return v === 2 ** (8 * n) - 1 && n >= 4 ? UNDEFINED : v;
}

interface Sizes { o: number; l: number; base: number }

interface Message { type: number; data: Buffer }

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
        else if (type !== 0) out.push({ type, data });
        void mflags;
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
      const type = b.readUInt16LE(p), msize = b.readUInt16LE(p + 2);
      const data = b.subarray(p + 8, p + 8 + msize);
      p += 8 + msize;
      p = (p + 7) & ~7;
      if (type === 0x10) blocks.push([uint(data, 0, s.o), uint(data, s.o, s.l)]);
      else if (type !== 0) out.push({ type, data });
    }
  }
  return out;
}

/** The object header address of `name` in the group whose header is at `addr`, or null. */
function lookup(r: Reader, s: Sizes, addr: number, name: string): number | null {
  const msgs = objectMessages(r, s, addr);
  for (const m of msgs) {
    if (m.type === 0x06) { // link message (compact groups)
      const d = m.data;
      const flags = d[1];
      let p = 2;
      let linkType = 0;
      if (flags & 0x08) linkType = d[p++];
      if (flags & 0x04) p += 8;
      if (flags & 0x10) p += 1;
      const lenBytes = 1 << (flags & 3);
      const len = uint(d, p, lenBytes);
      p += lenBytes;
      const linkName = d.toString('utf8', p, p + len);
      p += len;
      if (linkName === name) return linkType === 0 ? uint(d, p, s.o) : null;
    }
  }
  const table = msgs.find((m) => m.type === 0x11);
  if (!table) return null;
  const btree = uint(table.data, 0, s.o), heap = uint(table.data, s.o, s.o);
  const h = r.bytes(heap, 8 + 2 * s.l + s.o);
  if (h.toString('latin1', 0, 4) !== 'HEAP') throw new Error('local heap signature');
  const heapData = uint(h, 8 + 2 * s.l, s.o);
  const nameAt = (off: number) => {
    const b = r.bytes(heapData + off, Math.min(1024, r.size - heapData - off));
    const z = b.indexOf(0);
    return b.toString('utf8', 0, z < 0 ? b.length : z);
  };
  return searchGroupTree(r, s, btree, name, nameAt, 0);
}

function searchGroupTree(r: Reader, s: Sizes, node: number, name: string, nameAt: (off: number) => string, depth: number): number | null {
  if (depth > 32) throw new Error('group B-tree too deep');
  const h = r.bytes(node, 8 + 2 * s.o);
  if (h.toString('latin1', 0, 4) !== 'TREE' || h[4] !== 0) throw new Error('group B-tree signature');
  const level = h[5], used = h.readUInt16LE(6);
  const body = r.bytes(node + 8 + 2 * s.o, (used + 1) * s.l + used * s.o);
  for (let i = 0; i < used; i++) {
    const child = uint(body, s.l + i * (s.l + s.o), s.o);
    if (level > 0) {
      const found = searchGroupTree(r, s, child, name, nameAt, depth + 1);
      if (found !== null) return found;
      continue;
    }
    const sn = r.bytes(child, 8);
    if (sn.toString('latin1', 0, 4) !== 'SNOD') throw new Error('symbol node signature');
    const n = sn.readUInt16LE(6);
    const entry = 2 * s.o + 24;
    const entries = r.bytes(child + 8, n * entry);
    for (let e = 0; e < n; e++) {
      if (nameAt(uint(entries, e * entry, s.o)) === name) return uint(entries, e * entry + s.o, s.o);
    }
  }
  return null;
}

/**
 * The direct layout of the dataset at `datasetPath`, given its stored shape and element size:
 * only when its bytes are stored unfiltered, little-endian, and chunks (if any) hold whole scan
 * rows in C order. Null when that does not hold or the file uses structures not read here.
 */
export function directLayout(file: string, datasetPath: string, storedShape: number[], elementBytes: number, rowElements: number): DirectLayout | null {
  let fd: number;
  try {
    fd = fs.openSync(file, 'r');
  } catch {
    return null;
  }
  try {
    const r = new Reader(fd, fs.fstatSync(fd).size);
    // The superblock: at 0, 512, 1024, 2048, … (a user block may precede it).
    let sb = -1;
    for (let at = 0; at < r.size; at = at === 0 ? 512 : at * 2) {
      const b = r.bytes(at, 8);
      if (SIGNATURE.every((v, i) => b[i] === v)) { sb = at; break; }
    }
    if (sb < 0) return null;
    const head = r.bytes(sb, 96);
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
    // Addresses count from the base address: 0, or the superblock's own place after a user block.
    if (s.base !== 0 && s.base !== sb) return null;
    const off = s.base;
    const rel = new Reader(fd, r.size, off);
    // Walk the path from the root group.
    let addr = root;
    for (const part of datasetPath.split('/').filter(Boolean)) {
      const next = lookup(rel, s, addr, part);
      if (next === null || next === UNDEFINED) return null;
      addr = next;
    }
    const msgs = objectMessages(rel, s, addr);
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
  } catch {
    return null;
  } finally {
    fs.closeSync(fd);
  }
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
  const where = (row: number) => layout.kind === 'contiguous' ? layout.address + row * rowBytes
    : layout.chunkAddress[Math.floor(row / layout.rowsPerChunk)] + (row % layout.rowsPerChunk) * rowBytes;
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
