// Session files through the engine service: save → reopen gives the same setup and bitwise the
// same results; h5py (outside Scanfold) reads every result, its units and the recipe; moved
// data is found by fingerprint, missing data leaves the results viewable, other data is refused
// with what differs; a newer format is refused; a save killed at any moment leaves the previous
// file whole.
import fs from 'node:fs';
import path from 'node:path';
import os from 'node:os';
import { spawn, spawnSync } from 'node:child_process';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { build } from 'esbuild';
import { EngineService } from '../../src-main/engine/service';
import type { KeptResult } from '../../src-shared/contract/service';
import type { AppSetup } from '../../src-shared/model/session';
import { writeHdf5File } from '../../src-main/io/hdf5-writer';
import { readSessionFile } from '../../src-main/session/session-file';
import { OutputFile } from '../../src-main/io/output-file';
import { writeSample } from '../../samples/write-sample';
import { inputError, makeDemoSample, PYTHON, readNpyF64 } from '../helpers/fixtures';

let dir: string;
let file: string;
let service: EngineService;
let saved: KeptResult[];
const session = () => path.join(dir, 'analysis.scanfold.h5');

const APP: Omit<AppSetup, 'dataset'> = {
  detectors: [{ id: 'd1', name: 'BF', colour: '#4cc9f0', visible: true, shape: { kind: 'disk', cx: 64, cy: 64, r: 12 } }],
  regions: [{ id: 'r1', name: 'corner', colour: '#f72585', visible: false, shape: { kind: 'rectangle', x0: 0, y0: 0, x1: 7, y1: 7 } }],
  calibration: { energyKeV: 300 },
  analyses: { pcaComponents: 4, kmeansClusters: 3, descanRegion: null, fieldRotation: 'auto' },
  shows: { scan: { kind: 'detector', id: 'd1' }, pattern: { kind: 'region', id: 'r1', stat: 'mean' } },
  activeDetector: 'd1',
  scanView: { colormap: 'viridis', scaling: { kind: 'linear' }, limits: [0, 10], limitsFor: 'detector:d1' },
  patternView: { colormap: 'magma', scaling: { kind: 'gamma', gamma: 0.5 }, limits: null },
};


/** Every typed array of a result, by its path, for bitwise comparison. */
function arraysOf(v: unknown, at = ''): Map<string, ArrayLike<number>> {
  const out = new Map<string, ArrayLike<number>>();
  const walk = (x: unknown, p: string) => {
    if (ArrayBuffer.isView(x)) out.set(p, x as unknown as ArrayLike<number>);
    else if (Array.isArray(x)) x.forEach((y, i) => walk(y, `${p}/${i}`));
    else if (x && typeof x === 'object') for (const [k, y] of Object.entries(x)) walk(y, `${p}/${k}`);
  };
  walk(v, at);
  return out;
}

function bitwiseEqual(a: ArrayLike<number>, b: ArrayLike<number>): boolean {
  if (a.length !== b.length || a.constructor !== b.constructor) return false;
  const x = new Uint8Array((a as Float64Array).buffer, (a as Float64Array).byteOffset, (a as Float64Array).byteLength);
  const y = new Uint8Array((b as Float64Array).buffer, (b as Float64Array).byteOffset, (b as Float64Array).byteLength);
  return x.length === y.length && x.every((v, i) => v === y[i]);
}

beforeAll(async () => {
  ({ dir, file } = await makeDemoSample('scanfold-session-'));
  service = new EngineService({ workers: 2, cacheDir: null });
  const d = await service.open({ path: file });
  const rect = (x0: number, y0: number, x1: number, y1: number) => ({ kind: 'rectangle' as const, x0, y0, x1, y1 });
  await service.virtualImages({ dataset: d.id, detectors: [{ shape: { kind: 'disk', cx: 48, cy: 48, r: 12 } }, { shape: { kind: 'annulus', cx: 48, cy: 48, rInner: 20, rOuter: 45 } }], keepAs: 'images' });
  await service.comField({ dataset: d.id, keepAs: 'field' });
  await service.calibrate({ dataset: d.id, keepAs: 'calibration' });
  await service.regionPattern({ dataset: d.id, region: rect(0, 0, 7, 7), keepAs: 'corner' });
  await service.pca({ dataset: d.id, components: 4, seed: 3, keepAs: 'pca' });
  await service.kmeans({ dataset: d.id, clusters: 3, seed: 1, keepAs: 'kmeans' });
  await service.fit({ dataset: d.id, references: [rect(0, 0, 7, 7), rect(40, 40, 50, 50)], keepAs: 'fit' });
  // A request without keepAs is not kept.
  await service.regionPattern({ dataset: d.id, region: rect(1, 1, 2, 2) });
  const s = await service.saveSession({ path: session(), app: { ...APP, dataset: d.id } });
  expect(s).toMatchObject({ results: 7, datasets: 1 });
  saved = (await service.openSession({ path: session(), openData: false })).results;
}, 240_000);

afterAll(async () => {
  await service?.shutdown();
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

describe('session files', () => {
  it('reopen in a fresh engine: the same setup, recipes and bitwise the same results', async () => {
    const fresh = new EngineService({ workers: 1, cacheDir: null });
    try {
      const o = await fresh.openSession({ path: session() });
      expect(o.datasets.map((d) => d.status)).toEqual(['found']);
      const ref = o.document.datasets[0];
      expect(o.document.app).toEqual({ ...APP, dataset: ref.id });
      expect(o.results.map((r) => r.key)).toEqual(['images', 'field', 'calibration', 'corner', 'pca', 'kmeans', 'fit']);
      expect(o.results.find((r) => r.key === 'pca')!.request).toEqual({ components: 4, seed: 3 });
      const opened = o.datasets[0].opened!;
      for (const r of o.results) {
        expect(r.dataset).toBe(opened.id);
        const before = saved.find((s) => s.key === r.key)!;
        const a = arraysOf(before.result);
        const b = arraysOf(r.result);
        expect([...b.keys()]).toEqual([...a.keys()]);
        for (const [k, v] of a) expect(bitwiseEqual(b.get(k)!, v), `${r.key}${k}`).toBe(true);
        // Everything else, numbers and text, equal too.
        const strip = (x: unknown) => JSON.parse(JSON.stringify(x, (_k, v) => (ArrayBuffer.isView(v) ? null : v)));
        expect(strip({ ...(r.result as object), dataset: null })).toEqual(strip({ ...(before.result as object), dataset: null }));
      }
      // The same results as computing again: the recipe replays.
      const again = await fresh.pca({ dataset: opened.id, ...(o.results.find((r) => r.key === 'pca')!.request as { components: number }) });
      expect(bitwiseEqual(again.loadings, (o.results.find((r) => r.key === 'pca')!.result as { loadings: Float64Array }).loadings)).toBe(true);
    } finally {
      await fresh.shutdown();
    }
  }, 120_000);

  it('h5py reads every result, its units and dimension labels, and the recipe, with no Scanfold', () => {
    const out = path.join(dir, 'h5py');
    fs.mkdirSync(out, { recursive: true });
    // h5py (outside the project) walks the file and dumps each result array as .npy (float64).
    const py = `
import h5py, json, sys, numpy as np
f = h5py.File(sys.argv[1], 'r')
meta = {'root': {k: (v if isinstance(v, str) else float(v)) for k, v in f.attrs.items() if k != 'session_json'}, 'results': {}}
for key, g in f['results'].items():
    arrays = {}
    for name, d in g.items():
        np.save(f"{sys.argv[2]}/{key}__{name}.npy", np.asarray(d[()], dtype='<f8'))
        arrays[name] = {'shape': list(d.shape), 'dtype': str(d.dtype), 'units': d.attrs.get('units', ''), 'dims': [dim.label for dim in d.dims]}
    meta['results'][key] = {'method': g.attrs['method'], 'request': json.loads(g.attrs['request_json']), 'fingerprint': g.attrs['input_fingerprint'], 'arrays': arrays}
meta['datasets'] = {k: {a: (v if isinstance(v, str) else np.asarray(v).tolist()) for a, v in g.attrs.items()} for k, g in f['datasets'].items()}
print(json.dumps(meta))
`;
    const p = spawnSync(PYTHON, ['-c', py, session(), out], { encoding: 'utf8' });
    expect(p.status, p.stderr).toBe(0);
    const meta = JSON.parse(p.stdout);
    expect(meta.root).toMatchObject({ format: 'scanfold-session', format_version: 1 });
    expect(meta.datasets['data-1']).toMatchObject({ absolute_path: fs.realpathSync(file), relative_path: 'demo.h5', dtype: 'uint16' });
    expect(meta.results.pca.request).toEqual({ components: 4, seed: 3 });
    expect(meta.results.pca.arrays.loadings).toMatchObject({ shape: [4, 64, 64], dtype: 'float64', dims: ['component', 'scan_y', 'scan_x'] });
    expect(meta.results.kmeans.arrays.labels).toMatchObject({ dtype: 'int32', units: 'cluster index, 0 … k − 1' });
    expect(meta.results.field.arrays.phase.units).toBeTruthy();
    expect(meta.results.images.arrays.images.shape).toEqual([2, 64, 64]);
    // Every array h5py read equals the result Scanfold holds, value for value.
    const camel = (n: string) => n.replace(/_([a-z])/g, (_m, c: string) => c.toUpperCase());
    let checked = 0;
    for (const r of saved) {
      const res = r.result as unknown as Record<string, unknown> & { maps?: Record<string, { data: Float64Array }>; images?: Float64Array[] };
      for (const [name, a] of Object.entries(meta.results[r.key]?.arrays ?? {}) as [string, { shape: number[] }][]) {
        const npy = readNpyF64(path.join(out, `${r.key}__${name}.npy`));
        expect(npy.shape).toEqual(a.shape);
        const held = name === 'images' ? res.images!.flatMap((img) => Array.from(img))
          : Array.from((res[camel(name)] ?? res.maps?.[name]?.data ?? res[name.replace('_pattern', '')]) as ArrayLike<number>, Number);
        expect(Array.from(npy.data), `${r.key}/${name}`).toEqual(held);
        checked++;
      }
    }
    // images 1, field ≥ 8 maps, corner 2, pca 5, kmeans 4, fit 3.
    expect(checked).toBeGreaterThanOrEqual(23);
  }, 60_000);

  it('moved data is found by fingerprint; missing data leaves the results; other data is refused, saying what differs', async () => {
    const moved = path.join(dir, 'moved');
    fs.mkdirSync(moved);
    fs.copyFileSync(session(), path.join(moved, 'analysis.scanfold.h5'));
    const eng = new EngineService({ workers: 1, cacheDir: null });
    try {
      // Session alone in another folder: the data is missing, the results are still there.
      const alone = await eng.openSession({ path: path.join(moved, 'analysis.scanfold.h5') });
      expect(alone.datasets[0].status).toBe('found'); // still at its absolute path
      fs.renameSync(file, path.join(moved, 'demo.h5'));
      const beside = await eng.openSession({ path: path.join(moved, 'analysis.scanfold.h5') });
      expect(beside.datasets[0]).toMatchObject({ status: 'moved', path: fs.realpathSync(path.join(moved, 'demo.h5')) });
      fs.renameSync(path.join(moved, 'demo.h5'), path.join(dir, 'elsewhere.h5'));
      const missing = await eng.openSession({ path: session() });
      expect(missing.datasets[0].status).toBe('missing');
      expect(missing.results).toHaveLength(7);
      expect(missing.results.every((r) => r.dataset === null && (r.result as { dataset: string }).dataset === 'data-1')).toBe(true);
      // Relinked by the user: found, and a save records the new place.
      const relinked = await eng.openSession({ path: session(), relink: { 'demo.h5': path.join(dir, 'elsewhere.h5') } });
      expect(relinked.datasets[0]).toMatchObject({ status: 'moved' });
      await eng.saveSession({ path: path.join(moved, 'relinked.scanfold.h5') });
      expect((await readSessionFile(path.join(moved, 'relinked.scanfold.h5'))).doc.datasets[0].absolutePath).toBe(fs.realpathSync(path.join(dir, 'elsewhere.h5')));
      // Other data under the recorded name: not analysed in its place.
      await writeSample({ size: 'tiny', out: file });
      const other = await eng.openSession({ path: session() });
      expect(other.datasets[0].status).toBe('different');
      expect(other.datasets[0].how).toMatch(/holds other data than the session used: shape .* not 64×64 positions × 96×96 pixels \(fingerprint/);
      const e = await inputError(eng.openSession({ path: session(), relink: { [file]: file } }));
      expect(e.code).toBe('different-data');
      expect(e.message).toMatch(/refused/);
      fs.renameSync(path.join(dir, 'elsewhere.h5'), file);
    } finally {
      await eng.shutdown();
    }
  }, 120_000);

  it('a newer format is refused with a clear message; a damaged document and a plain HDF5 file are refused', async () => {
    const doc = JSON.parse(fs.readFileSync(session()).includes(Buffer.from('scanfold-session')) ? JSON.stringify((await readSessionFile(session())).doc) : '{}');
    const newer = path.join(dir, 'newer.scanfold.h5');
    writeHdf5File(newer, { attrs: { format: 'scanfold-session', session_json: JSON.stringify({ ...doc, formatVersion: 99, scanfoldVersion: '9.0.0' }) }, datasets: {} });
    const e = await inputError(service.openSession({ path: newer, openData: false }));
    expect(e.code).toBe('newer-session');
    expect(e.message).toMatch(/format 99 by Scanfold 9\.0\.0; this Scanfold reads formats 1 to 1/);
    const bad = path.join(dir, 'bad.scanfold.h5');
    writeHdf5File(bad, { attrs: { format: 'scanfold-session', session_json: JSON.stringify({ ...doc, entries: [{ ...doc.entries[4], request: { components: -1 } }] }) }, datasets: {} });
    expect((await inputError(service.openSession({ path: bad, openData: false }))).message).toMatch(/the recipe of result "pca": pca: components: got -1/);
    expect((await inputError(service.openSession({ path: file, openData: false }))).message).toMatch(/not a Scanfold session/);
    // A result whose arrays are missing or of the wrong size: refused as damaged, not a crash.
    const hollow = path.join(dir, 'hollow.scanfold.h5');
    const pcaEntry = doc.entries[4];
    writeHdf5File(hollow, {
      attrs: { format: 'scanfold-session', session_json: JSON.stringify({ ...doc, entries: [pcaEntry] }) },
      datasets: { 'results/pca/singular_values': { data: new Float64Array(3), shape: [3] } },
      groups: { 'results/pca': { result_json: JSON.stringify({ k: 4, singularValues: { $array: 'singular_values', type: 'Float64Array' }, descriptor: { shape: { scanY: 64, scanX: 64 } }, features: { outY: 2, outX: 2 } }) } },
    });
    const damaged = await inputError(service.openSession({ path: hollow, openData: false }));
    expect(damaged.code).toBe('bad-session');
    expect(damaged.message).toMatch(/result pca: .*the file is damaged/);
  });

  it('a save never replaces a file that is not a session; a job still running when the session is forgotten keeps nothing', async () => {
    const notes = path.join(dir, 'notes.txt');
    fs.writeFileSync(notes, 'my notes');
    const e = await inputError(service.saveSession({ path: notes }));
    expect(e.message).toMatch(/exists and is not a Scanfold session file/);
    expect(fs.readFileSync(notes, 'utf8')).toBe('my notes');
    expect((await inputError(service.saveSession({ path: file }))).message).toMatch(/is a file this command reads/);
    const d = (await service.datasets())[0];
    const late = service.pca({ dataset: d.id, components: 2, keepAs: 'late' });
    await service.forgetSession();
    await late;
    expect((await service.sessionEntries()).map((x) => x.key)).not.toContain('late');
  }, 60_000);

  it('kept results can be forgotten by key (a deleted detector\'s image): the others stay, unknown keys are ignored, bad keys refused', async () => {
    const d = (await service.datasets())[0];
    const disk = (r: number) => [{ shape: { kind: 'disk' as const, cx: 48, cy: 48, r } }];
    await service.virtualImages({ dataset: d.id, detectors: disk(5), badPixels: 'none', keepAs: 'detector-gone' });
    await service.virtualImages({ dataset: d.id, detectors: disk(9), badPixels: 'none', keepAs: 'detector-stays' });
    expect(await service.forgetResults(['detector-gone', 'never-kept'])).toEqual(['detector-gone']);
    const keys = (await service.sessionEntries()).map((x) => x.key);
    expect(keys).toContain('detector-stays');
    expect(keys).not.toContain('detector-gone');
    expect((await inputError(service.forgetResults(['../x']))).message).toMatch(/forgetResults.*expected a name of letters/);
    expect((await inputError(service.forgetResults('detector-stays' as never))).message).toMatch(/forgetResults/);
    await service.forgetResults(['detector-stays']);
  }, 60_000);

  it('recovery files are listed from their documents alone: a damaged document is not offered; damaged arrays are refused when opened', async () => {
    const stateDir = path.join(dir, 'state-listing');
    const writer = new EngineService({ workers: 1, cacheDir: null, stateDir });
    try {
      const d = await writer.open({ path: file });
      await writer.virtualImages({ dataset: d.id, detectors: [{ shape: { kind: 'disk', cx: 48, cy: 48, r: 12 } }], badPixels: 'none', keepAs: 'detector-a' });
      const { recovery } = await writer.autosave({ session: null, keys: ['detector-a'] });
      // Two damaged copies, listed in the index as a crash would have left them (h5py rewrites them).
      const badDoc = path.join(stateDir, 'unsaved.baddoc-1.recovery.h5');
      const badArrays = path.join(stateDir, 'unsaved.badarrays-2.recovery.h5');
      fs.copyFileSync(recovery, badDoc);
      fs.copyFileSync(recovery, badArrays);
      const py = `import h5py, sys
with h5py.File(sys.argv[1], 'r+') as f: f.attrs['session_json'] = '{not json'
with h5py.File(sys.argv[2], 'r+') as f:
    g = f['results/detector-a']; del g['images']; g['images'] = [1.0, 2.0]`;
      const p = spawnSync(PYTHON, ['-c', py, badDoc, badArrays], { encoding: 'utf8' });
      expect(p.status, p.stderr).toBe(0);
      const indexFile = path.join(stateDir, 'recovery-index.json');
      const index = JSON.parse(fs.readFileSync(indexFile, 'utf8')) as { recovery: string; session: string | null }[];
      fs.writeFileSync(indexFile, JSON.stringify([...index, { recovery: badDoc, session: null }, { recovery: badArrays, session: null }]));
      // The next start (another engine on the same state folder).
      const next = new EngineService({ workers: 1, cacheDir: null, stateDir });
      try {
        const offers = await next.recoverable();
        expect(offers.map((o) => path.basename(o.recovery)).sort()).toEqual([path.basename(recovery), path.basename(badArrays)].sort());
        expect(offers.every((o) => o.results === 1)).toBe(true);
        const e = await inputError(next.openSession({ path: badArrays, openData: false }));
        expect(e.code).toBe('bad-session');
        expect(e.message).toMatch(/result detector-a: .*the file is damaged/);
        expect((await next.openSession({ path: recovery, openData: false })).results.map((x) => x.key)).toEqual(['detector-a']);
      } finally {
        await next.shutdown();
      }
    } finally {
      await writer.shutdown();
    }
  }, 60_000);

  it('a raw dataset saved before trailers were recorded (bytes after its data, no trailer in the session) still reopens', async () => {
    const raw = path.join(dir, 'with-footer.raw');
    const p = spawnSync(PYTHON, ['-c', `import h5py, sys
with open(sys.argv[2], 'wb') as out:
    out.write(h5py.File(sys.argv[1])['scan/frames'][()].astype('<u2').tobytes()); out.write(b'a footer of 23 bytes!!!')`, file, raw], { encoding: 'utf8' });
    expect(p.status, p.stderr).toBe(0);
    const eng = new EngineService({ workers: 1, cacheDir: null, stateDir: path.join(dir, 'state-raw') });
    const old = path.join(dir, 'old-raw.scanfold.h5');
    try {
      const { shape } = (await eng.open({ path: file })).descriptor;
      const d = await eng.open({ path: raw, raw: { shape, dtype: 'uint16', byteOrder: 'little', offset: 0, trailer: 23 } });
      await eng.virtualImages({ dataset: d.id, detectors: [{ shape: { kind: 'disk', cx: 48, cy: 48, r: 10 } }], badPixels: 'none', keepAs: 'disk' });
      await eng.saveSession({ path: old });
    } finally {
      await eng.shutdown();
    }
    // As an older Scanfold wrote it: the same session with no trailer in the dataset's spec.
    const q = spawnSync(PYTHON, ['-c', `import h5py, json, sys
with h5py.File(sys.argv[1], 'r+') as f:
    doc = json.loads(f.attrs['session_json'])
    for d in doc['datasets']: d['spec']['raw'].pop('trailer')
    f.attrs['session_json'] = json.dumps(doc)`, old], { encoding: 'utf8' });
    expect(q.status, q.stderr).toBe(0);
    const next = new EngineService({ workers: 1, cacheDir: null, stateDir: path.join(dir, 'state-raw') });
    try {
      const s = await next.openSession({ path: old });
      expect(s.datasets.map((x) => x.status)).toEqual(['found']);
      expect(s.datasets[0].opened).not.toBeNull();
    } finally {
      await next.shutdown();
    }
  }, 60_000);

  it('a dataset whose file is replaced while open is not read as the new file', async () => {
    const eng = new EngineService({ workers: 1, cacheDir: null });
    const copy = path.join(dir, 'replaced.h5');
    fs.copyFileSync(file, copy);
    try {
      const d = await eng.open({ path: copy });
      const disk = [{ shape: { kind: 'disk' as const, cx: 48, cy: 48, r: 10 } }];
      await eng.virtualImages({ dataset: d.id, detectors: disk, badPixels: 'none' });
      await writeSample({ size: 'demo', out: copy, seed: 7 });
      const e = await inputError(eng.virtualImages({ dataset: d.id, detectors: disk, badPixels: 'none' }));
      expect(e.message).toMatch(/changed on disk .* since it was opened; open it again/);
      // Opened again, it is the new file.
      const again = await eng.open({ path: copy });
      expect(again.descriptor.fingerprint).not.toBe(d.descriptor.fingerprint);
      await eng.virtualImages({ dataset: again.id, detectors: disk, badPixels: 'none' });
    } finally {
      await eng.shutdown();
    }
  }, 120_000);

  it('a save killed with SIGKILL at any moment leaves the previous session whole', async () => {
    // A child process saves a large session over and over; it is killed at many moments.
    const child = path.join(__dirname, '..', '..', 'test-artifacts', 'session-writer-child.mjs');
    await build({
      entryPoints: [path.join(__dirname, '..', 'helpers', 'session-writer-child.ts')], bundle: true, platform: 'node', format: 'esm',
      outfile: child, packages: 'external', logLevel: 'error',
    });
    const target = path.join(dir, 'killed.scanfold.h5');
    const stale = () => fs.readdirSync(dir).filter((f) => f.startsWith('.killed.scanfold.h5.scanfold-'));
    fs.copyFileSync(session(), target);
    const before = fs.readFileSync(target);
    let replaced = 0;
    for (let i = 0; i < 24; i++) {
      const p = spawn(process.execPath, [child, target], { stdio: ['ignore', 'pipe', 'inherit'] });
      // Wait until it is writing, then kill it a different while later each time.
      await new Promise<void>((resolve) => p.stdout.once('data', () => resolve()));
      await new Promise((r) => setTimeout(r, (i % 12) * 4));
      p.kill('SIGKILL');
      await new Promise((r) => p.once('exit', r));
      // A killed writer leaves its private temporary folder (a crash cannot clean up); the next
      // writer of the same file removes it, so at most the last one is ever there.
      expect(stale().length).toBeLessThanOrEqual(1);
      const now = fs.readFileSync(target);
      if (!now.equals(before)) {
        replaced++;
        // A finished save: the whole new session, readable.
        const s = await readSessionFile(target);
        expect(s.doc.entries.map((e) => e.key)).toEqual(['big']);
        fs.writeFileSync(target, before);
      } else {
        expect((await readSessionFile(target)).doc.entries).toHaveLength(7);
      }
    }
    // Some kills must have landed during a write (the child writes back to back).
    expect(replaced).toBeLessThan(24);
    // A write that runs to its end leaves no folder behind, the killed writer's included; a folder
    // of a process still running, or of another user's or machine's name, is left alone.
    const live = path.join(dir, `.killed.scanfold.h5.scanfold-${os.hostname().replace(/[^A-Za-z0-9_-]/g, '').slice(0, 24) || 'host'}-${process.pid}-abcdef`);
    fs.mkdirSync(live);
    const other = path.join(dir, '.killed.scanfold.h5.scanfold-elsewhere-1-abcdef');
    fs.mkdirSync(other);
    const out = OutputFile.create(target, { flag: 'session' });
    out.discard();
    expect(stale().sort()).toEqual([path.basename(other), path.basename(live)].sort());
    fs.rmdirSync(live);
    fs.rmdirSync(other);
  }, 180_000);
});
