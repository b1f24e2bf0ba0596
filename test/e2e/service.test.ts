// The engine service through its contract: datasets opened once and named by id (several at
// once), results checked against NumPy on files NumPy and h5py wrote (make_engine_fixtures.py),
// the one validator's messages, error codes that survive the crossing from a worker, job
// events and cancel by the client's job id.
import fs from 'node:fs';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { EngineService } from '../../src-main/engine/service';
import type { ServiceEvent } from '../../src-shared/contract/service';
import { validateRequest } from '../../src-shared/contract/validate';
import { CancelledError, isInputError } from '../../src-shared/model/errors';
import { inputError, makeFixtures, maxRelDiff, PYTHON, readNpyF64, tightBudget } from '../helpers/fixtures';

let fx: string;
let service: EngineService;

beforeAll(() => {
  fx = makeFixtures('make_engine_fixtures.py');
  service = new EngineService({ workers: 2, budgetBytes: tightBudget(2, true) });
});
afterAll(async () => {
  await service?.shutdown();
  if (fx) fs.rmSync(fx, { recursive: true, force: true });
});


describe('engine service', () => {
  it('two datasets open at once, first passes run together, each equal to NumPy', async () => {
    const npy = await service.open({ path: path.join(fx, 'a.npy') });
    const h5 = await service.open({ path: path.join(fx, 'b.h5'), datasetPath: '/frames', scanShape: [6, 7] });
    expect(npy.id).not.toBe(h5.id);
    expect((await service.datasets()).map((d) => d.id)).toEqual([npy.id, h5.id]);
    // Interleaved on the same two workers: each tile names its source, so neither reads the other's data.
    const [ra, rb] = await Promise.all([service.firstPass({ dataset: npy.id }), service.firstPass({ dataset: h5.id })]);
    for (const [name, r] of [['a', ra], ['b', rb]] as const) {
      // reference: NumPy's sums and maxima on the same arrays (make_engine_fixtures.py)
      expect(maxRelDiff(r.meanPattern, readNpyF64(path.join(fx, `${name}.mean.npy`)).data)).toBeLessThan(1e-9);
      expect(Array.from(r.maxPattern)).toEqual(Array.from(readNpyF64(path.join(fx, `${name}.max.npy`)).data));
      expect(maxRelDiff(r.totalIntensity, readNpyF64(path.join(fx, `${name}.total.npy`)).data)).toBeLessThan(1e-9);
    }
    // The saturated column of a.npy (pixel y 3, x 5 is 65535 in every pattern) is found hot.
    expect(ra.badPixels.hot).toContainEqual([3, 5]);
    expect((await service.datasets()).find((d) => d.id === npy.id)!.version).toBe(2);
    await service.close(npy.id);
    await service.close(h5.id);
    expect(await service.datasets()).toEqual([]);
  });

  it('the first pass takes the COM sums along: with the defaults, com reads nothing more and equals a pass of its own', async () => {
    // a.npy has a hot pixel in every pattern (3, 5) and a one-pattern spike (20, 20) that the
    // sample of patterns taken before the pass may miss; steady.npy is a.npy without the spike.
    const steady = path.join(fx, 'steady.npy');
    const w = spawnSync(PYTHON, ['-c', 'import numpy as np, sys; a = np.load(sys.argv[1]); a[2, 3, 20, 20] = a[2, 3, 20, 19]; np.save(sys.argv[2], a)', path.join(fx, 'a.npy'), steady], { encoding: 'utf8' });
    expect(w.status, w.stderr).toBe(0);
    const fixed = { descan: { kind: 'none' as const }, rotation: { degrees: 0, flip: false } };
    for (const [file, expected] of [[steady, 'first pass'], [path.join(fx, 'a.npy'), 'own pass']] as const) {
      const d = await service.open({ path: file });
      const first = await service.firstPass({ dataset: d.id });
      expect(first.badPixels.hot).toContainEqual([3, 5]);
      const jobsBefore = (await service.jobs()).length;
      const fromPass = await service.comField({ dataset: d.id, ...fixed });
      // Where the pass found a bad pixel the sample did not, its sums cannot be used: a pass of its own follows.
      expect(fromPass.sumsFrom).toBe(expected);
      expect((await service.jobs()).length).toBe(jobsBefore + (expected === 'first pass' ? 0 : 1));
      // A threshold below every value changes nothing but always asks for a pass of its own.
      const own = await service.comField({ dataset: d.id, ...fixed, threshold: -1e300 });
      expect(own.sumsFrom).toBe('own pass');
      for (const k of ['com_x', 'com_y', 'total_intensity']) expect(Array.from(fromPass.maps[k].data)).toEqual(Array.from(own.maps[k].data));
      // reference: NumPy, Σ I·x / Σ I over the detector without the pixels found bad
      const bad = JSON.stringify([...first.badPixels.hot, ...first.badPixels.dead]);
      const p = spawnSync(PYTHON, ['-c', `import numpy as np, sys, json
a = np.load(sys.argv[1]).astype(np.float64); m = np.ones(a.shape[-2:], bool)
for y, x in json.loads(sys.argv[2]): m[y, x] = False
yy, xx = np.mgrid[0:a.shape[-2], 0:a.shape[-1]]
t = (a * m).sum(axis=(-2, -1))
print(json.dumps(((a * m * xx).sum(axis=(-2, -1)) / t).ravel().tolist()))`, file, bad], { encoding: 'utf8' });
      expect(p.status, p.stderr).toBe(0);
      expect(maxRelDiff(fromPass.maps.com_x.data, JSON.parse(p.stdout))).toBeLessThan(1e-12);
      await service.close(d.id);
    }
  });

  it('virtual images before any first pass: the pass the bad pixels need takes them along (one read), equal to NumPy and to a pass of their own', async () => {
    // steady.npy (made by the test above): a.npy without its one-pattern spike at (20, 20).
    const cases = [
      // The disk holds the hot pixel (3, 5), watched from the sample: one read.
      { file: path.join(fx, 'steady.npy'), detectors: [{ shape: { kind: 'disk' as const, cx: 5, cy: 3, r: 4 } }, { shape: { kind: 'annulus' as const, cx: 18, cy: 20, rInner: 3, rOuter: 15 } }], reads: 1 },
      // The annulus holds the spike, found bad only by the whole pass: its own pass follows.
      { file: path.join(fx, 'a.npy'), detectors: [{ shape: { kind: 'annulus' as const, cx: 18, cy: 20, rInner: 1, rOuter: 15 } }], reads: 2 },
    ];
    for (const c of cases) {
      const fresh = new EngineService({ workers: 2, cacheDir: null });
      try {
        const d = await fresh.open({ path: c.file });
        const labels: string[] = [];
        fresh.onEvent((e) => { if (e.kind === 'job' && e.job.state === 'done') labels.push(e.job.label); });
        const v = await fresh.virtualImages({ dataset: d.id, detectors: c.detectors, jobId: 'img' });
        expect([...new Set(labels)], c.file).toEqual(c.reads === 1 ? ['first pass (bad pixels)'] : ['first pass (bad pixels)', 'virtual images']);
        // reference: NumPy's sums over each detector (pixel centres inside, inner radius exclusive) without the bad pixels listed
        const bad = JSON.stringify([...v.badPixels!.hot, ...v.badPixels!.dead]);
        const p = spawnSync(PYTHON, ['-c', `import numpy as np, sys, json
a = np.load(sys.argv[1]).astype(np.float64); ky, kx = a.shape[-2:]
yy, xx = np.mgrid[0:ky, 0:kx]; good = np.ones((ky, kx), bool)
for y, x in json.loads(sys.argv[2]): good[y, x] = False
out = []
for s in json.loads(sys.argv[3]):
    s = s['shape']; r = np.hypot(xx - s['cx'], yy - s['cy'])
    m = (r <= s['r']) if s['kind'] == 'disk' else ((r > s['rInner']) & (r <= s['rOuter']))
    out.append((a * (m & good)).sum(axis=(-2, -1)).ravel().tolist())
print(json.dumps(out))`, c.file, bad, JSON.stringify(c.detectors)], { encoding: 'utf8' });
        expect(p.status, p.stderr).toBe(0);
        const want = JSON.parse(p.stdout) as number[][];
        v.images.forEach((im, k) => expect(Array.from(im)).toEqual(want[k]));
        // The same request again (the first pass known now) makes a pass of its own: bitwise the same.
        const again = await fresh.virtualImages({ dataset: d.id, detectors: c.detectors });
        again.images.forEach((im, k) => expect(Array.from(im)).toEqual(Array.from(v.images[k])));
      } finally {
        await fresh.shutdown();
      }
    }
  });

  it('the pattern at one probe position equals NumPy\'s a[y, x]', async () => {
    const d = await service.open({ path: path.join(fx, 'a.h5'), datasetPath: '/entry/frames' });
    const r = await service.patternAt({ dataset: d.id, y: 2, x: 3 });
    const p = spawnSync(PYTHON, ['-c', 'import numpy as np,sys,json; print(json.dumps(np.load(sys.argv[1])[2, 3].astype(float).ravel().tolist()))', path.join(fx, 'a.npy')], { encoding: 'utf8' });
    // reference: NumPy indexing of the same array h5py stored
    expect(Array.from(r.pattern)).toEqual(JSON.parse(p.stdout));
    expect([r.detY, r.detX]).toEqual([41, 37]);
    const err = await inputError(service.patternAt({ dataset: d.id, y: 6, x: 0 }));
    expect(err.message).toMatch(/outside the 6×7 scan/);
    await service.close(d.id);
  });

  it('preview images answer a detector drag after the first pass, in the units of the exact image', async () => {
    const d = await service.open({ path: path.join(fx, 'a.npy') });
    await expect(service.previewImages({ dataset: d.id, detectors: [{ shape: { kind: 'disk', cx: 18, cy: 20, r: 6 } }] })).rejects.toThrow(/no preview yet/);
    const f = await service.firstPass({ dataset: d.id });
    const det = { shape: { kind: 'rectangle' as const, x0: 0, y0: 0, x1: 36, y1: 40 } };
    const pv = await service.previewImages({ dataset: d.id, detectors: [det] });
    expect([pv.qY, pv.qX]).toEqual([f.preview.qY, f.preview.qX]);
    const exact = await service.virtualImages({ dataset: d.id, detectors: [det] });
    // Analytic: a detector over the whole pattern, bad pixels left out of both, gives the same
    // total in the preview (per scan bin, averaged) as the mean of the exact image over that bin.
    const { scanBin } = f.preview;
    const { scanX } = f.descriptor.shape;
    let sum = 0;
    for (let y = 0; y < scanBin; y++) for (let x = 0; x < scanBin; x++) sum += exact.images[0][y * scanX + x];
    expect(pv.images[0][0]).toBeCloseTo(sum / (scanBin * scanBin), 6);
    await service.close(d.id);
  });

  it('job events carry the client\'s job id; cancel by that id', async () => {
    const d = await service.open({ path: path.join(fx, 'a.npy') });
    const events: ServiceEvent[] = [];
    const off = service.onEvent((e) => events.push(e));
    await service.firstPass({ dataset: d.id, jobId: 'mine-1' });
    const mine = events.filter((e) => e.kind === 'job' && e.job.jobId === 'mine-1');
    expect(mine.length).toBeGreaterThan(1);
    const last = mine.at(-1)!;
    expect(last.kind === 'job' ? last.job.state : null).toBe('done');
    expect(events.some((e) => e.kind === 'dataset' && e.change === 'first-pass' && e.dataset === d.id)).toBe(true);
    // Cancelled at once, before any job of the request has started (a tiny file's pass can end
    // within one turn of the event loop, so waiting first would race): still cancelled.
    for (const [jobId, request] of [['mine-2', () => service.comField({ dataset: d.id, jobId: 'mine-2' })],
      ['mine-3', () => service.virtualImages({ dataset: d.id, detectors: [{ shape: { kind: 'disk', cx: 5, cy: 5, r: 3 } }], jobId: 'mine-3' })]] as const) {
      const q = request();
      expect(await service.cancel(jobId)).toBe(true);
      await expect(q).rejects.toBeInstanceOf(CancelledError);
    }
    expect(await service.cancel('no-such-job')).toBe(false);
    off();
    await service.close(d.id);
  });

  it('error codes survive the crossing from a worker', async () => {
    const err = await inputError(service.open({ path: path.join(fx, 'missing.npy') }));
    expect(err.code).toBe('missing-file');
    expect(err.message).toMatch(/missing\.npy: file not found/);
  });

  it('one validator: bad requests get one message style, whatever their way in', async () => {
    const cases: [() => Promise<unknown>, RegExp][] = [
      [() => service.open({ path: '' }), /^open: path: got ""; expected a non-empty text$/],
      [() => service.firstPass({ dataset: 'dataset-999' }), /dataset "dataset-999" is not open; expected an id returned by open/],
      // eslint-disable-next-line @typescript-eslint/no-explicit-any
      [() => service.virtualImages({ dataset: 'x', detectors: [{ shape: { kind: 'disk', cx: 1, cy: 1, r: -2 } }] } as any), /^virtualImages: detectors\.0\.shape\.r: got -2; expected a number > 0$/],
      // eslint-disable-next-line @typescript-eslint/no-explicit-any
      [() => service.comField({ dataset: 'x', descan: { kind: 'reference', region: { x0: 5, y0: 0, x1: 1, y1: 1 } } } as any), /^comField: descan\.region: the corners are swapped; expected x0 ≤ x1 and y0 ≤ y1$/],
      // eslint-disable-next-line @typescript-eslint/no-explicit-any
      [() => service.calibrate({ dataset: 'x', energyKeV: 200, convergenceMrad: 20, latticeSpacingAngstrom: 2 } as any), /^calibrate: request: give at most one of convergenceMrad or latticeSpacingAngstrom$/],
      // eslint-disable-next-line @typescript-eslint/no-explicit-any
      [() => service.firstPass({ dataset: 'x', extra: true } as any), /^firstPass: request: unknown field "extra"; expected only the fields this request takes$/],
    ];
    for (const [p, re] of cases) {
      const e = await inputError(p());
      expect(e.message).toMatch(re);
      if (!/is not open/.test(e.message)) expect(e.code).toBe('bad-request');
    }
    // The same validator, called directly (as IPC and session files will).
    expect(() => validateRequest('patternAt', { dataset: 'a', y: 1.5, x: 0 })).toThrow(/^patternAt: y: got 1\.5; expected a whole number$/);
  });
});
