// A small HDF5 writer of our own for result files: groups, contiguous datasets of numbers, and
// attributes (numbers, numeric vectors, UTF-8 strings of any length), written in one sequential
// write with no library to load (the HDF5 library in WebAssembly took ~0.2 s of the main thread
// to start, longer than the pass it followed on a page-cached file).
//
// What it writes, from the HDF5 File Format Specification version 3.0 (The HDF Group):
//  - superblock version 2 (readable by HDF5 1.8 and later), 8-byte offsets and lengths;
//  - every group and dataset as a version 2 object header ("OHDR") with one chunk; groups in the
//    compact "new style" (a Link Info message with no fractal heap, a Group Info message and one
//    Link message per member), so any number of members and attributes sit in the header;
//  - datasets: Dataspace v2, Datatype (fixed-point or IEEE float, little-endian), Fill Value v3
//    (allocation late, written if set, as HDF5 writes by default), contiguous Data Layout v3;
//  - attributes as Attribute messages v3; strings are variable-length (UTF-8; ASCII for the
//    dimension labels, as the HDF5 dimension-scale API writes them), their bytes in one global
//    heap collection;
//  - checksums: Jenkins' lookup3 hashlittle, initial value 0, as the specification prescribes.
// Dimension labels are the DIMENSION_LABELS attribute the dimension-scale API (H5DSset_label)
// writes, so h5py's `dims[i].label` reads them.
import fs from 'node:fs';
import os from 'node:os';

export type H5AttrValue = string | number | readonly string[] | Float64Array | Int32Array;

export type H5Data = Float64Array | Float32Array | Int32Array | Uint32Array | Int16Array | Uint16Array | Int8Array | Uint8Array;

export interface H5DatasetInput {
  data: H5Data;
  shape: readonly number[];
  attrs?: Record<string, H5AttrValue>;
  /** One label per dimension (the dimension-scale API's labels). */
  dims?: readonly string[];
}

export interface H5FileInput {
  /** Attributes of the root group. */
  attrs?: Record<string, H5AttrValue>;
  /** Datasets by path ("a", "group/b"); groups on the way are created. */
  datasets: Record<string, H5DatasetInput>;
  /** Attributes of groups by path ("group"), for groups that also hold datasets or are empty. */
  groups?: Record<string, Record<string, H5AttrValue>>;
}

const UNDEF = 0xffffffffffffffffn;
const SIGNATURE = [0x89, 0x48, 0x44, 0x46, 0x0d, 0x0a, 0x1a, 0x0a];
const SUPERBLOCK_BYTES = 48;
/** The smallest global heap collection the specification allows. */
const MIN_COLLECTION_BYTES = 4096;

// --- bytes ---------------------------------------------------------------------------------------

class Bytes {
  private buf = new Uint8Array(256);
  private view = new DataView(this.buf.buffer);
  length = 0;

  private room(n: number): void {
    if (this.length + n <= this.buf.length) return;
    let size = this.buf.length * 2;
    while (size < this.length + n) size *= 2;
    const next = new Uint8Array(size);
    next.set(this.buf.subarray(0, this.length));
    this.buf = next;
    this.view = new DataView(next.buffer);
  }
  u8(v: number): this { this.room(1); this.buf[this.length++] = v; return this; }
  u16(v: number): this { this.room(2); this.view.setUint16(this.length, v, true); this.length += 2; return this; }
  u32(v: number): this { this.room(4); this.view.setUint32(this.length, v >>> 0, true); this.length += 4; return this; }
  u64(v: number | bigint): this { this.room(8); this.view.setBigUint64(this.length, BigInt(v), true); this.length += 8; return this; }
  f64(v: number): this { this.room(8); this.view.setFloat64(this.length, v, true); this.length += 8; return this; }
  raw(b: ArrayLike<number>): this { this.room(b.length); this.buf.set(b, this.length); this.length += b.length; return this; }
  zeros(n: number): this { this.room(n); this.buf.fill(0, this.length, this.length + n); this.length += n; return this; }
  bytes(): Uint8Array { return this.buf.subarray(0, this.length); }
}

/** Bob Jenkins' lookup3 hashlittle (public domain), the checksum of HDF5 metadata. */
export function lookup3(k: Uint8Array, initval = 0): number {
  let length = k.length;
  let a = (0xdeadbeef + length + initval) >>> 0;
  let b = a;
  let c = a;
  const rot = (x: number, n: number) => ((x << n) | (x >>> (32 - n))) >>> 0;
  const word = (o: number, n: number) => {
    let w = 0;
    for (let i = 0; i < n; i++) w |= k[o + i] << (8 * i);
    return w >>> 0;
  };
  let o = 0;
  while (length > 12) {
    a = (a + word(o, 4)) >>> 0;
    b = (b + word(o + 4, 4)) >>> 0;
    c = (c + word(o + 8, 4)) >>> 0;
    // mix(a, b, c)
    a = (a - c) >>> 0; a = (a ^ rot(c, 4)) >>> 0; c = (c + b) >>> 0;
    b = (b - a) >>> 0; b = (b ^ rot(a, 6)) >>> 0; a = (a + c) >>> 0;
    c = (c - b) >>> 0; c = (c ^ rot(b, 8)) >>> 0; b = (b + a) >>> 0;
    a = (a - c) >>> 0; a = (a ^ rot(c, 16)) >>> 0; c = (c + b) >>> 0;
    b = (b - a) >>> 0; b = (b ^ rot(a, 19)) >>> 0; a = (a + c) >>> 0;
    c = (c - b) >>> 0; c = (c ^ rot(b, 4)) >>> 0; b = (b + a) >>> 0;
    length -= 12;
    o += 12;
  }
  if (length === 0) return c;
  a = (a + word(o, Math.min(length, 4))) >>> 0;
  if (length > 4) b = (b + word(o + 4, Math.min(length - 4, 4))) >>> 0;
  if (length > 8) c = (c + word(o + 8, length - 8)) >>> 0;
  // final(a, b, c)
  c = (c ^ b) >>> 0; c = (c - rot(b, 14)) >>> 0;
  a = (a ^ c) >>> 0; a = (a - rot(c, 11)) >>> 0;
  b = (b ^ a) >>> 0; b = (b - rot(a, 25)) >>> 0;
  c = (c ^ b) >>> 0; c = (c - rot(b, 16)) >>> 0;
  a = (a ^ c) >>> 0; a = (a - rot(c, 4)) >>> 0;
  b = (b ^ a) >>> 0; b = (b - rot(a, 14)) >>> 0;
  c = (c ^ b) >>> 0; c = (c - rot(b, 24)) >>> 0;
  return c;
}

// --- datatypes and dataspaces --------------------------------------------------------------------

interface NumberType { float: boolean; signed: boolean; size: number }

function numberTypeOf(a: H5Data): NumberType {
  if (a instanceof Float64Array) return { float: true, signed: true, size: 8 };
  if (a instanceof Float32Array) return { float: true, signed: true, size: 4 };
  if (a instanceof Int32Array) return { float: false, signed: true, size: 4 };
  if (a instanceof Uint32Array) return { float: false, signed: false, size: 4 };
  if (a instanceof Int16Array) return { float: false, signed: true, size: 2 };
  if (a instanceof Uint16Array) return { float: false, signed: false, size: 2 };
  if (a instanceof Int8Array) return { float: false, signed: true, size: 1 };
  return { float: false, signed: false, size: 1 };
}

/** Datatype message body: class 0 (fixed-point) or 1 (IEEE floating point), version 1, little-endian. */
function numberDatatype(t: NumberType): Uint8Array {
  const b = new Bytes();
  if (t.float) {
    const f64 = t.size === 8;
    // Bit field: byte order little-endian, no padding, mantissa normalised with an implied leading
    // one (2 << 4); the sign bit's position.
    b.u8(0x11).u8(0x20).u8(f64 ? 63 : 31).u8(0).u32(t.size);
    b.u16(0).u16(f64 ? 64 : 32); // bit offset, precision
    b.u8(f64 ? 52 : 23).u8(f64 ? 11 : 8).u8(0).u8(f64 ? 52 : 23); // exponent location and size, mantissa location and size
    b.u32(f64 ? 1023 : 127); // exponent bias
  } else {
    b.u8(0x10).u8(t.signed ? 0x08 : 0).u8(0).u8(0).u32(t.size);
    b.u16(0).u16(8 * t.size);
  }
  return b.bytes().slice();
}

/** Variable-length string (class 9, version 1), null-terminated, over 1-byte unsigned characters. */
function stringDatatype(utf8: boolean): Uint8Array {
  const b = new Bytes();
  b.u8(0x19).u8(0x01).u8(utf8 ? 0x01 : 0x00).u8(0).u32(16);
  b.u8(0x10).u8(0).u8(0).u8(0).u32(1).u16(0).u16(8);
  return b.bytes().slice();
}

/** Dataspace message v2: scalar (rank 0) or simple, with no maximum sizes. */
function dataspace(shape: readonly number[]): Uint8Array {
  const b = new Bytes();
  b.u8(2).u8(shape.length).u8(0).u8(shape.length === 0 ? 0 : 1);
  for (const n of shape) b.u64(n);
  return b.bytes().slice();
}

// --- the global heap of string bytes -------------------------------------------------------------

class GlobalHeap {
  readonly objects: Uint8Array[] = [];
  address = 0;
  /** Heap object index of a string's UTF-8 bytes (1-based). */
  add(s: string): { index: number; length: number } {
    const bytes = new TextEncoder().encode(s);
    this.objects.push(bytes);
    return { index: this.objects.length, length: bytes.length };
  }
  get size(): number {
    let n = 16;
    for (const o of this.objects) n += 16 + roundUp(o.length, 8);
    // Room for the free-space object, and at least the smallest collection.
    return Math.max(MIN_COLLECTION_BYTES, roundUp(n + 16, 8));
  }
  write(b: Bytes): void {
    const size = this.size;
    const start = b.length;
    b.raw([0x47, 0x43, 0x4f, 0x4c]).u8(1).zeros(3).u64(size); // "GCOL", version 1, collection size
    this.objects.forEach((o, i) => {
      b.u16(i + 1).u16(0).u32(0).u64(o.length).raw(o).zeros(roundUp(o.length, 8) - o.length);
    });
    const used = b.length - start;
    // Object 0 holds the free space; its size counts its own header.
    b.u16(0).u16(0).u32(0).u64(size - used).zeros(size - used - 16);
  }
}

function roundUp(n: number, to: number): number { return Math.ceil(n / to) * to; }

// --- messages -------------------------------------------------------------------------------------

interface Message { type: number; flags: number; body: Uint8Array | ((addresses: Map<Node, number>) => Uint8Array); size: number }

const MSG_DATASPACE = 0x01;
const MSG_LINK_INFO = 0x02;
const MSG_DATATYPE = 0x03;
const MSG_FILL_VALUE = 0x05;
const MSG_LINK = 0x06;
const MSG_LAYOUT = 0x08;
const MSG_GROUP_INFO = 0x0a;
const MSG_ATTRIBUTE = 0x0c;
/** Message flag: the message is constant. */
const CONSTANT = 0x01;

function fixed(type: number, body: Uint8Array, flags = 0): Message {
  return { type, flags, body, size: body.length };
}

function isAscii(s: string): boolean {
  for (let i = 0; i < s.length; i++) if (s.charCodeAt(i) > 0x7f) return false;
  return true;
}

function attributeMessage(name: string, value: H5AttrValue, heap: GlobalHeap, asciiStrings = false): Message {
  const nameBytes = new TextEncoder().encode(name);
  let datatype: Uint8Array;
  let space: Uint8Array;
  const data = new Bytes();
  // The collection's address is known only once the layout is done: strings are patched then.
  const refs: { at: number; index: number }[] = [];
  const strings = (list: readonly string[]) => {
    datatype = stringDatatype(!asciiStrings || !list.every(isAscii));
    for (const s of list) {
      const { index, length } = heap.add(s);
      data.u32(length);
      refs.push({ at: data.length, index });
      data.u64(0).u32(index);
    }
  };
  if (typeof value === 'string') {
    space = dataspace([]);
    strings([value]);
  } else if (typeof value === 'number') {
    space = dataspace([]);
    datatype = numberDatatype({ float: true, signed: true, size: 8 });
    data.f64(value);
  } else if (Array.isArray(value)) {
    space = dataspace([value.length]);
    strings(value as readonly string[]);
  } else {
    const a = value as Float64Array | Int32Array;
    space = dataspace([a.length]);
    datatype = numberDatatype(numberTypeOf(a));
    data.raw(new Uint8Array(a.buffer, a.byteOffset, a.byteLength));
  }
  const head = new Bytes();
  head.u8(3).u8(0).u16(nameBytes.length + 1).u16(datatype!.length).u16(space.length).u8(isAscii(name) ? 0 : 1);
  head.raw(nameBytes).u8(0).raw(datatype!).raw(space);
  const prefix = head.bytes().slice();
  const payload = data.bytes().slice();
  return {
    type: MSG_ATTRIBUTE, flags: 0, size: prefix.length + payload.length,
    body: () => {
      const dv = new DataView(payload.buffer);
      for (const r of refs) dv.setBigUint64(r.at, BigInt(heap.address), true);
      const out = new Uint8Array(prefix.length + payload.length);
      out.set(prefix);
      out.set(payload, prefix.length);
      return out;
    },
  };
}

// --- objects --------------------------------------------------------------------------------------

interface Node {
  kind: 'group' | 'dataset';
  messages: Message[];
  /** Groups: members by name, in insertion order. */
  members: Map<string, Node>;
  dataset?: H5DatasetInput;
  /** Where the dataset's values start (set by the layout). */
  dataAddress?: number;
}

function objectHeaderBytes(messages: Message[]): number {
  // "OHDR", version, flags, 4-byte size of chunk 0, messages (4-byte prefix each), checksum.
  return 4 + 1 + 1 + 4 + messages.reduce((s, m) => s + 4 + m.size, 0) + 4;
}

function writeObjectHeader(b: Bytes, messages: Message[], addresses: Map<Node, number>): void {
  const start = b.length;
  const chunk = messages.reduce((s, m) => s + 4 + m.size, 0);
  // Flags: bits 0–1 = 2, a 4-byte size of chunk 0; no times, no attribute storage limits.
  b.raw([0x4f, 0x48, 0x44, 0x52]).u8(2).u8(0x02).u32(chunk);
  for (const m of messages) {
    const body = typeof m.body === 'function' ? m.body(addresses) : m.body;
    if (body.length !== m.size) throw new Error(`HDF5 writer: message ${m.type} is ${body.length} bytes, expected ${m.size}`);
    b.u8(m.type).u16(m.size).u8(m.flags).raw(body);
  }
  b.u32(lookup3(b.bytes().subarray(start)));
}

function checkName(part: string, path: string): void {
  if (part === '' || part === '.' || part === '..') throw new Error(`HDF5 writer: bad path ${JSON.stringify(path)}`);
  if (new TextEncoder().encode(part).length > 255) throw new Error(`HDF5 writer: name longer than 255 bytes in ${JSON.stringify(path)}`);
}

/**
 * Write `input` as a new HDF5 file at `path` (created or truncated). Values are written in the
 * machine's byte order, which must be little-endian (every platform Node runs on today).
 */
export function writeHdf5File(path: string, input: H5FileInput): void {
  if (os.endianness() !== 'LE') throw new Error('HDF5 writer: only little-endian machines are supported');
  const heap = new GlobalHeap();
  const newGroup = (): Node => ({ kind: 'group', messages: [], members: new Map() });
  const root = newGroup();
  const groupAt = (parts: string[], path: string): Node => {
    let g = root;
    for (const part of parts) {
      checkName(part, path);
      let next = g.members.get(part);
      if (!next) { next = newGroup(); g.members.set(part, next); }
      if (next.kind !== 'group') throw new Error(`HDF5 writer: ${JSON.stringify(path)} passes through a dataset`);
      g = next;
    }
    return g;
  };
  for (const [path, ds] of Object.entries(input.datasets)) {
    const parts = path.split('/').filter((p) => p !== '');
    const name = parts.pop();
    if (name === undefined) throw new Error(`HDF5 writer: bad dataset path ${JSON.stringify(path)}`);
    checkName(name, path);
    const g = groupAt(parts, path);
    if (g.members.has(name)) throw new Error(`HDF5 writer: ${JSON.stringify(path)} given twice`);
    const count = ds.shape.reduce((p, n) => p * n, 1);
    if (ds.shape.some((n) => !Number.isInteger(n) || n < 0) || count !== ds.data.length) {
      throw new Error(`HDF5 writer: ${JSON.stringify(path)} has ${ds.data.length} values, its shape [${ds.shape.join(', ')}] needs ${count}`);
    }
    if (ds.dims && ds.dims.length !== ds.shape.length) throw new Error(`HDF5 writer: ${JSON.stringify(path)} has ${ds.dims.length} dimension labels for ${ds.shape.length} dimensions`);
    g.members.set(name, { kind: 'dataset', messages: [], members: new Map(), dataset: ds });
  }
  for (const path of Object.keys(input.groups ?? {})) groupAt(path.split('/').filter((p) => p !== ''), path);

  // Messages of every object, in a fixed order (root first, then depth-first by insertion).
  const order: Node[] = [];
  const visit = (n: Node, attrs: Record<string, H5AttrValue> | undefined) => {
    order.push(n);
    if (n.kind === 'group') {
      n.messages.push(fixed(MSG_LINK_INFO, new Bytes().u8(0).u8(0).u64(UNDEF).u64(UNDEF).bytes().slice()));
      n.messages.push(fixed(MSG_GROUP_INFO, new Uint8Array([0, 0]), CONSTANT));
      for (const [name, member] of n.members) {
        const nameBytes = new TextEncoder().encode(name);
        const ascii = isAscii(name);
        // Link v1; flags: 1-byte name length, hard link, charset byte present when UTF-8 (bit 4).
        const size = 2 + (ascii ? 0 : 1) + 1 + nameBytes.length + 8;
        n.messages.push({
          type: MSG_LINK, flags: 0, size,
          body: (addresses) => {
            const b = new Bytes().u8(1).u8(ascii ? 0 : 0x10);
            if (!ascii) b.u8(1);
            return b.u8(nameBytes.length).raw(nameBytes).u64(addresses.get(member)!).bytes().slice();
          },
        });
      }
    } else {
      const ds = n.dataset!;
      n.messages.push(fixed(MSG_DATASPACE, dataspace(ds.shape)));
      n.messages.push(fixed(MSG_DATATYPE, numberDatatype(numberTypeOf(ds.data)), CONSTANT));
      // Fill Value v3: allocation time late, fill written if set, no fill value defined.
      n.messages.push(fixed(MSG_FILL_VALUE, new Uint8Array([3, 0x0a]), CONSTANT));
      n.messages.push({
        type: MSG_LAYOUT, flags: 0, size: 18,
        body: () => new Bytes().u8(3).u8(1).u64(ds.data.byteLength > 0 ? n.dataAddress! : UNDEF).u64(ds.data.byteLength).bytes().slice(),
      });
      if (ds.dims) n.messages.push(attributeMessage('DIMENSION_LABELS', ds.dims, heap, true));
    }
    for (const [k, v] of Object.entries(attrs ?? {})) n.messages.push(attributeMessage(k, v, heap));
    if (n.kind === 'group') for (const [, m] of n.members) visit(m, m.dataset?.attrs);
  };
  visit(root, input.attrs);
  // Group attributes named by path.
  for (const [path, attrs] of Object.entries(input.groups ?? {})) {
    const g = groupAt(path.split('/').filter((p) => p !== ''), path);
    for (const [k, v] of Object.entries(attrs)) g.messages.push(attributeMessage(k, v, heap));
  }

  // Layout: superblock, object headers, the global heap, then the values, each 8-byte aligned.
  const addresses = new Map<Node, number>();
  let cursor = SUPERBLOCK_BYTES;
  for (const n of order) { addresses.set(n, cursor); cursor += objectHeaderBytes(n.messages); }
  if (heap.objects.length) { cursor = roundUp(cursor, 8); heap.address = cursor; cursor += heap.size; }
  const metadataEnd = cursor;
  for (const n of order) {
    if (n.kind !== 'dataset') continue;
    cursor = roundUp(cursor, 8);
    n.dataAddress = cursor;
    cursor += n.dataset!.data.byteLength;
  }
  const eof = cursor;

  const b = new Bytes();
  b.raw(SIGNATURE).u8(2).u8(8).u8(8).u8(0); // version 2, 8-byte offsets and lengths, no flags
  b.u64(0).u64(UNDEF).u64(eof).u64(addresses.get(root)!); // base address, no extension, end of file, root group
  b.u32(lookup3(b.bytes()));
  for (const n of order) writeObjectHeader(b, n.messages, addresses);
  if (heap.objects.length) { b.zeros(heap.address - b.length); heap.write(b); }
  if (b.length !== metadataEnd) throw new Error(`HDF5 writer: metadata took ${b.length} bytes, laid out ${metadataEnd}`);

  const fd = fs.openSync(path, 'w');
  try {
    writeAll(fd, b.bytes(), 0);
    const pad = new Uint8Array(8);
    let at = metadataEnd;
    for (const n of order) {
      if (n.kind !== 'dataset') continue;
      if (n.dataAddress! > at) writeAll(fd, pad.subarray(0, n.dataAddress! - at), at);
      const d = n.dataset!.data;
      writeAll(fd, new Uint8Array(d.buffer, d.byteOffset, d.byteLength), n.dataAddress!);
      at = n.dataAddress! + d.byteLength;
    }
  } finally {
    fs.closeSync(fd);
  }
}

function writeAll(fd: number, bytes: Uint8Array, position: number): void {
  let done = 0;
  while (done < bytes.length) {
    // At most 1 GiB per call: larger writes may be cut short by the system.
    done += fs.writeSync(fd, bytes, done, Math.min(bytes.length - done, 2 ** 30), position + done);
  }
}
