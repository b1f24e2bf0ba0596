import { writeHdf5File, type H5DatasetInput } from './hdf5-writer';
import type { OutputFile } from './output-file';
import type { ResultArray } from './result-arrays';

export type { ResultArray };

export interface WrittenResults {
  path: string;
  /** NaN or ±Inf values in each written array (overflowed sums, empty divisions), by name; only non-zero counts. */
  nonFiniteResults: Record<string, number>;
}

/**
 * Write result arrays (float64; int32 for labels and counts) (and attributes on the root group) to a new HDF5 file. Every
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
  // Numbers are written as float64 whatever their value (a whole number is not guessed to be an
  // integer), so an attribute's type never depends on its value.
  const datasets: Record<string, H5DatasetInput> = {};
  for (const [name, a] of Object.entries(arrays)) {
    datasets[name] = { data: a.data, shape: a.shape, dims: a.dims, attrs: { ...(a.attrs ?? {}), non_finite_results: nonFiniteResults[name] ?? 0 } };
  }
  const path = await out.write((tmp) => writeHdf5File(tmp, { attrs: { ...rootAttrs, non_finite_results: total }, datasets }));
  return { path, nonFiniteResults };
}

export function countNonFinite(a: ArrayLike<number>): number {
  let n = 0;
  for (let i = 0; i < a.length; i++) if (!Number.isFinite(a[i])) n++;
  return n;
}
