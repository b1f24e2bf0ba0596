// The first pass takes default images along (bright field and annular dark field): equal to
// NumPy's sums over the detectors the output describes, minus the bad pixels it lists.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { afterAll, beforeAll, expect, it } from 'vitest';
import { PYTHON } from '../helpers/fixtures';

const root = path.resolve(__dirname, '../..');
let dir: string;
beforeAll(() => { dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-default-images-')); });
afterAll(() => fs.rmSync(dir, { recursive: true, force: true }));
const scanfold = (...args: string[]) => spawnSync(process.execPath, [path.join(root, 'bin/scanfold.mjs'), ...args], { encoding: 'utf8', env: { ...process.env, SCANFOLD_CACHE_DIR: 'off' } });

it('summary writes /bright_field and /annular_dark_field from the same read, equal to NumPy over the stated detectors', () => {
  const demo = path.join(dir, 'demo.h5');
  expect(scanfold('sample', '--size', 'demo', '--out', demo, '--quiet').status).toBe(0);
  const out = path.join(dir, 's.h5');
  const r = scanfold('summary', demo, '--dataset', '/scan/frames', '--out', out, '--quiet');
  expect(r.status, r.stderr).toBe(0);
  const p = spawnSync(PYTHON, ['-c', `import h5py, json, sys, numpy as np
f = h5py.File(sys.argv[1]); d = h5py.File(sys.argv[2])
a = d['scan/frames'][()].astype(np.float64)
ky, kx = a.shape[2:]
yy, xx = np.mgrid[0:ky, 0:kx]
bad = np.zeros((ky, kx), bool)
for k in ('truth/hot_pixels', 'truth/dead_pixels'):
    for y, x in d[k][()].reshape(-1, 2): bad[y, x] = True
out = {}
for name in ('bright_field', 'annular_dark_field'):
    s = json.loads(f[name].attrs['detector'])
    r = np.hypot(xx - s['cx'], yy - s['cy'])
    m = (r <= s['r']) if s['kind'] == 'disk' else ((r > s['rInner']) & (r <= s['rOuter']))
    want = (a * (m & ~bad)).sum(axis=(2, 3))
    out[name] = float(np.abs(want - f[name][()]).max() / np.abs(want).max())
    out[name + '_truth_disk'] = [float(v) for v in d['truth/disk_center'][()]]
    out[name + '_kind'] = s['kind']
print(json.dumps(out))`, out, demo], { encoding: 'utf8', maxBuffer: 1 << 26 });
  expect(p.status, p.stderr).toBe(0);
  const got = JSON.parse(p.stdout);
  // reference: NumPy's sums over the detector each dataset names, without the generator's planted bad pixels
  // (pixel centres inside, annulus inner radius exclusive: the convention of every scanfold detector)
  expect(got.bright_field_kind).toBe('disk');
  expect(got.annular_dark_field_kind).toBe('annulus');
  expect(got.bright_field).toBeLessThan(1e-12);
  expect(got.annular_dark_field).toBeLessThan(1e-12);
});
