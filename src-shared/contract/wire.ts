// Messages of the contract as bytes, for transports that carry bytes rather than structured
// clones (the loopback WebSocket). Results hold large typed arrays (images, patterns), which
// JSON would inflate tenfold and slow down: they travel as raw bytes after a JSON header that
// names them. Layout of one message:
//   u32 little-endian: byte length of the UTF-8 JSON header; the header; zero padding to 8 bytes;
//   then each typed array's bytes in order, each padded to 8 bytes.
// In the header, a typed array is replaced by { "$typed": kind, "n": length } and the special
// numbers JSON cannot hold by { "$num": "NaN" | "Infinity" | "-Infinity" }.

type Typed = Float64Array | Float32Array | Int32Array | Uint32Array | Int16Array | Uint16Array | Int8Array | Uint8Array;

const KINDS = {
  f64: Float64Array, f32: Float32Array, i32: Int32Array, u32: Uint32Array,
  i16: Int16Array, u16: Uint16Array, i8: Int8Array, u8: Uint8Array,
} as const;
type Kind = keyof typeof KINDS;

function kindOf(v: unknown): Kind | null {
  if (v instanceof Float64Array) return 'f64';
  if (v instanceof Float32Array) return 'f32';
  if (v instanceof Int32Array) return 'i32';
  if (v instanceof Uint32Array) return 'u32';
  if (v instanceof Int16Array) return 'i16';
  if (v instanceof Uint16Array) return 'u16';
  if (v instanceof Int8Array) return 'i8';
  if (v instanceof Uint8Array) return 'u8';
  return null;
}

const pad8 = (n: number) => Math.ceil(n / 8) * 8;

/** Encode a message (plain data and typed arrays) as one byte buffer. */
export function encodeMessage(message: unknown): Uint8Array {
  const arrays: Typed[] = [];
  const header = JSON.stringify(message, function (this: unknown, key: string, value: unknown) {
    // `this[key]` is the value before toJSON: typed arrays are objects with numeric keys to JSON.
    const raw = (this as Record<string, unknown>)[key];
    const kind = kindOf(raw);
    if (kind) {
      arrays.push(raw as Typed);
      return { $typed: kind, n: (raw as Typed).length };
    }
    if (typeof value === 'number' && !Number.isFinite(value)) return { $num: String(value) };
    return value;
  });
  const head = new TextEncoder().encode(header);
  let size = pad8(4 + head.length);
  for (const a of arrays) size += pad8(a.byteLength);
  const out = new Uint8Array(size);
  new DataView(out.buffer).setUint32(0, head.length, true);
  out.set(head, 4);
  let at = pad8(4 + head.length);
  for (const a of arrays) {
    out.set(new Uint8Array(a.buffer, a.byteOffset, a.byteLength), at);
    at += pad8(a.byteLength);
  }
  return out;
}

/** Decode what encodeMessage made. Typed arrays are fresh copies, 8-byte aligned. */
export function decodeMessage(bytes: Uint8Array): unknown {
  if (bytes.byteLength < 4) throw new Error('wire: message shorter than its header length');
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const headLength = view.getUint32(0, true);
  if (4 + headLength > bytes.byteLength) throw new Error('wire: header runs past the message');
  const header = new TextDecoder().decode(bytes.subarray(4, 4 + headLength));
  let at = pad8(4 + headLength);
  // JSON.parse's reviver visits values depth-first in document order, the order they were written.
  return JSON.parse(header, (_key, value: unknown) => {
    if (value && typeof value === 'object' && !Array.isArray(value)) {
      const v = value as { $typed?: string; n?: number; $num?: string };
      if (typeof v.$typed === 'string' && typeof v.n === 'number' && Object.keys(v).length === 2) {
        const Ctor = Object.hasOwn(KINDS, v.$typed) ? KINDS[v.$typed as Kind] : undefined;
        if (!Ctor || !Number.isInteger(v.n) || v.n < 0) throw new Error(`wire: bad typed array ${JSON.stringify(v)}`);
        const byteLength = v.n * Ctor.BYTES_PER_ELEMENT;
        if (at + byteLength > bytes.byteLength) throw new Error('wire: a typed array runs past the message');
        const copy = new Uint8Array(byteLength);
        copy.set(bytes.subarray(at, at + byteLength));
        at += pad8(byteLength);
        return new Ctor(copy.buffer);
      }
      if (typeof v.$num === 'string' && Object.keys(v).length === 1) return Number(v.$num);
    }
    return value;
  });
}
