// The byte codec of the served transport: what goes in comes out, typed arrays bit for bit
// (every element type, views into larger buffers, NaN and ±Infinity), and bad bytes are refused.
import { describe, expect, it } from 'vitest';
import { decodeMessage, encodeMessage } from '../../src-shared/contract/wire';

describe('wire codec', () => {
  it('round-trips plain data and every typed array kind, in order, nested', () => {
    const big = new Float64Array([1, 2, 3, 4, 5]);
    const msg = {
      t: 'result', id: 7, value: {
        images: [big.subarray(1, 4), new Float64Array([NaN, Infinity, -Infinity, -0, 1e-310])],
        labels: Int32Array.from([-1, 2 ** 31 - 1]), mask: Uint8Array.from([0, 1, 255]),
        f32: Float32Array.from([1.5]), u16: Uint16Array.from([65535]), i16: Int16Array.from([-3]), u32: Uint32Array.from([4e9]), i8: Int8Array.from([-128]),
        stats: { max: Infinity, min: -Infinity, mean: NaN, note: 'héllo', list: [1, 'two', null, true] },
        empty: new Float64Array(0),
      },
    };
    const back = decodeMessage(encodeMessage(msg)) as typeof msg;
    expect(back.t).toBe('result');
    expect(Array.from(back.value.images[0])).toEqual([2, 3, 4]);
    expect(back.value.images[0]).toBeInstanceOf(Float64Array);
    const specials = back.value.images[1];
    expect(Number.isNaN(specials[0])).toBe(true);
    expect([specials[1], specials[2]]).toEqual([Infinity, -Infinity]);
    expect(Object.is(specials[3], -0)).toBe(true);
    expect(specials[4]).toBe(1e-310);
    expect(back.value.labels).toEqual(Int32Array.from([-1, 2 ** 31 - 1]));
    expect(back.value.mask).toEqual(Uint8Array.from([0, 1, 255]));
    expect(back.value.f32).toEqual(Float32Array.from([1.5]));
    expect(back.value.u16).toEqual(Uint16Array.from([65535]));
    expect(back.value.i16).toEqual(Int16Array.from([-3]));
    expect(back.value.u32).toEqual(Uint32Array.from([4e9]));
    expect(back.value.i8).toEqual(Int8Array.from([-128]));
    expect(back.value.stats.max).toBe(Infinity);
    expect(back.value.stats.min).toBe(-Infinity);
    expect(Number.isNaN(back.value.stats.mean)).toBe(true);
    expect(back.value.stats.note).toBe('héllo');
    expect(back.value.stats.list).toEqual([1, 'two', null, true]);
    expect(back.value.empty).toEqual(new Float64Array(0));
  });

  it('refuses a typed-array name that is not one of its own kinds (no prototype lookups)', () => {
    const header = new TextEncoder().encode(JSON.stringify({ a: { $typed: 'constructor', n: 1 } }));
    const bytes = new Uint8Array(8 + Math.ceil(header.length / 8) * 8 + 8);
    new DataView(bytes.buffer).setUint32(0, header.length, true);
    bytes.set(header, 4);
    expect(() => decodeMessage(bytes)).toThrow(/bad typed array/);
  });

  it('refuses truncated messages', () => {
    const bytes = encodeMessage({ a: new Float64Array(100) });
    expect(() => decodeMessage(bytes.subarray(0, 2))).toThrow(/shorter/);
    expect(() => decodeMessage(bytes.subarray(0, bytes.length - 16))).toThrow(/runs past/);
  });
});
