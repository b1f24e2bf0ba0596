// One result array written for other programs: .npy (NumPy's format, version 1.0), float32 TIFF
// (geotiff's writer: one image, SampleFormat IEEE float), CSV (1-D or 2-D), or a PNG figure
// (pngjs). Every file goes through OutputFile, so it appears whole or not at all.
import fs from 'node:fs';
import { PNG } from 'pngjs';
import { writeArrayBuffer } from 'geotiff';
import type { OutputFile } from './output-file';
import type { Figure } from './figure';

type Numbers = ArrayLike<number> & { constructor: { name: string } };

/** NumPy's .npy, version 1.0: header padded so the data starts on a 64-byte boundary. */
export function npyBytes(data: Numbers, shape: readonly number[]): Uint8Array {
  const descr = data instanceof Int32Array ? '<i4' : data instanceof Float32Array ? '<f4' : '<f8';
  const values = data instanceof Int32Array || data instanceof Float32Array || data instanceof Float64Array ? data : Float64Array.from(data);
  const shapeText = shape.length === 1 ? `(${shape[0]},)` : `(${shape.join(', ')})`;
  let header = `{'descr': '${descr}', 'fortran_order': False, 'shape': ${shapeText}, }`;
  const total = 10 + header.length + 1;
  header += ' '.repeat((64 - (total % 64)) % 64) + '\n';
  const head = new Uint8Array(10 + header.length);
  head.set([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0]);
  new DataView(head.buffer).setUint16(8, header.length, true);
  head.set(new TextEncoder().encode(header), 10);
  const body = new Uint8Array(values.buffer, values.byteOffset, values.byteLength);
  const out = new Uint8Array(head.length + body.length);
  out.set(head);
  out.set(body, head.length);
  return out;
}

/** CSV with a header: 1-D as index,value; 2-D as one row per first index, a column per second. */
export function csvText(data: ArrayLike<number>, shape: readonly number[], names: readonly string[]): string {
  const num = (v: number) => (Number.isFinite(v) ? String(v) : Number.isNaN(v) ? 'nan' : v > 0 ? 'inf' : '-inf');
  if (shape.length === 1) {
    const rows = [`${names[0] ?? 'index'},value`];
    for (let i = 0; i < shape[0]; i++) rows.push(`${i},${num(data[i])}`);
    return rows.join('\n') + '\n';
  }
  const [n, m] = shape;
  const rows = [[names[0] ?? 'row', ...Array.from({ length: m }, (_, j) => `${names[1] ?? 'column'}_${j}`)].join(',')];
  for (let i = 0; i < n; i++) rows.push([String(i), ...Array.from({ length: m }, (_, j) => num(data[i * m + j]))].join(','));
  return rows.join('\n') + '\n';
}

export async function tiffBytes(data: ArrayLike<number>, width: number, height: number): Promise<Uint8Array> {
  const values = Float32Array.from(data);
  const buf = await writeArrayBuffer(values, { width, height, BitsPerSample: [32], SampleFormat: [3], SamplesPerPixel: 1, PhotometricInterpretation: 1 });
  return new Uint8Array(buf as ArrayBuffer);
}

export function pngBytes(f: Figure): Uint8Array {
  const png = new PNG({ width: f.width, height: f.height });
  png.data.set(f.rgba);
  return new Uint8Array(PNG.sync.write(png));
}

export async function writeBytes(out: OutputFile, bytes: Uint8Array): Promise<string> {
  return out.write((tmp) => fs.writeFileSync(tmp, bytes));
}
