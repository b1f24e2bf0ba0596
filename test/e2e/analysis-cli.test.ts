// `scanfold image`, `scanfold com` and `scanfold calibrate` end to end, against NumPy's results
// on files h5py wrote (test/fixtures/make_analysis_fixtures.py).
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { makeFixtures, maxRelDiff, PYTHON, readNpyF64 } from '../helpers/fixtures';

const root = path.resolve(__dirname, '../..');
let fx: string;
let tmp: string;

function scanfold(...args: string[]) {
  const p = spawnSync(process.execPath, [path.join(root, 'bin/scanfold.mjs'), ...args], { encoding: 'utf8' });
  return { code: p.status, out: p.stdout, err: p.stderr };
}

/** Datasets and root attributes read back by h5py, the reference HDF5 library. */
function h5py(file: string): { data: Record<string, { shape: number[]; values: (number | null)[]; attrs: Record<string, unknown> }>; attrs: Record<string, unknown> } {
  const code = `import h5py, json, sys, numpy as np
f = h5py.File(sys.argv[1], 'r')
conv = lambda v: v.decode() if isinstance(v, bytes) else (v.tolist() if hasattr(v, 'tolist') else v)
data = {k: {'shape': list(f[k].shape), 'values': [None if np.isnan(x) else float(x) for x in np.asarray(f[k], dtype=np.float64).ravel()],
            'attrs': {a: conv(f[k].attrs[a]) for a in f[k].attrs}} for k in f.keys()}
print(json.dumps({'data': data, 'attrs': {a: conv(f.attrs[a]) for a in f.attrs}}, default=lambda o: o.decode() if isinstance(o, bytes) else str(o)))`;
  const p = spawnSync(PYTHON, ['-c', code, file], { encoding: 'utf8', maxBuffer: 1 << 28 });
  if (p.status !== 0) throw new Error(p.stderr);
  return JSON.parse(p.stdout);
}

const nanAware = (v: (number | null)[]) => v.map((x) => (x === null ? NaN : x));

beforeAll(() => {
  fx = makeFixtures('make_analysis_fixtures.py');
  tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-an-'));
});
afterAll(() => {
  fs.rmSync(fx, { recursive: true, force: true });
  fs.rmSync(tmp, { recursive: true, force: true });
});

describe('scanfold image', () => {
  it('every shape kind, in the order given, equals NumPy mask sums (1e-9)', () => {
    const out = path.join(tmp, 'images.h5');
    const meta = JSON.parse(fs.readFileSync(path.join(fx, 'meta.json'), 'utf8'));
    const poly = (meta.polygon as number[][]).map((p) => p.join(',')).join(' ');
    const r = scanfold('image', path.join(fx, 'a.h5'), '--dataset', '/frames', '--bad-pixels', 'none', '--quiet',
      '--annulus', '20,18.5,8,15.25', '--disk', '20.3,17.6,6.5', '--rect', '3.5,30,12,40', '--polygon', poly,
      '--mask', path.join(fx, 'painted.npy'), '--out', out);
    expect(r.code, r.err).toBe(0);
    const got = h5py(out).data.images;
    expect(got.shape).toEqual([5, 6, 7]);
    const n = 42;
    ['annulus', 'disk', 'rect', 'polygon', 'painted'].forEach((name, k) => {
      // reference: NumPy tile.reshape(n,-1) @ mask (make_analysis_fixtures.py), same centre-inside rules
      const ref = readNpyF64(path.join(fx, `image_${name}.npy`)).data;
      expect(maxRelDiff(got.values.slice(k * n, (k + 1) * n) as number[], ref), name).toBeLessThan(1e-9);
    });
    expect(String(got.attrs.detector_0)).toMatch(/annulus/);
    expect(String(got.attrs.detector_4)).toMatch(/mask/);
    // The same mask saved as NumPy's default integer (int64), the commonest way to save 0/1.
    const out64 = path.join(tmp, 'images-int64.h5');
    const r64 = scanfold('image', path.join(fx, 'a.h5'), '--dataset', '/frames', '--bad-pixels', 'none', '--quiet', '--mask', path.join(fx, 'painted-int64.npy'), '--out', out64);
    expect(r64.code, r64.err).toBe(0);
    // reference: NumPy tile.reshape(n,-1) @ mask, as above
    expect(maxRelDiff(h5py(out64).data.images.values as number[], readNpyF64(path.join(fx, 'image_painted.npy')).data)).toBeLessThan(1e-9);
  });

  it('float data: NaN/Inf are counted and left out, not propagated', () => {
    const out = path.join(tmp, 'b.h5');
    const r = scanfold('image', path.join(fx, 'b.h5'), '--dataset', '/frames', '--bad-pixels', 'none', '--rect', '0,0,10,8', '--out', out);
    expect(r.code, r.err).toBe(0);
    const got = h5py(out).data.images;
    // reference: NumPy sum over the whole pattern with non-finite values set to 0
    expect(maxRelDiff(got.values as number[], readNpyF64(path.join(fx, 'b_image_full.npy')).data)).toBeLessThan(1e-6);
    expect(got.attrs.non_finite_inputs).toBe(2);
    // and said on stderr, not only stored
    expect(r.err).toMatch(/note: 2 NaN\/Inf input values were left out/);
  });

  const bad: [string, string[], RegExp][] = [
    ['detector wholly outside the pattern', ['--disk', '500,500,3'], /outside|empty|no pixel/i],
    ['r_outer ≤ r_inner', ['--annulus', '20,18,10,10'], /inner|outer/i],
    ['polygon with < 3 points', ['--polygon', '1,1 5,5'], /3|three/],
    ['mask of the wrong shape', ['--mask', 'WRONG'], /38.*41|41.*38|shape/],
    ['no detector at all', [], /detector/],
  ];
  for (const [what, args, msg] of bad) {
    it(`bad input: ${what} → exit 2 with a message, nothing written`, () => {
      const out = path.join(tmp, `bad-${what.replace(/\W+/g, '-')}.h5`);
      const a = args.map((x) => (x === 'WRONG' ? path.join(fx, 'wrong-shape.npy') : x));
      const r = scanfold('image', path.join(fx, 'a.h5'), '--dataset', '/frames', '--bad-pixels', 'none', ...a, '--out', out);
      expect(r.code, r.err).toBe(2);
      expect(r.err).toMatch(msg);
      expect(fs.existsSync(out)).toBe(false);
    });
  }

  it('a detector partly outside the pattern is clipped', () => {
    const out = path.join(tmp, 'clipped.h5');
    const r = scanfold('image', path.join(fx, 'a.h5'), '--dataset', '/frames', '--bad-pixels', 'none', '--rect', '3.5,30,12,40', '--out', out);
    expect(r.code, r.err).toBe(0);
    // reference: NumPy mask of the same rectangle, cut at the detector edge
    expect(maxRelDiff(h5py(out).data.images.values as number[], readNpyF64(path.join(fx, 'image_rect.npy')).data)).toBeLessThan(1e-9);
  });
});

describe('scanfold com', () => {
  for (const [name, extra] of [['plain', []], ['masked', ['--mask-disk', '20.3,17.6,6.5']], ['threshold', ['--threshold', '40']]] as const) {
    it(`--descan none --rotation 0 --flip no (${name}) is the plain definition, equal to NumPy`, () => {
      const out = path.join(tmp, `com-${name}.h5`);
      const r = scanfold('com', path.join(fx, 'a.h5'), '--dataset', '/frames', '--bad-pixels', 'none', '--descan', 'none',
        '--rotation', '0', '--flip', 'no', ...extra, '--out', out, '--quiet');
      expect(r.code, r.err).toBe(0);
      const h = h5py(out);
      // reference: NumPy (t*xx).sum()/t.sum() per pattern (x column, y row); the zero pattern gives NaN
      for (const [ds, ref] of [['com_x', 'x'], ['com_y', 'y'], ['total_intensity', 'total']]) {
        const want = readNpyF64(path.join(fx, `com_${name}_${ref}.npy`)).data;
        const got = nanAware(h.data[ds].values);
        expect(Number.isNaN(got[0]) || ds === 'total_intensity').toBe(true);
        expect(maxRelDiff(got.slice(1), want.slice(1)), ds).toBeLessThan(1e-9);
      }
      expect(h.attrs.rotation_degrees).toBe(0);
      expect(h.attrs.flip).toBe('no');
      expect(h.attrs.zero_total_patterns).toBe(1);
      for (const ds of ['divergence', 'curl', 'phase']) expect(h.data[ds].shape).toEqual([6, 7]);
    });
  }
});

describe('scanfold com with a calibration', () => {
  it('gives COM in mrad and the phase in radians by the weak-phase relation θ = (λ/2π)∇φ', () => {
    const out = path.join(tmp, 'com-cal.h5');
    const r = scanfold('com', path.join(fx, 'a.h5'), '--dataset', '/frames', '--bad-pixels', 'none', '--rotation', '0', '--flip', 'no',
      '--mrad-per-pixel', '0.8', '--energy-kev', '200', '--scan-step-nm', '0.5', '--out', out, '--quiet');
    expect(r.code, r.err).toBe(0);
    const h = h5py(out);
    // formula: φ[rad] = (2π/λ)·θ·dx; λ(200 kV) = 2.508 pm (handbook, from memory) = 0.002508 nm,
    // θ per px = 0.8e-3 rad, dx = 0.5 nm → 2π/0.0025079 × 0.8e-3 × 0.5 ≈ 1002.2 rad per (px × step)
    const factor = (2 * Math.PI / 0.0025079340450548) * 0.8e-3 * 0.5;
    const phase = nanAware(h.data.phase.values), rad = nanAware(h.data.phase_radians.values);
    for (let i = 0; i < phase.length; i++) expect(Math.abs(rad[i] - factor * phase[i])).toBeLessThanOrEqual(1e-9 * Math.abs(factor * phase[i]) + 1e-12);
    const cx = nanAware(h.data.com_x.values), cxm = nanAware(h.data.com_x_mrad.values);
    expect(cxm[5]).toBeCloseTo(cx[5] * 0.8, 12);
    expect(h.data.phase_radians.attrs.units).toMatch(/radians/);
  });

  it('calibration flags go together', () => {
    const r = scanfold('com', path.join(fx, 'a.h5'), '--dataset', '/frames', '--mrad-per-pixel', '0.8', '--out', path.join(tmp, 'x.h5'));
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/go together/);
  });
});

describe('scanfold pattern (virtual diffraction over a region)', () => {
  for (const [name, flag] of [['rect', ['--region-rect', '1,2,4.5,5']], ['mask', ['--region-mask', 'MASK']]] as const) {
    it(`mean and max pattern over a ${name} region equal NumPy's`, () => {
      const out = path.join(tmp, `pattern-${name}.h5`);
      const args = flag.map((x) => (x === 'MASK' ? path.join(fx, 'region-mask.npy') : x));
      const r = scanfold('pattern', path.join(fx, 'a.h5'), '--dataset', '/frames', ...args, '--out', out, '--quiet');
      expect(r.code, r.err).toBe(0);
      const h = h5py(out);
      // reference: NumPy a[mask].mean(axis=0) / .max(axis=0) (make_analysis_fixtures.py)
      expect(maxRelDiff(h.data.mean_pattern.values as number[], readNpyF64(path.join(fx, `region_${name}_mean.npy`)).data)).toBeLessThan(1e-9);
      expect(h.data.max_pattern.values).toEqual(Array.from(readNpyF64(path.join(fx, `region_${name}_max.npy`)).data));
    });
  }

  it('an empty region is bad input', () => {
    const r = scanfold('pattern', path.join(fx, 'a.h5'), '--dataset', '/frames', '--region-rect', '100,100,200,200', '--out', path.join(tmp, 'pe.h5'));
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/region/);
  });
});

describe('scanfold com descan', () => {
  it('--descan plane removes a least-squares plane from each component, as NumPy lstsq does', () => {
    const out = path.join(tmp, 'com-plane.h5');
    const r = scanfold('com', path.join(fx, 'a.h5'), '--dataset', '/frames', '--bad-pixels', 'none', '--descan', 'plane',
      '--rotation', '0', '--flip', 'no', '--out', out, '--quiet');
    expect(r.code, r.err).toBe(0);
    // reference: NumPy np.linalg.lstsq of [1, x, y] against the plain COM (NaN positions left out)
    const code = `import numpy as np, sys, json
res = {}
for c in ('x', 'y'):
    g = np.load(sys.argv[1] + '/com_plain_' + c + '.npy')
    yy, xx = np.mgrid[0:g.shape[0], 0:g.shape[1]]
    ok = np.isfinite(g)
    A = np.stack([np.ones(ok.sum()), xx[ok], yy[ok]], axis=1)
    coef = np.linalg.lstsq(A, g[ok], rcond=None)[0]
    res[c] = (g - (coef[0] + coef[1] * xx + coef[2] * yy)).ravel().tolist()
    res['coef_' + c] = coef.tolist()
print(json.dumps(res).replace('NaN', 'null'))`;
    const p = spawnSync(PYTHON, ['-c', code, fx], { encoding: 'utf8' });
    expect(p.status, p.stderr).toBe(0);
    const want = JSON.parse(p.stdout) as Record<string, (number | null)[]>;
    const h = h5py(out);
    for (const c of ['x', 'y']) {
      // the plane the output says it removed is NumPy's least-squares plane
      const abc = JSON.parse(h.attrs[`descan_removed_${c}_abc`] as string) as number[];
      abc.forEach((v, i) => expect(Math.abs(v - (want[`coef_${c}`][i] as number))).toBeLessThan(1e-9));
      const got = nanAware(h.data[`com_${c}`].values);
      const ref = nanAware(want[c]);
      // compare absolute differences: after descan the values are near zero
      const worst = Math.max(...got.slice(1).map((v, i) => Math.abs(v - ref[i + 1])));
      expect(worst).toBeLessThan(1e-9);
    }
    expect(h.attrs.descan).toBe('plane');
  });
});

describe('demo scenario (its generator knows the truth)', () => {
  let sample: string;
  beforeAll(() => {
    sample = path.join(tmp, 'demo.h5');
    const r = scanfold('sample', '--size', 'demo', '--out', sample, '--quiet');
    if (r.code !== 0) throw new Error(r.err);
  });

  it('a hot pixel appears in no result: image and COM leave the planted bad pixels out', () => {
    const img = path.join(tmp, 'demo-image.h5');
    const com = path.join(tmp, 'demo-com.h5');
    // a rectangle over the whole detector covers every hot pixel; bad pixels are found automatically
    expect(scanfold('image', sample, '--dataset', '/scan/frames', '--rect', '0,0,1000,1000', '--out', img, '--quiet').code).toBe(0);
    expect(scanfold('com', sample, '--dataset', '/scan/frames', '--descan', 'none', '--rotation', '0', '--flip', 'no', '--out', com, '--quiet').code).toBe(0);
    // reference: NumPy sums and COM of each pattern without the pixels the generator planted
    // (/truth/hot_pixels, /truth/dead_pixels)
    const code = `import h5py, numpy as np, sys, json
f = h5py.File(sys.argv[1]); a = f['/scan/frames'][...].astype(np.float64)
m = np.ones(a.shape[2:], bool)
for k in ('hot_pixels', 'dead_pixels'):
    for y, x in f['truth'][k][...].reshape(-1, 2): m[y, x] = False
yy, xx = np.mgrid[0:a.shape[2], 0:a.shape[3]]
t = (a * m).sum(axis=(2, 3))
print(json.dumps({'total': t.ravel().tolist(), 'x': ((a * m * xx).sum(axis=(2, 3)) / t).ravel().tolist(), 'y': ((a * m * yy).sum(axis=(2, 3)) / t).ravel().tolist()}))`;
    const p = spawnSync(PYTHON, ['-c', code, sample], { encoding: 'utf8', maxBuffer: 1 << 26 });
    expect(p.status, p.stderr).toBe(0);
    const want = JSON.parse(p.stdout) as Record<string, number[]>;
    expect(maxRelDiff(h5py(img).data.images.values as number[], want.total)).toBeLessThan(1e-9);
    const h = h5py(com);
    expect(maxRelDiff(nanAware(h.data.com_x.values), want.x)).toBeLessThan(1e-9);
    expect(maxRelDiff(nanAware(h.data.com_y.values), want.y)).toBeLessThan(1e-9);
    expect(h.attrs.bad_pixels_left_out).toBe(7);
  });

  it('calibrate finds the bright-field disk the scenario drew and scales reciprocal space', () => {
    const truth = JSON.parse(spawnSync(PYTHON, ['-c', `import h5py, sys, json
d = h5py.File(sys.argv[1])['/truth/disk_center']
print(json.dumps({'yx': d[...].tolist(), 'r': float(d.attrs['disk_radius_px'])}))`, sample], { encoding: 'utf8' }).stdout);
    const r = scanfold('calibrate', sample, '--dataset', '/scan/frames', '--energy-kev', '200', '--convergence-mrad', '20', '--quiet');
    expect(r.code, r.err).toBe(0);
    const j = JSON.parse(r.out);
    // handbook value: λ(200 kV) = 2.508 pm (commonly tabulated; from memory)
    expect(Math.abs(j.wavelength_pm - 2.508) / 2.508).toBeLessThan(1e-3);
    // analytic: the scenario drew its disk at this centre (y, x) and radius, under noise and hot pixels
    expect(Math.abs(j.disk_center_px.x - truth.yx[1])).toBeLessThan(0.1);
    expect(Math.abs(j.disk_center_px.y - truth.yx[0])).toBeLessThan(0.1);
    expect(Math.abs(j.disk_radius_px - truth.r)).toBeLessThan(0.1);
    // definition: mrad per pixel = α / r_disk
    expect(Math.abs(j.mrad_per_pixel - 20 / j.disk_radius_px)).toBeLessThan(1e-12);
  });
});

describe('calibrate reads the dataset and never picks a ring silently (demo scenario)', () => {
  let demo: string;
  beforeAll(() => {
    demo = path.join(tmp, 'demo-cal.h5');
    const r = scanfold('sample', '--size', 'demo', '--out', demo, '--quiet');
    if (r.code !== 0) throw new Error(r.err);
  });
  const truth = () => JSON.parse(spawnSync(PYTHON, ['-c', `import h5py, sys, json
a = h5py.File(sys.argv[1])['/scan/frames'].attrs
print(json.dumps({'mrad': float(a['mrad_per_px']), 'g200': float(a['g200_px']), 'a_nm': float(a['lattice_constant_nm'])}))`, demo], { encoding: 'utf8' }).stdout);

  it('with no flags, energy, semi-angle and scan step come from the attributes, and say so', () => {
    const r = scanfold('calibrate', demo, '--dataset', '/scan/frames', '--quiet');
    expect(r.code, r.err).toBe(0);
    const c = JSON.parse(r.out);
    expect(c.value_sources).toEqual({
      energyKeV: 'attribute beam_energy_kev of the dataset',
      convergenceMrad: 'attribute convergence_semiangle_mrad of the dataset',
      scanStepNm: 'attribute scan_step_nm of the dataset',
    });
    // reference: the generator's own mrad per pixel (h5py reads it back), within 0.5 %
    expect(Math.abs(c.mrad_per_pixel / truth().mrad - 1)).toBeLessThan(0.005);
  });

  it('a lattice spacing with several candidate rings is refused with the candidates; the right ring given by hand calibrates', () => {
    // {200} spacing of the scenario's fcc lattice: a / 2 (a from the file's attributes)
    const d200 = (truth().a_nm * 10) / 2;
    const refused = scanfold('calibrate', demo, '--dataset', '/scan/frames', '--lattice-spacing-angstrom', String(d200), '--quiet');
    expect(refused.code).toBe(2);
    expect(refused.err).toMatch(/several rings could be the one of spacing .*px \(strength 1\.00\), .*--bragg-distance-px/);
    // reference: the generator's ring radii — {200} at g200, {220} at √2·g200, {400} at 2·g200 (fcc, common
    // practice) — are what is offered, and not the amorphous halo at 0.85·g200 (the scenario's halo radius)
    const radii = [...refused.err.matchAll(/([\d.]+) px \(strength/g)].map((m) => Number(m[1]));
    const g = truth().g200;
    for (const want of [g, Math.SQRT2 * g, 2 * g]) expect(Math.min(...radii.map((r) => Math.abs(r / want - 1)))).toBeLessThan(0.025);
    expect(Math.min(...radii.map((r) => Math.abs(r - g)))).toBeLessThan(0.3);
    expect(radii.some((r) => Math.abs(r - 0.85 * g) < 1)).toBe(false);
    const given = scanfold('calibrate', demo, '--dataset', '/scan/frames', '--lattice-spacing-angstrom', String(d200), '--bragg-distance-px', String(truth().g200), '--quiet');
    expect(given.code, given.err).toBe(0);
    // reference: the generator's mrad per pixel, which put the {200} disks at g200_px
    expect(Math.abs(JSON.parse(given.out).mrad_per_pixel / truth().mrad - 1)).toBeLessThan(0.005);
  });
});
