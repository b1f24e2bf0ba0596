// The centre of mass with no flags on the demo scenario: vacuum is found and used, and the
// integrated phase follows the ground truth's field (written by our generator under /truth,
// integrated here independently with NumPy's FFT).
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { afterAll, beforeAll, expect, it } from 'vitest';
import { PYTHON } from '../helpers/fixtures';

const root = path.resolve(__dirname, '../..');
let dir: string;
beforeAll(() => { dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-comdef-')); });
afterAll(() => fs.rmSync(dir, { recursive: true, force: true }));

const scanfold = (...args: string[]) => spawnSync(process.execPath, [path.join(root, 'bin/scanfold.mjs'), ...args], { encoding: 'utf8' });

it('com with no flags on the demo: vacuum found, phase correlated > 0.95 (signed) with the integrated truth field', () => {
  const demo = path.join(dir, 'demo.h5');
  expect(scanfold('sample', '--size', 'demo', '--out', demo, '--quiet').status).toBe(0);
  const out = path.join(dir, 'com.h5');
  const r = scanfold('com', demo, '--dataset', '/scan/frames', '--out', out, '--quiet');
  expect(r.status, r.stderr).toBe(0);
  // The vacuum found does not depend on how coarsely the preview cube bins the detector.
  const coarse = path.join(dir, 'com-coarse.h5');
  const rc = scanfold('com', demo, '--dataset', '/scan/frames', '--preview-budget', '16MiB', '--out', coarse, '--quiet');
  expect(rc.status, rc.stderr).toBe(0);
  const p = spawnSync(PYTHON, ['-c', `import h5py, numpy as np, sys, json
f = h5py.File(sys.argv[1]); t = h5py.File(sys.argv[2])['/truth']
gx, gy = t['field_shift_x'][()], t['field_shift_y'][()]
sy, sx = gx.shape
# Fourier integration of the truth field with mirrored edges (NumPy FFT), as a reference independent of ours
GX = np.block([[gx, -gx[:, ::-1]], [gx[::-1, :], -gx[::-1, ::-1]]]); GY = np.block([[gy, gy[:, ::-1]], [-gy[::-1, :], -gy[::-1, ::-1]]])
ky = np.fft.fftfreq(2 * sy)[:, None]; kx = np.fft.fftfreq(2 * sx)[None, :]
k2 = kx ** 2 + ky ** 2; k2[0, 0] = 1
P = (np.fft.fft2(GX) * kx + np.fft.fft2(GY) * ky) / (2j * np.pi * k2); P[0, 0] = 0
truth = np.real(np.fft.ifft2(P))[:sy, :sx]
print(json.dumps({'corr': float(np.corrcoef(truth.ravel(), f['phase'][()].ravel())[0, 1]),
  'vacuum': int(f.attrs['vacuum_positions']), 'vacuum_coarse': int(h5py.File(sys.argv[3]).attrs['vacuum_positions']), 'vacuum_truth': int((t['grain_map'][()] == 0).sum()),
  'descan': str(f.attrs['descan']), 'half_turn': str(f.attrs['rotation_half_turn']), 'rotation': float(f.attrs['rotation_degrees']), 'flip': str(f.attrs['flip'])}))`, out, demo, coarse], { encoding: 'utf8' });
  expect(p.status, p.stderr).toBe(0);
  const got = JSON.parse(p.stdout);
  // reference: the generator's ground truth (vacuum = grain map 0, the in-plane field's pattern shifts)
  expect(got.vacuum).toBe(got.vacuum_truth);
  expect(got.vacuum_coarse).toBe(got.vacuum_truth);
  expect(got.descan).toBe('reference (vacuum found)');
  expect(got.half_turn).toBe('settled by vacuum');
  expect(got.corr).toBeGreaterThan(0.95);
  // reference: the generator draws the field in the scan frame with no rotation or flip
  expect(Math.min(got.rotation, 360 - got.rotation)).toBeLessThan(3);
  expect(got.flip).toBe('no');
  console.log(`demo, no flags: phase correlation ${got.corr.toFixed(4)} with the integrated truth; rotation ${got.rotation.toFixed(2)}° (truth 0°)`);
});

it('the descan asked for does not turn the field: mean, plane and none settle the same half-turn by vacuum as the default', () => {
  const demo = path.join(dir, 'demo.h5');
  if (!fs.existsSync(demo)) expect(scanfold('sample', '--size', 'demo', '--out', demo, '--quiet').status).toBe(0);
  for (const mode of ['mean', 'plane', 'none']) {
    const out = path.join(dir, `com-${mode}.h5`);
    const r = scanfold('com', demo, '--dataset', '/scan/frames', '--descan', mode, '--out', out, '--quiet');
    expect(r.status, r.stderr).toBe(0);
    const p = spawnSync(PYTHON, ['-c', `import h5py, numpy as np, sys, json
f = h5py.File(sys.argv[1]); t = h5py.File(sys.argv[2])['/truth']
print(json.dumps({'rotation': float(f.attrs['rotation_degrees']), 'half_turn': str(f.attrs['rotation_half_turn']),
  'cx': float(np.corrcoef(f['com_x'][()].ravel(), t['field_shift_x'][()].ravel())[0, 1]),
  'cy': float(np.corrcoef(f['com_y'][()].ravel(), t['field_shift_y'][()].ravel())[0, 1])}))`, out, demo], { encoding: 'utf8' });
    expect(p.status, p.stderr).toBe(0);
    const got = JSON.parse(p.stdout);
    // reference: the generator draws the field in the scan frame with no rotation (a descan
    // removes an offset or a plane, which cannot turn the field)
    expect(got.half_turn, mode).toBe('settled by vacuum');
    expect(Math.min(got.rotation, 360 - got.rotation), mode).toBeLessThan(3);
    // signed: the shifts point the way the truth's do (a half-turn wrong would give about −0.85)
    expect(got.cx, mode).toBeGreaterThan(0.7);
    expect(got.cy, mode).toBeGreaterThan(0.7);
  }
}, 120_000);
