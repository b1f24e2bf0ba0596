// Writes a demo scenario (samples/scenario.ts) as HDF5:
//   /scan/frames            (scan_y, scan_x, det_y, det_x) uint16, chunked one scan row per chunk
//   /truth/...              the ground truth the frames were made from
// The frames go through h5wasm in blocks of scan rows, because its heap is capped at 2 GiB
// and never shrinks.
import type h5wasm from 'h5wasm/node';
import { getH5 } from '../src-main/io/h5wasm-module';
import { OutputFile } from '../src-main/io/output-file';
import type { Shape4D } from '../src-shared/model/dataset';
import { CancelledError, InputError } from '../src-shared/model/errors';
import { DEFAULT_SEED, GENERATOR_NAME, GENERATOR_VERSION, SCENARIO_SIZES, Scenario, type SampleSizeName, type ScenarioAttributes } from './scenario';

export { SAMPLE_SIZE_NAMES, isSampleSizeName, type SampleSizeName } from './scenario';

export interface SampleSizeInfo {
  shape: Shape4D;
  /** Chunk shape of /scan/frames. */
  chunks: [number, number, number, number];
  /** gzip level, or null for uncompressed chunks (the benchmark size, so reads stream at disk speed). */
  gzipLevel: number | null;
  /** Size of the frames before compression, bytes. */
  rawBytes: number;
}

function sizeInfo(name: SampleSizeName, gzipLevel: number | null): SampleSizeInfo {
  const shape = SCENARIO_SIZES[name].shape;
  return {
    shape,
    chunks: [1, shape.scanX, shape.detY, shape.detX],
    gzipLevel,
    rawBytes: shape.scanY * shape.scanX * shape.detY * shape.detX * 2,
  };
}

export const SAMPLE_SIZES: Record<SampleSizeName, SampleSizeInfo> = {
  tiny: sizeInfo('tiny', 4),
  demo: sizeInfo('demo', 4),
  large: sizeInfo('large', null),
};

export const FRAMES_PATH = '/scan/frames';

export interface WriteSampleOptions {
  size: SampleSizeName;
  out: string;
  seed?: number;
  /** Called after each block of rows with the fraction done (0–1]. */
  onProgress?: (fraction: number) => void;
  /** Stops between blocks; nothing is left at `out` or at its .partial file. */
  signal?: AbortSignal;
}

/** Keeps each copy into h5wasm's heap modest, and progress reasonably frequent. */
const BLOCK_BYTES = 16 * 2 ** 20;
const MIN_PROGRESS_STEPS = 32;

export async function writeSample(opts: WriteSampleOptions): Promise<{ path: string; datasetPath: string; shape: Shape4D }> {
  const info = SAMPLE_SIZES[opts.size as SampleSizeName];
  if (!info) throw new InputError(`sample size "${opts.size}" is not known; expected one of ${Object.keys(SAMPLE_SIZES).join(', ')}`);
  const scenario = Scenario.create(opts.size, opts.seed ?? DEFAULT_SEED);
  const out = OutputFile.create(opts.out, { flag: '--out' });
  const { scanY, scanX, detY, detX } = info.shape;
  // Frames are uint16; gzip at least halves this scenario's frames (noise and empty detector areas).
  out.reserve((scanY * scanX * detY * detX * 2) / (info.gzipLevel === null ? 1 : 2));
  const file = await writeHdf5(out, (f) => writeContents(f, scenario, info, opts));
  return { path: file, datasetPath: FRAMES_PATH, shape: { ...info.shape } };
}

type H5File = InstanceType<typeof h5wasm.File>;

/**
 * Write through the HDF5 library (chunked, compressed frames need it; results use our own
 * writer) into the output's temporary file, renamed onto its target at the end.
 */
async function writeHdf5(out: OutputFile, fill: (f: H5File) => Promise<void>): Promise<string> {
  const { h5wasm: lib } = await getH5();
  return out.write(async (tmp) => {
    const f = new lib.File(tmp, 'w');
    let open = true;
    try {
      await fill(f);
      open = false;
      f.close();
    } finally {
      if (open) {
        try { f.close(); } catch { /* the write already failed; report that failure */ }
      }
    }
  });
}
type H5Group = InstanceType<typeof h5wasm.Group>;
type H5Dataset = InstanceType<typeof h5wasm.Dataset>;

async function writeContents(f: H5File, scenario: Scenario, info: SampleSizeInfo, opts: WriteSampleOptions): Promise<void> {
  const { scanY, scanX, detY, detX } = info.shape;
  f.create_attribute('generator', GENERATOR_NAME);
  f.create_attribute('generator_version', GENERATOR_VERSION, null, '<i');
  f.create_attribute('frames', FRAMES_PATH);

  const rowLength = scanX * detY * detX;
  const chunkRows = info.chunks[0];
  const fitRows = Math.max(1, Math.floor(BLOCK_BYTES / (rowLength * 2)));
  const blockRows = Math.max(chunkRows, Math.floor(Math.min(fitRows, Math.ceil(scanY / MIN_PROGRESS_STEPS)) / chunkRows) * chunkRows);
  const block = new Uint16Array(blockRows * rowLength);

  const scan = f.create_group('scan');
  let frames: H5Dataset | null = null;
  for (let row = 0; row < scanY; row += blockRows) {
    if (opts.signal?.aborted) throw new CancelledError('sample writing cancelled');
    const rows = Math.min(blockRows, scanY - row);
    const data = rows === blockRows ? block : block.subarray(0, rows * rowLength);
    scenario.renderRows(row, rows, data);
    if (!frames) {
      // h5wasm creates a dataset from data; the first block seeds it and the rest are resized in.
      frames = scan.create_dataset({
        name: 'frames', data, shape: [rows, scanX, detY, detX], maxshape: [scanY, scanX, detY, detX], dtype: '<H',
        chunks: info.chunks,
        ...(info.gzipLevel === null ? {} : { compression: 'gzip' as const, compression_opts: info.gzipLevel }),
      });
      frames.resize([scanY, scanX, detY, detX]);
    } else {
      frames.write_slice([[row, row + rows]], data);
    }
    opts.onProgress?.((row + rows) / scanY);
    // Lets timers, progress output and an abort signal through between blocks.
    await new Promise<void>((resolve) => setImmediate(resolve));
  }
  if (!frames) throw new Error('writeSample: the scan has no rows');
  ['scan_y', 'scan_x', 'det_y', 'det_x'].forEach((label, i) => frames!.set_dimension_label(i, label));
  writeAttributes(frames, scenario.attributes());

  writeTruth(f.create_group('truth'), scenario);
  f.flush();
}

function writeAttributes(target: H5Dataset | H5Group, attrs: ScenarioAttributes): void {
  for (const [name, value] of Object.entries(attrs)) {
    if (name === 'seed') target.create_attribute(name, value as number, null, '<I');
    else if (name === 'generator_version') target.create_attribute(name, value as number, null, '<i');
    else if (Array.isArray(value)) target.create_attribute(name, Float64Array.from(value), [value.length], '<d');
    else if (typeof value === 'number') target.create_attribute(name, value, null, '<d');
    else target.create_attribute(name, value);
  }
}

function writeTruth(truth: H5Group, scenario: Scenario): void {
  const t = scenario.truth;
  const { scanY, scanX } = scenario.shape;
  const map = (name: string, data: Float64Array | Int32Array, units: string, description: string) => {
    const ds = truth.create_dataset({ name, data, shape: [scanY, scanX], dtype: data instanceof Int32Array ? '<i' : '<d' });
    ds.create_attribute('units', units);
    ds.create_attribute('description', description);
    return ds;
  };
  truth.create_attribute('description', 'ground truth of the scenario the frames were generated from; scan maps are (scan_y, scan_x), detector coordinates are (y, x) in px');
  truth.create_attribute('disk_radius_px', t.diskRadiusPx, null, '<d');
  truth.create_attribute('beam_counts', t.beamCounts, null, '<d');
  map('grain_map', t.grainMap, 'id', '0 = vacuum, -1 = amorphous support only, 1.. = grain id (the majority grain where the probe straddles a boundary)');
  map('field_shift_x', t.fieldShiftX, 'detector px', 'shift of the whole pattern along det_x caused by the in-plane field');
  map('field_shift_y', t.fieldShiftY, 'detector px', 'shift of the whole pattern along det_y caused by the in-plane field');
  map('thickness', t.thickness, 'nm', 'crystalline film thickness (0 in vacuum and over bare support)');
  map('support_thickness', t.supportThickness, 'nm', 'amorphous support thickness (0 in vacuum)');

  const center = truth.create_dataset({ name: 'disk_center', data: Float64Array.from(t.diskCenter), shape: [2], dtype: '<d' });
  center.create_attribute('order', 'y,x');
  center.create_attribute('units', 'detector px');
  center.create_attribute('disk_radius_px', t.diskRadiusPx, null, '<d');

  const pixels = (name: string, data: Int32Array, description: string) => {
    const ds = truth.create_dataset({ name, data, shape: [data.length / 2, 2], dtype: '<i' });
    ds.create_attribute('order', 'y,x');
    ds.create_attribute('description', description);
  };
  pixels('hot_pixels', t.hotPixels, 'detector pixels that read very high in every pattern');
  pixels('dead_pixels', t.deadPixels, 'detector pixels that read 0 in every pattern');

  const nDisks = t.braggDiskGrain.length;
  const disks = truth.create_dataset({ name: 'bragg_disk_center', data: t.braggDiskCenter, shape: [nDisks, 2], dtype: '<d' });
  disks.create_attribute('order', 'y,x');
  disks.create_attribute('description', 'centre of every Bragg disk drawn, before any field shift');
  truth.create_dataset({ name: 'bragg_disk_grain', data: t.braggDiskGrain, shape: [nDisks], dtype: '<i' });
  const ring = truth.create_dataset({ name: 'bragg_disk_ring', data: t.braggDiskRing, shape: [nDisks], dtype: '<i' });
  ring.create_attribute('description', '0 = {200}, 1 = {220}, 2 = {400}');
  const rot = truth.create_dataset({ name: 'grain_rotation_deg', data: t.grainRotationDeg, shape: [t.grainRotationDeg.length], dtype: '<d' });
  rot.create_attribute('description', 'in-plane rotation of grain i + 1');
}
