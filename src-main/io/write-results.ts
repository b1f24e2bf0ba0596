import fs from 'node:fs';
import path from 'node:path';
import { getH5, type H5Lib } from './h5wasm-module';

export type H5File = InstanceType<H5Lib['File']>;

/**
 * Create a new HDF5 file through `fill`. Written to OUT.partial and renamed at the end, so a
 * failure (or a cancel) leaves nothing at `out`.
 */
export async function writeHdf5Atomically(out: string, fill: (f: H5File, h5wasm: H5Lib) => Promise<void> | void): Promise<string> {
  const { h5wasm } = await getH5();
  const file = path.resolve(out);
  const partial = file + '.partial';
  fs.rmSync(partial, { force: true });
  const f = new h5wasm.File(partial, 'w');
  let open = true;
  try {
    await fill(f, h5wasm);
    f.close();
    open = false;
    fs.renameSync(partial, file);
  } catch (e) {
    if (open) f.close();
    fs.rmSync(partial, { force: true });
    throw e;
  }
  return file;
}

export interface ResultArray {
  data: Float64Array;
  shape: number[];
  attrs?: Record<string, string | number>;
}

/** Write float64 result arrays (and attributes on the root group) to a new HDF5 file. */
export async function writeFloat64Results(out: string, arrays: Record<string, ResultArray>, rootAttrs: Record<string, string | number> = {}): Promise<void> {
  await writeHdf5Atomically(out, (f) => {
    for (const [k, v] of Object.entries(rootAttrs)) writeAttr(f, k, v);
    for (const [name, a] of Object.entries(arrays)) {
      // '<d' is h5wasm's spelling of float64; it reads '<f8' as float32.
      const ds = f.create_dataset({ name, data: a.data, shape: a.shape, dtype: '<d' });
      for (const [k, v] of Object.entries(a.attrs ?? {})) writeAttr(ds, k, v);
    }
  });
}

/**
 * Numbers are written as float64 whatever their value: h5wasm would guess int32 for whole
 * numbers, which wraps large counts and makes an attribute's type depend on its value.
 */
function writeAttr(target: { create_attribute: H5File['create_attribute'] }, key: string, value: string | number): void {
  if (typeof value === 'number') target.create_attribute(key, value, null, '<d');
  else target.create_attribute(key, value);
}
