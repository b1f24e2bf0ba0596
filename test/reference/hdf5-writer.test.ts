// Our own HDF5 writer (src-main/io/hdf5-writer.ts), checked against h5py (Debian's python3-h5py,
// over the HDF5 C library): every value, type, shape, attribute and dimension label it wrote must
// come back unchanged, and the checksum function must agree with the one the HDF5 library writes.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { afterAll, describe, expect, it } from 'vitest';
import { lookup3, writeHdf5File } from '../../src-main/io/hdf5-writer';
import { PYTHON } from '../helpers/fixtures';

const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-h5w-'));
afterAll(() => fs.rmSync(dir, { recursive: true, force: true }));

function python(code: string, ...args: string[]): string {
  const p = spawnSync(PYTHON, ['-c', code, ...args], { encoding: 'utf8' });
  if (p.status !== 0) throw new Error(p.stderr);
  return p.stdout;
}

describe('HDF5 writer', () => {
  it('computes the metadata checksum the HDF5 library writes (lookup3 over a superblock h5py wrote)', () => {
    const ref = path.join(dir, 'ref.h5');
    // A superblock v2/3 ends with the library's lookup3 checksum of its first 44 bytes.
    python("import h5py,sys\nwith h5py.File(sys.argv[1],'w',libver='latest') as f: f['a']=[1.0]", ref);
    const raw = fs.readFileSync(ref);
    expect(raw[8]).toBeGreaterThanOrEqual(2);
    expect(lookup3(raw.subarray(0, 44))).toBe(raw.readUInt32LE(44));
  });

  it('writes groups, datasets of every number type, attributes and dimension labels that h5py reads back exactly', () => {
    const file = path.join(dir, 'w.h5');
    const long = 'λ'.repeat(40000); // longer than one object-header message could hold
    const f64 = Float64Array.from({ length: 24 }, (_, i) => (i - 7) / 3);
    f64[5] = NaN; f64[6] = Infinity; f64[7] = -0;
    writeHdf5File(file, {
      attrs: { title: 'héllo wörld', empty: '', count: 123456789012, ratio: 0.1, long, vector: Float64Array.from([1, 2.5, -3]), ints: Int32Array.from([7, -8]), names: ['a', 'bé'] },
      datasets: {
        images: { data: f64, shape: [2, 3, 4], dims: ['detector', 'scan_y', 'scan_x'], attrs: { units: 'counts', n: 3 } },
        'group/labels': { data: Int32Array.from([0, -1, 2147483647, -2147483648]), shape: [2, 2] },
        'group/deeper/f32': { data: Float32Array.from([1.5, -2.25, 3e38]), shape: [3] },
        'group/u8': { data: Uint8Array.from([0, 255]), shape: [2] },
        'group/u16': { data: Uint16Array.from([0, 65535]), shape: [2] },
        'group/i16': { data: Int16Array.from([-32768, 32767]), shape: [2] },
        'group/u32': { data: Uint32Array.from([0, 4294967295]), shape: [2] },
        'group/i8': { data: Int8Array.from([-128, 127]), shape: [2] },
        'none': { data: new Float64Array(0), shape: [0, 5] },
        'ünï': { data: Float64Array.from([42]), shape: [] },
      },
      groups: { group: { about: 'a group' }, 'empty/group': { note: 'nothing here' } },
    });
    const out = JSON.parse(python(`
import h5py, json, sys, math
def val(v):
    if hasattr(v, 'tolist'): v = v.tolist()
    if isinstance(v, float) and not math.isfinite(v): return repr(v)
    if isinstance(v, list): return [val(x) for x in v]
    return v
r = {'objects': {}}
with h5py.File(sys.argv[1], 'r') as f:
    def visit(name, o):
        e = {'attrs': {k: [val(v), type(v).__name__] for k, v in o.attrs.items()}}
        if isinstance(o, h5py.Dataset):
            e.update(dtype=o.dtype.str, shape=list(o.shape), data=val(o[()]), labels=[d.label for d in o.dims])
        r['objects'][name] = e
    f.visititems(visit)
    r['root'] = {k: [val(v), type(v).__name__] for k, v in f.attrs.items()}
    r['members'] = list(f.keys())
print(json.dumps(r))
`, file));
    expect(out.members.sort()).toEqual(['empty', 'group', 'images', 'none', 'ünï']);
    expect(out.root.title).toEqual(['héllo wörld', 'str']);
    expect(out.root.empty).toEqual(['', 'str']);
    expect(out.root.long[0]).toBe(long);
    expect(out.root.count).toEqual([123456789012, 'float64']);
    expect(out.root.ratio).toEqual([0.1, 'float64']);
    expect(out.root.vector).toEqual([[1, 2.5, -3], 'ndarray']);
    expect(out.root.ints).toEqual([[7, -8], 'ndarray']);
    expect(out.root.names[0]).toEqual(['a', 'bé']);
    const images = out.objects.images;
    expect(images.dtype).toBe('<f8');
    expect(images.shape).toEqual([2, 3, 4]);
    expect(images.labels).toEqual(['detector', 'scan_y', 'scan_x']);
    expect(images.attrs.units).toEqual(['counts', 'str']);
    expect(images.data.flat(2)).toEqual(Array.from(f64, (v) => (Number.isFinite(v) ? v : String(v === Infinity ? 'inf' : 'nan'))));
    expect(out.objects['group/labels']).toMatchObject({ dtype: '<i4', shape: [2, 2], data: [[0, -1], [2147483647, -2147483648]] });
    expect(out.objects['group/deeper/f32']).toMatchObject({ dtype: '<f4', data: [1.5, -2.25, Math.fround(3e38)] });
    expect(out.objects['group/u8']).toMatchObject({ dtype: '|u1', data: [0, 255] });
    expect(out.objects['group/u16']).toMatchObject({ dtype: '<u2', data: [0, 65535] });
    expect(out.objects['group/i16']).toMatchObject({ dtype: '<i2', data: [-32768, 32767] });
    expect(out.objects['group/u32']).toMatchObject({ dtype: '<u4', data: [0, 4294967295] });
    expect(out.objects['group/i8']).toMatchObject({ dtype: '|i1', data: [-128, 127] });
    expect(out.objects.none).toMatchObject({ shape: [0, 5], data: [] });
    expect(out.objects['ünï']).toMatchObject({ shape: [], data: 42 });
    expect(out.objects.group.attrs.about).toEqual(['a group', 'str']);
    expect(out.objects['empty/group'].attrs.note).toEqual(['nothing here', 'str']);
  });

  it('refuses a shape that does not match the data, and a path given twice', () => {
    const file = path.join(dir, 'bad.h5');
    expect(() => writeHdf5File(file, { datasets: { a: { data: new Float64Array(5), shape: [2, 3] } } })).toThrow(/has 5 values, its shape \[2, 3\] needs 6/);
    expect(() => writeHdf5File(file, { datasets: { a: { data: new Float64Array(1), shape: [1] }, 'a/b': { data: new Float64Array(1), shape: [1] } } })).toThrow(/passes through a dataset/);
  });
});
