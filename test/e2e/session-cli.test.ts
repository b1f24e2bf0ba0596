// Sessions from the command line: --session adds each result and its recipe to one file;
// `session show` lists it; `session apply` replays the recipe on a copy of the data, bitwise
// the same; `export` writes PNG (scale bar read back from the pixels by Pillow), float32 TIFF
// (read by Pillow), .npy (read by NumPy) and CSV.
import fs from 'node:fs';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { makeDemoSample, PYTHON } from '../helpers/fixtures';

const root = path.resolve(__dirname, '../..');
let dir: string;
let file: string;

function scanfold(...args: string[]): { status: number | null; stdout: string; stderr: string } {
  const p = spawnSync(process.execPath, [path.join(root, 'bin/scanfold.mjs'), ...args], { encoding: 'utf8', env: { ...process.env, SCANFOLD_CACHE_DIR: path.join(dir, 'cache') } });
  return { status: p.status, stdout: p.stdout, stderr: p.stderr };
}

function py(code: string, ...args: string[]): string {
  const p = spawnSync(PYTHON, ['-c', code, ...args], { encoding: 'utf8', maxBuffer: 1 << 26 });
  if (p.status !== 0) throw new Error(p.stderr);
  return p.stdout;
}

const s = () => path.join(dir, 'batch.scanfold.h5');

beforeAll(async () => {
  ({ dir, file } = await makeDemoSample('scanfold-session-cli-'));
  for (const args of [
    ['image', file, '--disk', '48,48,12', '--annulus', '48,48,20,45', '--session', s(), '--quiet'],
    ['com', file, '--session', s(), '--as', 'field', '--quiet'],
    ['calibrate', file, '--session', s(), '--quiet'],
    ['pca', file, '--components', '4', '--session', s(), '--quiet'],
    ['kmeans', file, '--clusters', '3', '--session', s(), '--quiet'],
  ]) {
    const r = scanfold(...args);
    expect(r.status, `${args.join(' ')}: ${r.stderr}`).toBe(0);
  }
}, 240_000);

afterAll(() => {
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

describe('sessions from the command line', () => {
  it('--session adds every result with its recipe; a second run of a command gets a numbered key; session show lists them', () => {
    const again = scanfold('image', file, '--disk', '48,48,6', '--session', s(), '--quiet');
    expect(again.status, again.stderr).toBe(0);
    const show = scanfold('session', 'show', s(), '--json');
    expect(show.status, show.stderr).toBe(0);
    const listing = JSON.parse(show.stdout);
    expect(listing.results.map((r: { key: string }) => r.key)).toEqual(['image', 'field', 'calibrate', 'pca', 'kmeans', 'image-2']);
    expect(listing.datasets).toHaveLength(1);
    expect(listing.datasets[0].status).toBe('found');
    expect(listing.results[0].recipe.detectors[1].shape).toEqual({ kind: 'annulus', cx: 48, cy: 48, rInner: 20, rOuter: 45 });
    const text = scanfold('session', 'show', s());
    expect(text.stdout).toMatch(/\/results\/pca\/loadings {2}4×64×64/);
    // Without --out or --session the command says what it needs.
    const none = scanfold('pca', file, '--components', '2');
    expect(none.status).toBe(2);
    expect(none.stderr).toMatch(/--out OUT\.h5, or --session FILE\.scanfold\.h5/);
  }, 120_000);

  it('session apply on an identical copy of the data gives bitwise-identical results (h5py compares)', () => {
    const copy = path.join(dir, 'copy.h5');
    fs.copyFileSync(file, copy);
    const out = path.join(dir, 'replayed.scanfold.h5');
    const r = scanfold('session', 'apply', s(), '--to', copy, '--out', out, '--quiet');
    expect(r.status, r.stderr).toBe(0);
    // h5py, outside Scanfold: every array of every result, byte for byte.
    const report = JSON.parse(py(`
import h5py, json, sys, numpy as np
a, b = h5py.File(sys.argv[1], 'r'), h5py.File(sys.argv[2], 'r')
out = {}
for key in a['results']:
    for name in a['results'][key]:
        x, y = a['results'][key][name][()], b['results'][key][name][()]
        out[key + '/' + name] = bool(x.dtype == y.dtype and x.shape == y.shape and x.tobytes() == y.tobytes())
out['source'] = b['datasets']['data-1'].attrs['absolute_path']
print(json.dumps(out))
`, s(), out));
    expect(report.source).toBe(fs.realpathSync(copy));
    const compared = Object.entries(report).filter(([k]) => k !== 'source');
    expect(compared.length).toBeGreaterThan(15);
    expect(compared.filter(([, same]) => !same)).toEqual([]);
  }, 180_000);

  it('export: PNG with a scale bar as long as the calibration says, float32 TIFF, .npy and CSV readable outside', () => {
    const png = path.join(dir, 'phase.png');
    const r = scanfold('export', s(), 'field/phase', '--format', 'png', '--out', png);
    expect(r.status, r.stderr).toBe(0);
    const bar = /scale bar (\d+(?:\.\d+)?) nm = (\d+) px/.exec(r.stderr);
    expect(bar, r.stderr).not.toBeNull();
    // The scan step the demo stores as an attribute (read by h5py, outside Scanfold).
    const step = Number(py("import h5py,sys,numpy as np; print(np.ravel(h5py.File(sys.argv[1])['/scan/frames'].attrs['scan_step_nm'])[0])", file));
    // Pillow reads the PNG back: the white run in the strip under the image is the scale bar.
    const measured = JSON.parse(py(`
from PIL import Image; import numpy as np, json, sys
im = np.asarray(Image.open(sys.argv[1]).convert('RGB')).astype(int)
white = (im == 255).all(axis=2)
rows = [int(white[y].sum()) for y in range(im.shape[0])]
y = max(range(len(rows)), key=lambda i: rows[i] if i > im.shape[0] * 0.8 else -1)
xs = np.nonzero(white[y])[0]
print(json.dumps({'length': int(xs.max() - xs.min() + 1), 'first': int(xs.min()), 'height': im.shape[0], 'width': im.shape[1]}))
`, png));
    // 64 scan positions drawn 8× (512 px): the bar's pixels / 8 data pixels × the step = its label.
    const zoom = 8;
    expect(measured.length).toBe(Number(bar![2]));
    expect(Math.abs((measured.length / zoom) * step - Number(bar![1]))).toBeLessThanOrEqual(step / zoom);
    expect([1, 2, 5].some((m) => Number(bar![1]) / m === 10 ** Math.round(Math.log10(Number(bar![1]) / m)))).toBe(true);

    const tif = path.join(dir, 'phase.tif');
    expect(scanfold('export', s(), 'field/phase', '--format', 'tiff', '--out', tif).status).toBe(0);
    const npy = path.join(dir, 'loadings.npy');
    expect(scanfold('export', s(), 'pca/loadings', '--format', 'npy', '--out', npy).status).toBe(0);
    const csv = path.join(dir, 'scree.csv');
    expect(scanfold('export', s(), 'pca/explained_variance_ratio', '--format', 'csv', '--out', csv).status).toBe(0);
    const check = JSON.parse(py(`
from PIL import Image; import numpy as np, h5py, json, sys
f = h5py.File(sys.argv[1], 'r')
t = np.asarray(Image.open(sys.argv[2]))
phase = f['results/field/phase'][()]
l = np.load(sys.argv[3])
csv = np.loadtxt(sys.argv[4], delimiter=',', skiprows=1)
print(json.dumps({
  'tiff': [str(t.dtype), list(t.shape), bool(np.array_equal(t, phase.astype(np.float32)))],
  'npy': [str(l.dtype), list(l.shape), bool(np.array_equal(l, f['results/pca/loadings'][()]))],
  'csv': bool(np.array_equal(csv[:, 1], f['results/pca/explained_variance_ratio'][()])),
}))
`, s(), tif, npy, csv));
    expect(check).toEqual({ tiff: ['float32', [64, 64], true], npy: ['float64', [4, 64, 64], true], csv: true });
    // A chosen set as an HDF5 file of its own: h5py finds just those results.
    const set = path.join(dir, 'set.h5');
    expect(scanfold('export', s(), 'pca', 'field', '--format', 'h5', '--out', set).status).toBe(0);
    expect(py("import h5py,sys; print(sorted(h5py.File(sys.argv[1])['results'].keys()))", set).trim()).toBe("['field', 'pca']");
    // One detector's image is a stack of one: exported without an index.
    const one = scanfold('export', s(), 'image-2/images', '--format', 'png', '--out', path.join(dir, 'one.png'));
    expect(one.status, one.stderr).toBe(0);
    expect(one.stderr).toMatch(/image-2\/images\[0\] \(64×64\)/);
    // A cluster map is drawn in categories unless a colour map is asked for, as the app draws it.
    const clusters = scanfold('export', s(), 'kmeans/labels', '--format', 'png', '--out', path.join(dir, 'labels.png'));
    expect(clusters.status, clusters.stderr).toBe(0);
    // Its colour bar shows the clusters there are (labels 0 … k − 1), not ten categories.
    const k = Number(py("import h5py,sys; print(int(h5py.File(sys.argv[1])['results/kmeans/labels'][()].max()) + 1)", s()).trim());
    expect(clusters.stderr).toMatch(new RegExp(`, categories, ${k} categories,`));
    // An angle map in the cyclic colour map, over −π … π, so opposite ends share a colour.
    const direction = scanfold('export', s(), 'field/direction', '--format', 'png', '--out', path.join(dir, 'direction.png'));
    expect(direction.status, direction.stderr).toBe(0);
    expect(direction.stderr).toMatch(/, sinebow, limits -3\.142 … 3\.142/);
    // A stack needs --index for an image; the message says so.
    const stack = scanfold('export', s(), 'pca/loadings', '--format', 'png', '--out', path.join(dir, 'x.png'));
    expect(stack.status).toBe(2);
    expect(stack.stderr).toMatch(/give an index 0 … 3 for one of the stack/);
  }, 120_000);

  it('session apply refuses to write over the session it applies, and names the result a dataset cannot take', () => {
    expect(scanfold('session', 'apply', s(), '--to', file, '--out', s()).stderr).toMatch(/--out is the session being applied/);
    // Under another name too: a link to it is the same file.
    const link = path.join(dir, 'link.scanfold.h5');
    fs.symlinkSync(s(), link);
    expect(scanfold('session', 'apply', s(), '--to', file, '--out', link).stderr).toMatch(/--out is the session being applied/);
    expect(scanfold('export', s(), 'pca', '--format', 'h5', '--out', link).stderr).toMatch(/--out is the session being exported from/);
    fs.unlinkSync(link);
    const tiny = path.join(dir, 'tiny.h5');
    expect(scanfold('sample', '--size', 'tiny', '--out', tiny).status).toBe(0);
    const r = scanfold('session', 'apply', s(), '--to', tiny, '--out', path.join(dir, 'tiny.scanfold.h5'), '--quiet');
    expect(r.status).toBe(2);
    expect(r.stderr).toMatch(/session apply: result image \(virtualImages\) cannot be made on this dataset: /);
    expect(fs.existsSync(path.join(dir, 'tiny.scanfold.h5'))).toBe(false);
  }, 60_000);
});
