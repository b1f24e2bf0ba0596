// The first pass takes default images along (bright field and annular dark field): equal to
// NumPy's sums over the detectors the output describes, minus the bad pixels it lists.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { afterAll, beforeAll, expect, it } from 'vitest';
import { maxRelDiff, PYTHON, readNpyF64 } from '../helpers/fixtures';

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
# the total less the bad pixels the generator planted (helps when hot pixels outweigh the specimen)
out['total_less_bad'] = float(np.abs((a * ~bad).sum(axis=(2, 3)) - f['total_intensity_less_bad_pixels'][()]).max())
out['total_all'] = float(np.abs(a.sum(axis=(2, 3)) - f['total_intensity'][()]).max())
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
  // reference: NumPy's sum of each pattern, with and without the generator's planted bad pixels (exact: integer counts)
  expect(got.total_less_bad).toBe(0);
  expect(got.total_all).toBe(0);
  expect(got.bright_field).toBeLessThan(1e-12);
  expect(got.annular_dark_field).toBeLessThan(1e-12);
});

it('a first pass made for a command takes no default images; a viewer asking afterwards gets them, equal to NumPy', async () => {
  const { EngineService } = await import('../../src-main/engine/service');
  const demo = path.join(dir, 'demo2.h5');
  expect(scanfold('sample', '--size', 'demo', '--out', demo, '--quiet').status).toBe(0);
  const service = new EngineService({ workers: 2, cacheDir: null });
  try {
    const d = await service.open({ path: demo, datasetPath: '/scan/frames' });
    // The command's pass (bad pixels, disk, COM sums), then the viewer's request on the same engine.
    await service.comField({ dataset: d.id });
    const labels: string[] = [];
    const off = service.onEvent((e) => { if (e.kind === 'job') labels.push(e.job.label); });
    const first = await service.firstPass({ dataset: d.id, jobId: 'viewer' });
    off();
    // Only the images' own pass ran, not another first pass.
    expect([...new Set(labels)]).toEqual(['first pass (default images)']);
    expect(first.defaultImages.map((im) => im.label)).toEqual(['bright field', 'annular dark field']);
    const specs = JSON.stringify(first.defaultImages.map((im) => im.detector.shape));
    const bad = JSON.stringify([...first.badPixels.hot, ...first.badPixels.dead]);
    const p = spawnSync(PYTHON, ['-c', `import h5py, json, sys, numpy as np
d = h5py.File(sys.argv[1]); a = d['scan/frames'][()].astype(np.float64)
ky, kx = a.shape[2:]
yy, xx = np.mgrid[0:ky, 0:kx]
bad = np.zeros((ky, kx), bool)
for y, x in json.loads(sys.argv[3]): bad[y, x] = True
for i, s in enumerate(json.loads(sys.argv[2])):
    r = np.hypot(xx - s['cx'], yy - s['cy'])
    m = (r <= s['r']) if s['kind'] == 'disk' else ((r > s['rInner']) & (r <= s['rOuter']))
    np.save(sys.argv[4] + '.%d.npy' % i, (a * (m & ~bad)).sum(axis=(2, 3)))`, demo, specs, bad, path.join(dir, 'want')], { encoding: 'utf8' });
    expect(p.status, p.stderr).toBe(0);
    first.defaultImages.forEach((im, i) => {
      // reference: NumPy's sums over the detector the result names, without the bad pixels it lists
      expect(maxRelDiff(im.image, readNpyF64(path.join(dir, `want.${i}.npy`)).data)).toBeLessThan(1e-12);
    });
  } finally {
    await service.shutdown();
  }
});
