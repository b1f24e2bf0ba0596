// The demo-data generator: determinism, independence from row blocking, a file h5py reads
// as we describe it, and ground truth that the frames actually obey.
import { execFileSync } from 'node:child_process';
import crypto from 'node:crypto';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { CancelledError, InputError } from '../../src-shared/model/errors';
import { SCENARIO_SIZES, Scenario, deterministicCos, deterministicExp, poissonCount } from '../../samples/scenario';
import { SAMPLE_SIZES, writeSample } from '../../samples/write-sample';

const PYTHON = '/usr/bin/python3';

// Everything a reader of the file needs, as h5py and NumPy see it.
const DESCRIBE_WITH_H5PY = `
import sys, json, hashlib, h5py, numpy as np
def plain(v):
    if isinstance(v, bytes): return v.decode()
    if isinstance(v, np.ndarray): return [plain(x) for x in v.tolist()]
    if isinstance(v, np.generic): return v.item()
    return v
with h5py.File(sys.argv[1], 'r') as f:
    d = f['scan/frames']
    out = {
        'shape': list(d.shape), 'dtype': d.dtype.str, 'chunks': list(d.chunks) if d.chunks else None,
        'compression': d.compression, 'compression_opts': d.compression_opts,
        'dim_labels': [dim.label for dim in d.dims],
        'attrs': {k: plain(v) for k, v in d.attrs.items() if k != 'DIMENSION_LABELS'},
        'attr_dtypes': {k: np.asarray(v).dtype.str for k, v in d.attrs.items() if not isinstance(v, str)},
        'frames_sha256': hashlib.sha256(np.ascontiguousarray(d[...], dtype='<u2').tobytes()).hexdigest(),
        'truth': {k: {'shape': list(v.shape), 'dtype': v.dtype.str, 'values': plain(v[...])} for k, v in f['truth'].items()},
        'truth_attrs': {k: plain(v) for k, v in f['truth'].attrs.items()},
    }
print(json.dumps(out))
`;

interface H5pyView {
  shape: number[]; dtype: string; chunks: number[] | null; compression: string | null; compression_opts: number | null;
  dim_labels: string[]; attrs: Record<string, unknown>; attr_dtypes: Record<string, string>; frames_sha256: string;
  truth: Record<string, { shape: number[]; dtype: string; values: unknown }>; truth_attrs: Record<string, unknown>;
}

function describeWithH5py(file: string): H5pyView {
  return JSON.parse(execFileSync(PYTHON, ['-c', DESCRIBE_WITH_H5PY, file], { encoding: 'utf8', maxBuffer: 64 * 2 ** 20 }));
}

function sha256(a: Uint16Array): string {
  return crypto.createHash('sha256').update(Buffer.from(a.buffer, a.byteOffset, a.byteLength)).digest('hex');
}

let dir: string;
beforeAll(() => { dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-sample-')); });
afterAll(() => { fs.rmSync(dir, { recursive: true, force: true }); });

describe('sample generator: determinism', () => {
  it('writes identical frames for the same seed and different frames for another seed', async () => {
    const a = await writeSample({ size: 'tiny', out: path.join(dir, 'a.h5'), seed: 7 });
    const b = await writeSample({ size: 'tiny', out: path.join(dir, 'b.h5'), seed: 7 });
    const c = await writeSample({ size: 'tiny', out: path.join(dir, 'c.h5'), seed: 8 });
    const [va, vb, vc] = [a, b, c].map((r) => describeWithH5py(r.path));
    expect(va.frames_sha256).toBe(vb.frames_sha256);
    expect(vc.frames_sha256).not.toBe(va.frames_sha256);
    // The seed chooses the noise; the specimen is the same.
    expect(vc.truth.grain_map.values).toEqual(va.truth.grain_map.values);
    // reference: h5py reads back exactly what the scenario renders in memory
    expect(va.frames_sha256).toBe(sha256(Scenario.create('tiny', 7).renderRows(0, SCENARIO_SIZES.tiny.shape.scanY)));
  });

  it('gives the same pattern however the scan rows are blocked, and in any order', () => {
    const { scanY, scanX, detY, detX } = SCENARIO_SIZES.tiny.shape;
    const all = Scenario.create('tiny', 3).renderRows(0, scanY);
    const oneByOne = Scenario.create('tiny', 3);
    const rowLength = scanX * detY * detX;
    for (let y = scanY - 1; y >= 0; y--) {
      expect(sha256(oneByOne.renderRows(y, 1))).toBe(sha256(all.subarray(y * rowLength, (y + 1) * rowLength)));
    }
    const uneven = Scenario.create('tiny', 3);
    const parts = [uneven.renderRows(5, 3), uneven.renderRows(0, 2), uneven.renderRows(2, 3)];
    const joined = new Uint16Array(all.length);
    joined.set(parts[1], 0); joined.set(parts[2], 2 * rowLength); joined.set(parts[0], 5 * rowLength);
    expect(sha256(joined)).toBe(sha256(all));
  });
});

describe('sample generator: the noise', () => {
  // Evenly spaced draws make the sample's distribution the sampler's quantile function itself.
  const DRAWS = 1 << 16;
  const counts = (lambda: number) => Array.from({ length: DRAWS }, (_, i) => poissonCount(lambda, Math.floor(((i + 0.5) * 2 ** 32) / DRAWS)));
  const moments = (xs: number[]) => {
    const mean = xs.reduce((a, b) => a + b, 0) / xs.length;
    return { mean, variance: xs.reduce((a, b) => a + (b - mean) ** 2, 0) / xs.length };
  };

  it('draws exact Poisson probabilities for small means', () => {
    for (const lambda of [0.0625, 0.5, 1, 3.5, 10, 24.75]) {
      const xs = counts(lambda);
      const freq = new Map<number, number>();
      for (const n of xs) freq.set(n, (freq.get(n) ?? 0) + 1);
      let pmf = Math.exp(-lambda);
      for (let n = 0; n < lambda + 10 * Math.sqrt(lambda) + 10; n++) {
        // reference: analytic Poisson pmf e^−λ λⁿ / n!, by the JS engine's Math.exp
        expect(Math.abs((freq.get(n) ?? 0) / DRAWS - pmf)).toBeLessThan(2 / DRAWS);
        pmf *= lambda / (n + 1);
      }
    }
  });

  it('keeps the Poisson mean and variance between table points and for large means', () => {
    for (const lambda of [0.013, 2.03, 17.3, 31.99, 32, 140.6, 6000]) {
      const { mean, variance } = moments(counts(lambda));
      // reference: analytic — Poisson mean and variance are both λ; blending neighbouring
      // tables adds at most 1/1024 to the variance, the normal approximation's rounding 1/12
      expect(Math.abs(mean - lambda)).toBeLessThan(1e-3 * Math.sqrt(lambda) + 1e-4);
      expect(Math.abs(variance - lambda)).toBeLessThan(3e-3 * lambda + (lambda < 32 ? 1 / 1024 : 1 / 12) + 1e-4);
    }
  });

  it('computes exp and cos with basic arithmetic as the JS engine does', () => {
    for (const x of [-60, -7.25, -1, -1e-3, 0, 0.3, 2.5, 30]) {
      // reference: the JS engine's Math.exp / Math.cos
      expect(Math.abs(deterministicExp(x) / Math.exp(x) - 1)).toBeLessThan(1e-13);
      expect(Math.abs(deterministicCos(x) - Math.cos(x))).toBeLessThan(1e-13);
    }
  });
});

describe('sample generator: the file', () => {
  it('is read by h5py with the layout, attributes and truth we describe', async () => {
    const r = await writeSample({ size: 'tiny', out: path.join(dir, 'layout.h5'), seed: 11 });
    expect(r.datasetPath).toBe('/scan/frames');
    const scenario = Scenario.create('tiny', 11);
    const { scanY, scanX, detY, detX } = scenario.shape;
    expect(r.shape).toEqual(scenario.shape);
    // reference: h5py can open what we wrote
    const v = describeWithH5py(r.path);
    expect(v.shape).toEqual([scanY, scanX, detY, detX]);
    expect(v.dtype).toBe('<u2');
    expect(v.chunks).toEqual([1, scanX, detY, detX]);
    expect(v.compression).toBe('gzip');
    expect(v.compression_opts).toBe(SAMPLE_SIZES.tiny.gzipLevel);
    expect(v.dim_labels).toEqual(['scan_y', 'scan_x', 'det_y', 'det_x']);
    expect(v.attrs.seed).toBe(11);
    expect(v.attr_dtypes.seed).toBe('<u4');
    expect(v.attrs.size).toBe('tiny');
    expect(v.attrs.generator).toBe('scanfold-sample');
    expect(v.attrs.disk_radius_px).toBeCloseTo(scenario.truth.diskRadiusPx, 12);
    expect(v.attrs.disk_center_px).toEqual(scenario.truth.diskCenter);
    expect(v.attrs.beam_energy_kev).toBe(200);
    // reference: relativistic electron wavelength at 200 kV is 2.5079 pm (handbook value, from memory)
    expect(v.attrs.wavelength_pm as number).toBeCloseTo(2.5079, 4);

    const t = v.truth;
    expect(t.grain_map).toMatchObject({ shape: [scanY, scanX], dtype: '<i4' });
    expect((t.grain_map.values as number[][]).flat()).toEqual(Array.from(scenario.truth.grainMap));
    for (const name of ['field_shift_x', 'field_shift_y', 'thickness', 'support_thickness']) {
      expect(t[name]).toMatchObject({ shape: [scanY, scanX], dtype: '<f8' });
    }
    expect((t.field_shift_x.values as number[][]).flat()).toEqual(Array.from(scenario.truth.fieldShiftX));
    expect((t.thickness.values as number[][]).flat()).toEqual(Array.from(scenario.truth.thickness));
    expect(t.disk_center).toMatchObject({ shape: [2], dtype: '<f8', values: scenario.truth.diskCenter });
    expect(v.truth_attrs.disk_radius_px).toBe(scenario.truth.diskRadiusPx);
    expect(t.hot_pixels).toMatchObject({ shape: [SCENARIO_SIZES.tiny.hotPixelCount, 2], dtype: '<i4' });
    expect((t.hot_pixels.values as number[][]).flat()).toEqual(Array.from(scenario.truth.hotPixels));
    expect(t.dead_pixels.shape).toEqual([SCENARIO_SIZES.tiny.deadPixelCount, 2]);
    expect(t.bragg_disk_center.shape).toEqual([scenario.truth.braggDiskGrain.length, 2]);
    // The scene holds every kind of place the scenario promises.
    const kinds = new Set(scenario.truth.grainMap);
    for (const k of [0, -1, 1, 2, 3]) expect(kinds.has(k)).toBe(true);
  });

  it('leaves neither the file nor its .partial behind when cancelled', async () => {
    const out = path.join(dir, 'cancelled.h5');
    const controller = new AbortController();
    await expect(writeSample({ size: 'tiny', out, onProgress: (f) => { if (f > 0.2) controller.abort(); }, signal: controller.signal }))
      .rejects.toBeInstanceOf(CancelledError);
    expect(fs.existsSync(out)).toBe(false);
    expect(fs.existsSync(out + '.partial')).toBe(false);
  });

  it('refuses unknown sizes, bad seeds and missing folders with an InputError', async () => {
    await expect(writeSample({ size: 'huge' as 'tiny', out: path.join(dir, 'x.h5') })).rejects.toBeInstanceOf(InputError);
    await expect(writeSample({ size: 'tiny', out: path.join(dir, 'x.h5'), seed: -1 })).rejects.toBeInstanceOf(InputError);
    await expect(writeSample({ size: 'tiny', out: path.join(dir, 'x.h5'), seed: 2 ** 32 })).rejects.toBeInstanceOf(InputError);
    await expect(writeSample({ size: 'tiny', out: path.join(dir, 'no-such-folder', 'x.h5') })).rejects.toThrow(/no-such-folder/);
  });
});

describe('sample generator: the frames obey the ground truth', () => {
  const scenario = Scenario.create('tiny', 5);
  const { scanY, scanX, detY, detX } = scenario.shape;
  const truth = scenario.truth;
  const frames = scenario.renderRows(0, scanY);
  const patternLength = detY * detX;
  const pattern = (p: number) => frames.subarray(p * patternLength, (p + 1) * patternLength);
  const defect = new Uint8Array(patternLength);
  for (const list of [truth.hotPixels, truth.deadPixels]) for (let i = 0; i < list.length; i += 2) defect[list[i] * detX + list[i + 1]] = 1;
  const [cy, cx] = truth.diskCenter;

  function centreOfMass(p: number): [number, number] {
    const a = pattern(p);
    let sum = 0, sy = 0, sx = 0;
    for (let y = 0; y < detY; y++) {
      for (let x = 0; x < detX; x++) {
        const i = y * detX + x;
        if (defect[i]) continue;
        sum += a[i]; sy += a[i] * y; sx += a[i] * x;
      }
    }
    return [sy / sum, sx / sum];
  }
  const positions = Array.from({ length: scanY * scanX }, (_, p) => p);
  const vacuum = positions.filter((p) => truth.grainMap[p] === 0);

  it('puts the centre of mass of vacuum patterns on the disk centre', () => {
    expect(vacuum.length).toBeGreaterThan(3);
    for (const p of vacuum) {
      const [y, x] = centreOfMass(p);
      // reference: analytic — the centre of mass of a uniform disk is its centre
      expect(Math.hypot(y - cy, x - cx)).toBeLessThan(0.3);
    }
  });

  it('moves the centre of mass by the field shift inside the field region', () => {
    const shifted = positions.filter((p) => Math.hypot(truth.fieldShiftX[p], truth.fieldShiftY[p]) > 0.15);
    expect(shifted.length).toBeGreaterThan(8);
    let errorSum = 0, shiftSum = 0;
    for (const p of shifted) {
      const [y, x] = centreOfMass(p);
      // reference: analytic — a centrosymmetric pattern moved by s has its centre of mass at centre + s
      const error = Math.hypot(y - cy - truth.fieldShiftY[p], x - cx - truth.fieldShiftX[p]);
      expect(error).toBeLessThan(0.3);
      errorSum += error;
      shiftSum += Math.hypot(truth.fieldShiftX[p], truth.fieldShiftY[p]);
    }
    // The shift is seen, not lost in the tolerance.
    expect(errorSum / shifted.length).toBeLessThan(0.5 * (shiftSum / shifted.length));
  });

  it('keeps vacuum patterns dark outside the bright-field disk and holds the beam dose', () => {
    let total = 0;
    for (const p of vacuum) {
      const a = pattern(p);
      for (let y = 0; y < detY; y++) {
        for (let x = 0; x < detX; x++) {
          const i = y * detX + x;
          if (defect[i]) continue;
          if (Math.hypot(y - cy, x - cx) > truth.diskRadiusPx + 1) expect(a[i]).toBe(0);
          total += a[i];
        }
      }
    }
    // reference: analytic — a sum of Poisson counts has the summed mean and variance; 4σ band
    const expected = truth.beamCounts * vacuum.length;
    expect(Math.abs(total - expected)).toBeLessThan(4 * Math.sqrt(expected));
  });

  it('shows each grain\'s Bragg disks in that grain', () => {
    const meanAtDisks = (diskGrain: number, inGrain: number) => {
      const pixels: number[] = [];
      for (let d = 0; d < truth.braggDiskGrain.length; d++) {
        if (truth.braggDiskGrain[d] !== diskGrain) continue;
        pixels.push(Math.round(truth.braggDiskCenter[2 * d]) * detX + Math.round(truth.braggDiskCenter[2 * d + 1]));
      }
      expect(pixels.length).toBeGreaterThanOrEqual(4);
      let sum = 0, n = 0;
      for (const p of positions) {
        if (truth.grainMap[p] !== inGrain) continue;
        const a = pattern(p);
        for (const i of pixels) { sum += a[i]; n++; }
      }
      expect(n).toBeGreaterThan(0);
      return sum / n;
    };
    // reference: analytic — a grain's disks are drawn only where the grain is
    expect(meanAtDisks(1, 1)).toBeGreaterThan(2 * meanAtDisks(1, 2));
    expect(meanAtDisks(2, 2)).toBeGreaterThan(2 * meanAtDisks(2, 1));
    expect(meanAtDisks(3, 3)).toBeGreaterThan(2 * meanAtDisks(3, 1));
  });

  it('makes the hot pixels hot and the dead pixels dead in every pattern', () => {
    for (const p of positions) {
      const a = pattern(p);
      let brightest = 0;
      for (let i = 0; i < patternLength; i++) if (!defect[i] && a[i] > brightest) brightest = a[i];
      for (let h = 0; h < truth.hotPixels.length; h += 2) expect(a[truth.hotPixels[h] * detX + truth.hotPixels[h + 1]]).toBeGreaterThan(3 * brightest);
      for (let d = 0; d < truth.deadPixels.length; d += 2) expect(a[truth.deadPixels[d] * detX + truth.deadPixels[d + 1]]).toBe(0);
    }
  });

  it('makes the film thicker to the right, so bright field darkens there', () => {
    // reference: analytic — transmission falls as exp(−t/λ), and the scenario's film wedges up along x
    const row = Math.floor(scanY / 2);
    const film = Array.from({ length: scanX }, (_, x) => row * scanX + x).filter((p) => truth.grainMap[p] > 0);
    const bf = (p: number) => {
      const a = pattern(p);
      let s = 0;
      for (let y = 0; y < detY; y++) for (let x = 0; x < detX; x++) if (Math.hypot(y - cy, x - cx) <= truth.diskRadiusPx + 1) s += a[y * detX + x];
      return s;
    };
    const first = film[0], last = film[film.length - 1];
    expect(truth.thickness[last]).toBeGreaterThan(truth.thickness[first]);
    expect(bf(last)).toBeLessThan(bf(first));
    expect(bf(vacuum[0])).toBeGreaterThan(bf(first));
  });
});
