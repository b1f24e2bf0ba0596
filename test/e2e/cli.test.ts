// The `scanfold` command as a user runs it (the bundled CLI in a child process).
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { makeFixtures, maxRelDiff, PYTHON, readNpyF64, tightBudget } from '../helpers/fixtures';

const root = path.resolve(__dirname, '../..');
const BIN = path.join(root, 'bin/scanfold.mjs');
let fx: string;
let tmp: string;

function scanfold(...args: string[]) {
  const p = spawnSync(process.execPath, [BIN, ...args], { encoding: 'utf8', env: { ...process.env } });
  return { code: p.status, out: p.stdout, err: p.stderr };
}

/** Read datasets back with h5py: the reference HDF5 library decides whether our output is valid. */
function h5pyDump(file: string, names: string[]): Record<string, number[]> {
  const code = `import h5py, json, sys, numpy as np
f = h5py.File(sys.argv[1], 'r')
print(json.dumps({n: np.asarray(f[n], dtype=np.float64).ravel().tolist() for n in sys.argv[2:]} | {'_dtypes': [str(f[n].dtype) for n in sys.argv[2:]]}))`;
  const p = spawnSync(PYTHON, ['-c', code, file, ...names], { encoding: 'utf8' });
  if (p.status !== 0) throw new Error(p.stderr);
  return JSON.parse(p.stdout);
}

beforeAll(() => {
  fx = makeFixtures('make_engine_fixtures.py');
  tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-cli-'));
});
afterAll(() => {
  fs.rmSync(fx, { recursive: true, force: true });
  fs.rmSync(tmp, { recursive: true, force: true });
});

describe('scanfold CLI', () => {
  it('--help lists the commands; COMMAND --help explains every flag of one; --version', () => {
    const r = scanfold('--help');
    expect(r.code).toBe(0);
    for (const c of ['info', 'summary', 'image', 'com', 'calibrate', 'pattern', 'sample', 'demo']) expect(r.out).toMatch(new RegExp(`^  ${c} `, 'm'));
    const com = scanfold('com', '--help');
    expect(com.code).toBe(0);
    // every flag the command takes is explained in its help
    for (const f of ['--descan', '--descan-region', '--rotation', '--flip', '--mask-disk', '--threshold', '--mrad-per-pixel', '--bad-pixels', '--out', '--workers', '--budget']) {
      expect(com.out).toContain(f);
    }
    expect(com.out).not.toContain('scanfold image');
    expect(scanfold('--version').out).toMatch(/^scanfold \d+\.\d+\.\d+/);
  });

  it('an unknown flag names the closest known one', () => {
    const r = scanfold('com', path.join(fx, 'a.npy'), '--treshold', '3', '--out', path.join(tmp, 'x.h5'));
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/unknown flag --treshold; did you mean --threshold\?/);
  });

  it('every output records its provenance: version, command line, request, input fingerprint (h5py reads them)', () => {
    const out = path.join(tmp, 'prov.h5');
    expect(scanfold('summary', path.join(fx, 'a.npy'), '--out', out, '--quiet').code).toBe(0);
    const p = spawnSync(PYTHON, ['-c', `import h5py, sys, json
f = h5py.File(sys.argv[1])
print(json.dumps({k: str(f.attrs[k]) for k in ('scanfold_version', 'command_line', 'request', 'source_fingerprint', 'created')} | {'dims': [d.label for d in f['mean_pattern'].dims]}))`, out], { encoding: 'utf8' });
    expect(p.status, p.stderr).toBe(0);
    const a = JSON.parse(p.stdout);
    expect(a.scanfold_version).toMatch(/^\d+\.\d+\.\d+/);
    expect(JSON.parse(a.command_line)).toEqual(['summary', path.join(fx, 'a.npy'), '--out', out, '--quiet']);
    expect(a.source_fingerprint).toMatch(/^sha256:/);
    // The request as given, without the engine's handle of the dataset (meaningless after the run).
    expect(JSON.parse(a.request)).not.toHaveProperty('dataset');
    expect(a.dims).toEqual(['det_y', 'det_x']);
    expect(Date.parse(a.created)).not.toBeNaN();
  });

  it('info on an HDF5 file without --dataset lists the candidate datasets', () => {
    const r = scanfold('info', path.join(fx, 'a.h5'));
    expect(r.code).toBe(0);
    const j = JSON.parse(r.out);
    const frames = j.datasets.find((d: { path: string }) => d.path === '/entry/frames');
    // reference: h5py wrote /entry/frames with shape (6,7,41,37) uint16 chunks (2,7,41,37) gzip+shuffle
    expect(frames).toMatchObject({ shape: [6, 7, 41, 37], dtype: 'uint16', chunks: [2, 7, 41, 37], candidate: true });
    expect(j.datasets.find((d: { path: string }) => d.path === '/not_4d').candidate).toBe(false);
  });

  it('info prints the descriptor of a .npy file', () => {
    const r = scanfold('info', path.join(fx, 'a.npy'));
    expect(r.code).toBe(0);
    const d = JSON.parse(r.out);
    // reference: NumPy np.save of a (6,7,41,37) uint16 array
    expect(d).toMatchObject({ format: 'npy', dtype: 'uint16', shape: { scanY: 6, scanX: 7, detY: 41, detX: 37 }, byteSize: 6 * 7 * 41 * 37 * 2 });
    expect(d.fingerprint).toMatch(/^sha256:[0-9a-f]{32}$/);
  });

  it('summary writes float64 /mean_pattern, /max_pattern, /total_intensity equal to NumPy', () => {
    const out = path.join(tmp, 'sum-a.h5');
    const r = scanfold('summary', path.join(fx, 'a.h5'), '--dataset', '/entry/frames', '--out', out, '--workers', '2', '--budget', String(tightBudget(2, true)));
    expect(r.code, r.err).toBe(0);
    expect(r.err).toMatch(/first pass/);
    const got = h5pyDump(out, ['mean_pattern', 'max_pattern', 'total_intensity']);
    expect(got._dtypes).toEqual(['float64', 'float64', 'float64']);
    // reference: NumPy on the same data (make_engine_fixtures.py)
    expect(maxRelDiff(got.mean_pattern, readNpyF64(path.join(fx, 'a.mean.npy')).data)).toBeLessThan(1e-9);
    expect(got.max_pattern).toEqual(Array.from(readNpyF64(path.join(fx, 'a.max.npy')).data));
    expect(maxRelDiff(got.total_intensity, readNpyF64(path.join(fx, 'a.total.npy')).data)).toBeLessThan(1e-9);
  });

  it('summary of a described raw file (big-endian float64 after a header)', () => {
    const out = path.join(tmp, 'sum-c.h5');
    const r = scanfold('summary', path.join(fx, 'c.raw'), '--raw-shape', '5,4,6,8', '--dtype', 'float64', '--byte-order', 'big', '--offset', '128', '--out', out, '--quiet');
    expect(r.code, r.err).toBe(0);
    expect(r.err).toMatch(/3 NaN\/Inf/);
    const got = h5pyDump(out, ['total_intensity']);
    // reference: NumPy sum with non-finite values left out
    expect(maxRelDiff(got.total_intensity, readNpyF64(path.join(fx, 'c.total.npy')).data)).toBeLessThan(1e-9);
  });

  const bad: [string, () => string[], RegExp][] = [
    ['missing file', () => ['summary', path.join(tmp, 'nope.h5')], /nope\.h5/],
    ['raw file shorter than offset + shape × dtype', () => ['summary', path.join(fx, 'c.raw'), '--raw-shape', '5,4,6,9', '--dtype', 'float64'], /c\.raw.*(short|expected)/is],
    ['unknown dtype', () => ['summary', path.join(fx, 'c.raw'), '--raw-shape', '5,4,6,8', '--dtype', 'uint64'], /uint64.*expected/],
    ['dataset that is not 3-D/4-D', () => ['summary', path.join(fx, 'a.h5'), '--dataset', '/not_4d'], /not_4d/],
    ['3-D dataset whose length is not scan_y × scan_x', () => ['summary', path.join(fx, 'b.h5'), '--dataset', '/frames', '--scan-shape', '5,7'], /42/],
    ['zero in a shape', () => ['summary', path.join(fx, 'c.raw'), '--raw-shape', '0,4,6,8', '--dtype', 'float64'], /positive/],
    ['shape overflowing 2^53 bytes', () => ['summary', path.join(fx, 'c.raw'), '--raw-shape', '100000,100000,100000,100000', '--dtype', 'float64'], /2\^53/],
    ['budget too small for one row', () => ['summary', path.join(fx, 'a.npy'), '--budget', '1KiB'], /budget/],
    ['unknown flag', () => ['summary', path.join(fx, 'a.npy'), '--frobnicate'], /frobnicate/],
    ['--dataset on a .npy file', () => ['summary', path.join(fx, 'a.npy'), '--dataset', '/x'], /HDF5/],
    ['--scan-shape with a raw file', () => ['summary', path.join(fx, 'c.raw'), '--raw-shape', '5,4,6,8', '--dtype', 'float64', '--scan-shape', '4,5'], /scan-shape/],
    ['two input files', () => ['summary', path.join(fx, 'a.npy'), path.join(fx, 'a.h5')], /one input file/],
    ['a folder as input', () => ['summary', fx], /folder|directory/],
  ];
  for (const [what, args, msg] of bad) {
    it(`bad input: ${what} → exit 2, a message, nothing written`, () => {
      const out = path.join(tmp, `bad-${what.replace(/\W+/g, '-')}.h5`);
      const r = scanfold(...args(), '--out', out);
      expect(r.code).toBe(2);
      expect(r.err).toMatch(msg);
      expect(r.err).not.toMatch(/\n\s+at /); // a message, not a stack trace
      expect(fs.existsSync(out)).toBe(false);
      expect(fs.existsSync(out + '.partial')).toBe(false);
    });
  }

  it('refuses --out that is the input file itself, and leaves the input intact', () => {
    const copy = path.join(tmp, 'self.h5');
    fs.copyFileSync(path.join(fx, 'a.h5'), copy);
    const before = fs.readFileSync(copy);
    const r = scanfold('summary', copy, '--dataset', '/entry/frames', '--out', copy);
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/a file this command reads/);
    expect(fs.readFileSync(copy).equals(before)).toBe(true);
  });

  it('refuses --out that is a folder, before any pass, writing nothing', () => {
    const dir = path.join(tmp, 'outdir');
    fs.mkdirSync(dir, { recursive: true });
    const r = scanfold('summary', path.join(fx, 'a.npy'), '--out', dir);
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/folder/);
    expect(fs.existsSync(dir + '.partial')).toBe(false);
  });

  it('info on a folder is bad input, not a crash', () => {
    const r = scanfold('info', fx);
    expect(r.code).toBe(2);
    expect(r.err).not.toMatch(/\n\s+at /);
  });

  it('benchmarks are not in the CLI or its bundle (npm run bench has its own entry)', () => {
    const r = scanfold('bench');
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/npm run bench/);
    const bundle = fs.readFileSync(path.join(root, 'dist/cli.mjs'), 'utf8');
    expect(bundle).not.toMatch(/runBenchmark|numpy_first_pass/);
  });

  it('numeric attributes are float64 whatever their value (h5py reads the type)', () => {
    const out = path.join(tmp, 'attrs.h5');
    expect(scanfold('summary', path.join(fx, 'c.raw'), '--raw-shape', '5,4,6,8', '--dtype', 'float64', '--byte-order', 'big', '--offset', '128', '--out', out, '--quiet').code).toBe(0);
    const p = spawnSync(PYTHON, ['-c', 'import h5py,sys; print(h5py.File(sys.argv[1]).attrs["non_finite_inputs"].dtype)', out], { encoding: 'utf8' });
    expect(p.stdout.trim()).toBe('float64');
  });

  it('sample --size tiny writes an HDF5 file that h5py reads', () => {
    const out = path.join(tmp, 'tiny.h5');
    const r = scanfold('sample', '--size', 'tiny', '--out', out, '--quiet');
    expect(r.code, r.err).toBe(0);
    const info = JSON.parse(scanfold('info', out, '--dataset', '/scan/frames').out);
    expect(info.format).toBe('hdf5');
    // reference: h5py opens what we wrote, with the shape our descriptor reports
    const p = spawnSync(PYTHON, ['-c', 'import h5py,sys; print(list(h5py.File(sys.argv[1])["/scan/frames"].shape))', out], { encoding: 'utf8' });
    expect(JSON.parse(p.stdout)).toEqual([info.shape.scanY, info.shape.scanX, info.shape.detY, info.shape.detX]);
  });
});
