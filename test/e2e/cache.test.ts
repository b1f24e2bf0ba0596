// The first-pass cache: a second command on the same data does not read it again for the bad
// pixels, gives the same results, and a changed file is read again.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { afterAll, beforeAll, expect, it } from 'vitest';
import { makeFixtures, maxRelDiff, PYTHON } from '../helpers/fixtures';

const root = path.resolve(__dirname, '../..');
let fx: string, cache: string, tmp: string;
beforeAll(() => {
  fx = makeFixtures('make_engine_fixtures.py');
  cache = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-cache-'));
  tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-cache-out-'));
});
afterAll(() => { for (const d of [fx, cache, tmp]) fs.rmSync(d, { recursive: true, force: true }); });

function scanfold(...args: string[]) {
  const p = spawnSync(process.execPath, [path.join(root, 'bin/scanfold.mjs'), ...args], { encoding: 'utf8', env: { ...process.env, SCANFOLD_CACHE_DIR: cache } });
  return { code: p.status, err: p.stderr };
}
const images = (file: string) => JSON.parse(spawnSync(PYTHON, ['-c', 'import h5py,sys,json; print(json.dumps(h5py.File(sys.argv[1])["images"][()].ravel().tolist()))', file], { encoding: 'utf8' }).stdout) as number[];

it('a second command takes the bad pixels from the cache (no first pass), with the same results; a changed file is read again', () => {
  const data = path.join(tmp, 'a.npy');
  fs.copyFileSync(path.join(fx, 'a.npy'), data);
  const args = (out: string) => ['image', data, '--annulus', '18,20,3,15', '--out', path.join(tmp, out)];
  const first = scanfold(...args('one.h5'));
  expect(first.code, first.err).toBe(0);
  expect(first.err).toMatch(/first pass \(bad pixels\) \[/);
  const second = scanfold(...args('two.h5'));
  expect(second.code, second.err).toBe(0);
  // No first-pass job at all: the data was read once, for the image itself.
  expect(second.err).not.toMatch(/first pass/);
  expect(second.err).toMatch(/virtual images \[/);
  // reference: the first command's own output (the cache must not change a result)
  expect(maxRelDiff(images(path.join(tmp, 'two.h5')), images(path.join(tmp, 'one.h5')))).toBe(0);
  // The same bytes in a file modified later are another entry: read again.
  const t = new Date(Date.now() + 5000);
  fs.utimesSync(data, t, t);
  const third = scanfold(...args('three.h5'));
  expect(third.code, third.err).toBe(0);
  expect(third.err).toMatch(/first pass \(bad pixels\) \[/);
  expect(fs.readdirSync(cache).filter((f) => f.endsWith('.first-pass'))).toHaveLength(2);
});

it('com after summary reads nothing: the first pass took its sums along, and the cache kept them', () => {
  // make_engine_fixtures.py's b.h5 has no one-pattern spikes, so the bad pixels guessed before the pass are the ones it finds.
  const data = path.join(tmp, 'b.h5');
  fs.copyFileSync(path.join(fx, 'b.h5'), data);
  const src = [data, '--dataset', '/frames', '--scan-shape', '6,7'];
  const summary = scanfold('summary', ...src, '--out', path.join(tmp, 's.h5'));
  expect(summary.code, summary.err).toBe(0);
  const com = scanfold('com', ...src, '--out', path.join(tmp, 'com.h5'));
  expect(com.code, com.err).toBe(0);
  // No job at all: neither a first pass nor a centre-of-mass pass.
  expect(com.err).not.toMatch(/first pass|centre of mass \[/);
  const from = spawnSync(PYTHON, ['-c', 'import h5py,sys; print(h5py.File(sys.argv[1]).attrs["com_sums_from"])', path.join(tmp, 'com.h5')], { encoding: 'utf8' });
  expect(from.stdout.trim()).toBe('first pass');
  // The same command with a pass of its own (a threshold below every value) gives the same maps.
  const own = scanfold('com', ...src, '--threshold', '-1e300', '--out', path.join(tmp, 'own.h5'));
  expect(own.code, own.err).toBe(0);
  expect(own.err).toMatch(/centre of mass \[/);
  const same = spawnSync(PYTHON, ['-c', `import h5py, numpy as np, sys
a, b = h5py.File(sys.argv[1]), h5py.File(sys.argv[2])
print(all(np.array_equal(a[k][()], b[k][()], equal_nan=True) for k in ('com_x', 'com_y', 'phase', 'total_intensity')))`, path.join(tmp, 'com.h5'), path.join(tmp, 'own.h5')], { encoding: 'utf8' });
  expect(same.stdout.trim(), same.stderr).toBe('True');
});
