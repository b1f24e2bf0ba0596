// The session file, NAME.scanfold.h5: one HDF5 file a colleague reopens and a Python user reads
// with h5py alone.
//   /                 attributes format, format_version, scanfold_version, created, modified,
//                     and session_json: the whole session document (model/session.ts)
//   /datasets/ID      one group per dataset used, its reference as attributes
//   /results/KEY      one group per result: its arrays laid out as the command's output file
//                     lays them out (./result-arrays.ts), each with units and dimension labels;
//                     attributes method, dataset, request_json (the recipe), result_json (every
//                     value that is not an array), scanfold_version, created, input_fingerprint
// Written through OutputFile (a private temporary file beside it, synced, renamed over the old
// one), so a crash at any moment of a save leaves the previous session whole.
import type { H5AttrValue, H5DatasetInput } from '../io/hdf5-writer';
import { writeHdf5File } from '../io/hdf5-writer';
import type { OutputFile } from '../io/output-file';
import { getH5 } from '../io/h5wasm-module';
import { checkInputFile } from '../io/input-file';
import { InputError } from '../../src-shared/model/errors';
import { SESSION_FORMAT, type SessionDocument, type SessionMethod } from '../../src-shared/model/session';
import { validateSessionDocument } from '../../src-shared/contract/validate';
import { joinResult, resultArrays, splitResult } from '../io/result-arrays';

/** A result with the method that made it, by session key. */
export type SessionResults = Map<string, { method: SessionMethod; result: unknown }>;

export async function writeSessionFile(out: OutputFile, doc: SessionDocument, results: SessionResults): Promise<string> {
  const datasets: Record<string, H5DatasetInput> = {};
  const groups: Record<string, Record<string, H5AttrValue>> = {};
  for (const d of doc.datasets) {
    groups[`datasets/${d.id}`] = {
      name: d.name, absolute_path: d.absolutePath, relative_path: d.relativePath, format: d.format, dataset_path: d.datasetPath ?? '',
      shape_scan_y_scan_x_det_y_det_x: Float64Array.of(d.shape.scanY, d.shape.scanX, d.shape.detY, d.shape.detX), dtype: d.dtype, byte_size: d.byteSize,
      fingerprint: d.fingerprint,
    };
  }
  const refs = new Map(doc.datasets.map((d) => [d.id, d]));
  for (const e of doc.entries) {
    const kept = results.get(e.key);
    if (!kept) throw new Error(`session: no result for ${e.key}`);
    const { arrays, json } = splitResult(e.method, kept.result);
    for (const [name, a] of Object.entries(arrays)) {
      datasets[`results/${e.key}/${name}`] = { data: a.data, shape: a.shape, ...(a.dims ? { dims: a.dims } : {}), ...(a.attrs ? { attrs: a.attrs } : {}) };
    }
    groups[`results/${e.key}`] = {
      method: e.method, dataset: e.dataset, source_path: refs.get(e.dataset)?.absolutePath ?? '', request_json: JSON.stringify(e.request), result_json: json,
      scanfold_version: e.scanfoldVersion, created: e.created, input_fingerprint: e.fingerprint,
    };
  }
  if (!doc.entries.length) groups.results = {};
  return out.write((tmp) => writeHdf5File(tmp, {
    attrs: {
      format: SESSION_FORMAT, format_version: doc.formatVersion, scanfold_version: doc.scanfoldVersion, created: doc.created, modified: doc.modified,
      about: 'A Scanfold session: /datasets holds the data used, /results one group per result (arrays with units; the request that made it as request_json). Results are exploratory.',
      session_json: JSON.stringify(doc),
    },
    datasets, groups,
  }));
}

interface H5Node { attrs?: Record<string, { value: unknown }>; value?: unknown; keys?: () => string[]; shape?: number[] | null }

/** The most values one result array may hold (2 GiB of float64): a damaged or hostile file cannot make the engine allocate more. */
const MAX_ARRAY_VALUES = 2 ** 28;

/** Whether `path` is an HDF5 file whose root says it is a Scanfold session (false for anything else, or unreadable). */
export async function isSessionFile(path: string): Promise<boolean> {
  const { h5wasm } = await getH5();
  try {
    const f = new h5wasm.File(path, 'r');
    try { return (f as unknown as H5Node).attrs?.format?.value === SESSION_FORMAT; } finally { f.close(); }
  } catch {
    return false;
  }
}

/** Read a session file: its document (validated, upgraded) and every result, rebuilt exactly. */
export async function readSessionFile(path: string): Promise<{ path: string; doc: SessionDocument; results: SessionResults }> {
  return readSession(path, true);
}

/**
 * A session file's document, checked as far as it can be without reading any array: the
 * document valid, every listed result's group present with its result_json, every array's
 * shape within bounds (a truncated file does not open at all). For listing recovery files at
 * start-up, where reading every array of every file took ~0.05–0.1 s per 17 MB; the arrays are
 * checked when the session is opened.
 */
export async function readSessionDocument(path: string): Promise<{ path: string; doc: SessionDocument }> {
  return readSession(path, false);
}

async function readSession(path: string, withArrays: boolean): Promise<{ path: string; doc: SessionDocument; results: SessionResults }> {
  const abs = checkInputFile(path, 'a session file (NAME.scanfold.h5)').path;
  const { h5wasm } = await getH5();
  let f: InstanceType<typeof h5wasm.File>;
  try {
    f = new h5wasm.File(abs, 'r');
  } catch {
    throw new InputError(`${abs}: not an HDF5 file; expected a session file written by Scanfold`, 'bad-session');
  }
  try {
    const attrs = (f as unknown as H5Node).attrs ?? {};
    if (attrs.format?.value !== SESSION_FORMAT || typeof attrs.session_json?.value !== 'string') {
      throw new InputError(`${abs}: an HDF5 file, but not a Scanfold session (no format = "${SESSION_FORMAT}" and session_json attributes)`, 'bad-session');
    }
    let raw: unknown;
    try {
      raw = JSON.parse(attrs.session_json.value);
    } catch {
      throw new InputError(`${abs}: the session document (session_json) is not valid JSON; the file is damaged`, 'bad-session');
    }
    const doc = validateSessionDocument(raw, abs);
    const results: SessionResults = new Map();
    for (const e of doc.entries) {
      const g = f.get(`results/${e.key}`) as unknown as H5Node | null;
      const json = g?.attrs?.result_json?.value;
      if (!g || typeof json !== 'string') throw new InputError(`${abs}: result ${e.key} is listed but /results/${e.key} is missing or lacks result_json`, 'bad-session');
      const arrays: Record<string, ArrayLike<number>> = {};
      for (const name of g.keys?.() ?? []) {
        const d = f.get(`results/${e.key}/${name}`) as unknown as H5Node | null;
        const count = (d?.shape ?? []).reduce((p, n) => p * n, 1);
        if (count > MAX_ARRAY_VALUES) throw new InputError(`${abs}: /results/${e.key}/${name} claims ${count} values, more than a result holds; the file is damaged`, 'bad-session');
        if (!withArrays) continue;
        const v = d?.value;
        if (v && (ArrayBuffer.isView(v) || Array.isArray(v))) arrays[name] = v as ArrayLike<number>;
      }
      if (!withArrays) {
        try { JSON.parse(json); } catch { throw new InputError(`${abs}: result ${e.key}: its result_json is not valid JSON; the file is damaged`, 'bad-session'); }
        continue;
      }
      let result: unknown;
      try {
        result = joinResult(json, arrays);
        // Every array where the layout of its kind says, of the size its shape says.
        for (const [name, a] of Object.entries(resultArrays(e.method, result))) {
          const want = a.shape.reduce((p, n) => p * n, 1);
          if (a.data.length !== want) throw new Error(`${name} holds ${a.data.length} values, its shape ${a.shape.join('×')} needs ${want}`);
        }
      } catch (err) {
        throw new InputError(`${abs}: result ${e.key}: ${(err as Error).message}; the file is damaged`, 'bad-session');
      }
      results.set(e.key, { method: e.method, result });
    }
    return { path: abs, doc, results };
  } finally {
    f.close();
  }
}
