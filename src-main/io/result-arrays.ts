// How each kind of result is laid out as HDF5 datasets: names, shapes, dimension labels and
// units, the same in a command's output file and in a session file's result group, so a Python
// user finds the same arrays in both. splitResult / joinResult turn a result object into those
// arrays plus a JSON text of everything else, and back, exactly.
import type { H5Data } from './hdf5-writer';
import type {
  ComFieldResult, FitResult, KmeansResult, PcaResult, RegionPatternResult, VirtualImagesResult,
} from '../../src-shared/contract/service';
import type { SessionMethod } from '../../src-shared/model/session';

export interface ResultArray {
  data: H5Data;
  shape: number[];
  dims?: string[];
  attrs?: Record<string, string | number>;
}

/** A result array and where it sits in the result object (a list of equal arrays is stacked along a first axis). */
interface Placed extends ResultArray {
  field: (string | number)[];
  stacked?: boolean;
}

type Layout = (r: never) => Record<string, Placed>;

const SCAN = ['scan_y', 'scan_x'];
const DET = ['det_y', 'det_x'];

function stack(list: Float64Array[]): Float64Array {
  const n = list[0]?.length ?? 0;
  const all = new Float64Array(list.length * n);
  list.forEach((a, k) => all.set(a, k * n));
  return all;
}

const LAYOUTS: Record<SessionMethod, Layout> = {
  virtualImages: (r: VirtualImagesResult) => {
    const { scanY, scanX } = r.descriptor.shape;
    const attrs: Record<string, string | number> = { units: 'counts (sum over the detector)', detectors: JSON.stringify(r.labels) };
    r.labels.forEach((label, k) => { attrs[`detector_${k}`] = label; });
    return { images: { data: stack(r.images), shape: [r.images.length, scanY, scanX], dims: ['detector', ...SCAN], attrs, field: ['images'], stacked: true } };
  },
  comField: (r: ComFieldResult) => {
    const out: Record<string, Placed> = {};
    for (const [name, m] of Object.entries(r.maps)) {
      out[name] = { data: m.data, shape: [r.scanY, r.scanX], dims: SCAN, attrs: { units: m.units, ...(m.note ? { method: m.note } : {}) }, field: ['maps', name, 'data'] };
    }
    return out;
  },
  calibrate: () => ({}),
  regionPattern: (r: RegionPatternResult) => {
    const { detY, detX } = r.descriptor.shape;
    return {
      mean_pattern: { data: r.mean, shape: [detY, detX], dims: DET, attrs: { units: 'counts per pattern' }, field: ['mean'] },
      max_pattern: { data: r.max, shape: [detY, detX], dims: DET, attrs: { units: 'counts' }, field: ['max'] },
    };
  },
  pca: (r: PcaResult) => {
    const f = r.features;
    const { scanY, scanX } = r.descriptor.shape;
    const [ly, lx] = r.preview ? [r.preview.qY, r.preview.qX] : [scanY, scanX];
    const binned = ['det_y_binned', 'det_x_binned'];
    return {
      singular_values: { data: r.singularValues, shape: [r.k], dims: ['component'], attrs: { units: 'feature units (after scaling)' }, field: ['singularValues'] },
      explained_variance_ratio: { data: r.explainedVarianceRatio, shape: [r.k], dims: ['component'], attrs: { units: 'fraction of the total variance' }, field: ['explainedVarianceRatio'] },
      components: {
        data: r.components, shape: [r.k, f.outY, f.outX], dims: ['component', ...binned], field: ['components'],
        attrs: { units: 'unit vector over the features', note: 'NaN where a detector bin was left out; each component\'s largest entry is positive' },
      },
      loadings: {
        data: r.loadings, shape: [r.k, ly, lx], dims: ['component', ...(r.preview ? ['scan_y_binned', 'scan_x_binned'] : SCAN)], field: ['loadings'],
        attrs: { units: 'feature units (coordinate along the component)' },
      },
      mean_pattern: { data: r.meanPattern, shape: [f.outY, f.outX], dims: binned, attrs: { units: 'feature units (after scaling)', note: 'NaN where a detector bin was left out' }, field: ['meanPattern'] },
    };
  },
  kmeans: (r: KmeansResult) => {
    const f = r.features;
    const pv = r.preview;
    const { scanY, scanX, detY, detX } = r.descriptor.shape;
    const [ly, lx, py, px] = pv ? [pv.qY, pv.qX, pv.pY, pv.pX] : [scanY, scanX, detY, detX];
    return {
      labels: { data: r.labels, shape: [ly, lx], dims: pv ? ['scan_y_binned', 'scan_x_binned'] : SCAN, attrs: { units: 'cluster index, 0 … k − 1' }, field: ['labels'] },
      centers: {
        data: r.centers, shape: [r.k, f.components], dims: ['cluster', f.kind === 'pca' ? 'component' : 'feature'], field: ['centers'],
        attrs: { units: f.kind === 'pca' ? 'coordinates along the principal components (feature units)' : 'feature units (the binned detector, bins left out skipped)' },
      },
      cluster_patterns: {
        data: r.clusterPatterns, shape: [r.k, py, px], dims: pv ? ['cluster', 'det_y_binned', 'det_x_binned'] : ['cluster', ...DET], field: ['clusterPatterns'],
        attrs: { units: pv ? 'counts per detector bin (mean over the cluster, preview cube)' : 'counts per pattern (mean over the cluster, full resolution)' },
      },
      sizes: { data: r.sizes, shape: [r.k], dims: ['cluster'], attrs: { units: 'probe positions' }, field: ['sizes'] },
    };
  },
  fit: (r: FitResult) => {
    const f = r.features;
    const { scanY, scanX } = r.descriptor.shape;
    return {
      coefficients: { data: r.coefficients, shape: [r.r, scanY, scanX], dims: ['reference', ...SCAN], attrs: { units: 'weight of the reference (1 = the reference itself)' }, field: ['coefficients'] },
      residual: { data: r.residual, shape: [scanY, scanX], dims: SCAN, attrs: { units: 'relative residual norm ‖f − Σ c_i r_i‖ / ‖f‖', note: 'NaN where the pattern is all zero (nothing to explain)' }, field: ['residual'] },
      references: {
        data: r.references, shape: [r.r, f.outY, f.outX], dims: ['reference', 'det_y_binned', 'det_x_binned'], field: ['references'],
        attrs: { units: 'feature units (after scaling)', note: 'NaN where a detector bin was left out' },
      },
    };
  },
};

/** The arrays of a result, by dataset name, as output files and session result groups hold them. */
export function resultArrays(method: SessionMethod, result: unknown): Record<string, ResultArray> {
  const placed = LAYOUTS[method](result as never);
  return Object.fromEntries(Object.entries(placed).map(([name, { field: _f, stacked: _s, ...a }]) => [name, a]));
}

const TYPED = { Float64Array, Float32Array, Int32Array, Uint32Array, Int16Array, Uint16Array, Int8Array, Uint8Array } as const;
type TypedName = keyof typeof TYPED;

/** A marker left in the JSON where an array was taken out. */
interface ArrayMarker { $array: string; type: TypedName; stacked?: number }

/**
 * A result as arrays (named and shaped as resultArrays lays them out; any other typed array by
 * its path) and a JSON text of the rest, with markers where the arrays were.
 */
export function splitResult(method: SessionMethod, result: unknown): { arrays: Record<string, ResultArray>; json: string } {
  const placed = LAYOUTS[method](result as never);
  const byField = new Map<string, [string, Placed]>(Object.entries(placed).map(([name, p]) => [JSON.stringify(p.field), [name, p]]));
  const arrays: Record<string, ResultArray> = {};
  const walk = (v: unknown, path: (string | number)[]): unknown => {
    const hit = byField.get(JSON.stringify(path));
    if (hit) {
      const [name, { field: _f, stacked, ...a }] = hit;
      arrays[name] = a;
      if (stacked) return { $array: name, type: 'Float64Array', stacked: (v as unknown[]).length } satisfies ArrayMarker;
      return { $array: name, type: (v as H5Data).constructor.name as TypedName } satisfies ArrayMarker;
    }
    if (ArrayBuffer.isView(v)) {
      const name = path.join('_');
      arrays[name] = { data: v as H5Data, shape: [(v as H5Data).length] };
      return { $array: name, type: v.constructor.name as TypedName } satisfies ArrayMarker;
    }
    if (Array.isArray(v)) return v.map((x, i) => walk(x, [...path, i]));
    if (v !== null && typeof v === 'object') return Object.fromEntries(Object.entries(v).map(([k, x]) => [k, walk(x, [...path, k])]));
    // JSON has no NaN or ±Infinity (a result may hold them: an empty cluster's inertia share…).
    if (typeof v === 'number' && !Number.isFinite(v)) return { $number: String(v) };
    return v;
  };
  const rest = walk(result, []);
  return { arrays, json: JSON.stringify(rest) };
}

/** The result object back from splitResult's JSON and the arrays read by name. */
export function joinResult(json: string, arrays: Record<string, ArrayLike<number>>): unknown {
  const walk = (v: unknown): unknown => {
    if (Array.isArray(v)) return v.map(walk);
    if (v === null || typeof v !== 'object') return v;
    if (typeof (v as { $number?: unknown }).$number === 'string') return Number((v as { $number: string }).$number);
    const m = v as Partial<ArrayMarker>;
    if (typeof m.$array === 'string') {
      const data = Object.hasOwn(arrays, m.$array) ? arrays[m.$array] : undefined;
      if (!data) throw new Error(`the array ${m.$array} is missing`);
      const Ctor = Object.hasOwn(TYPED, String(m.type)) ? TYPED[m.type as TypedName] : undefined;
      if (!Ctor) throw new Error(`the array ${m.$array} has an unknown type ${String(m.type)}`);
      const typed = data instanceof Ctor ? data : Ctor.from(data);
      if (m.stacked === undefined) return typed;
      const n = m.stacked > 0 ? typed.length / m.stacked : 0;
      return Array.from({ length: m.stacked }, (_, k) => typed.slice(k * n, (k + 1) * n));
    }
    return Object.fromEntries(Object.entries(v).map(([k, x]) => [k, walk(x)]));
  };
  return walk(JSON.parse(json));
}
