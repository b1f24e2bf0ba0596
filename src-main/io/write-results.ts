import { getH5, type H5Lib } from './h5wasm-module';
import type { OutputFile } from './output-file';

export type H5File = InstanceType<H5Lib['File']>;

/**
 * Write a new HDF5 file through `fill` into the output's temporary file; the output renames it
 * onto its target at the end, so a failure (or a cancel) leaves nothing behind.
 */
export async function writeHdf5(out: OutputFile, fill: (f: H5File, h5wasm: H5Lib) => Promise<void> | void): Promise<string> {
  const { h5wasm } = await getH5();
  return out.write(async (tmp) => {
    const f = new h5wasm.File(tmp, 'w');
    let open = true;
    try {
      await fill(f, h5wasm);
      open = false;
      f.close();
    } finally {
      if (open) {
        try { f.close(); } catch { /* the write already failed; report that failure */ }
      }
    }
  });
}

export interface ResultArray {
  /** float64, or int32 for labels. */
  data: Float64Array | Int32Array;
  shape: number[];
  attrs?: Record<string, string | number>;
  /** Dimension labels (HDF5 dimension scales' labels, as h5py's dims[i].label reads them). */
  dims?: string[];
}

export interface WrittenResults {
  path: string;
  /** NaN or ±Inf values in each written array (overflowed sums, empty divisions), by name; only non-zero counts. */
  nonFiniteResults: Record<string, number>;
}

/**
 * Write float64 result arrays (and attributes on the root group) to a new HDF5 file. Every
 * array's count of NaN/±Inf values is stored as its `non_finite_results` attribute and summed
 * in the root's `non_finite_results`, so an overflow never passes unnoticed.
 */
export async function writeFloat64Results(out: OutputFile, arrays: Record<string, ResultArray>, rootAttrs: Record<string, string | number> = {}): Promise<WrittenResults> {
  const nonFiniteResults: Record<string, number> = {};
  let total = 0;
  for (const [name, a] of Object.entries(arrays)) {
    const n = countNonFinite(a.data);
    if (n > 0) nonFiniteResults[name] = n;
    total += n;
  }
  const path = await writeHdf5(out, (f) => {
    for (const [k, v] of Object.entries(rootAttrs)) writeAttr(f, k, v);
    writeAttr(f, 'non_finite_results', total);
    for (const [name, a] of Object.entries(arrays)) {
      // '<d' is h5wasm's spelling of float64 (it reads '<f8' as float32); '<i' is int32.
      const ds = f.create_dataset({ name, data: a.data, shape: a.shape, dtype: a.data instanceof Int32Array ? '<i' : '<d' });
      for (const [k, v] of Object.entries(a.attrs ?? {})) writeAttr(ds, k, v);
      (a.dims ?? []).forEach((label, i) => ds.set_dimension_label(i, label));
      writeAttr(ds, 'non_finite_results', nonFiniteResults[name] ?? 0);
    }
  });
  return { path, nonFiniteResults };
}

export function countNonFinite(a: ArrayLike<number>): number {
  let n = 0;
  for (let i = 0; i < a.length; i++) if (!Number.isFinite(a[i])) n++;
  return n;
}

/**
 * Numbers are written as float64 whatever their value: h5wasm would guess int32 for whole
 * numbers, which wraps large counts and makes an attribute's type depend on its value.
 */
function writeAttr(target: { create_attribute: H5File['create_attribute'] }, key: string, value: string | number): void {
  if (typeof value === 'number') target.create_attribute(key, value, null, '<d');
  else target.create_attribute(key, value);
}
