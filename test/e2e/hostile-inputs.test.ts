// The `scanfold` command on a corpus of damaged, odd and hostile inputs
// (test/fixtures/make_hostile_corpus.py writes the files with NumPy and h5py, and the cases).
// For every case: the exit status, the message, no file left behind but the expected output,
// and every file already there untouched. Write failures (permission, full disk) and signals
// need root to stage and are in their own block.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawn, spawnSync } from 'node:child_process';
import { createHash } from 'node:crypto';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { makeFixtures, PYTHON } from '../helpers/fixtures';

const root = path.resolve(__dirname, '../..');
const BIN = path.join(root, 'bin/scanfold.mjs');

interface CorpusCase {
  name: string;
  class: string;
  args: string[];
  code: number;
  stderr: string;
  outputs: string[];
  cwd: string | null;
}

let dir: string;
let cases: CorpusCase[] = [];
let initialHashes: Map<string, string>;

function scanfold(args: string[], opts: { cwd?: string; uid?: number; gid?: number } = {}) {
  const p = spawnSync(process.execPath, [BIN, ...args], {
    encoding: 'utf8', cwd: opts.cwd ?? root, uid: opts.uid, gid: opts.gid, timeout: 60_000, env: { ...process.env },
  });
  return { code: p.status, signal: p.signal, out: p.stdout, err: p.stderr };
}

/** Every entry under `base`: kind, and for regular files what would change on any write. */
function snapshot(base: string): Map<string, string> {
  const m = new Map<string, string>();
  const walk = (rel: string) => {
    const abs = path.join(base, rel);
    const st = fs.lstatSync(abs, { bigint: true });
    if (st.isDirectory()) {
      if (rel) m.set(rel, 'dir');
      for (const e of fs.readdirSync(abs)) walk(path.join(rel, e));
    } else if (st.isSymbolicLink()) m.set(rel, `link→${fs.readlinkSync(abs)}`);
    else if (st.isFile()) m.set(rel, `file ino=${st.ino} size=${st.size} mtime=${st.mtimeNs} ctime=${st.ctimeNs} mode=${st.mode}`);
    else m.set(rel, `special mode=${st.mode}`);
  };
  walk('');
  return m;
}

/** Contents of every regular file, for the byte-identical check at the end. */
function hashes(base: string, skip: Set<string>): Map<string, string> {
  const m = new Map<string, string>();
  for (const [rel, kind] of snapshot(base)) {
    if (!kind.startsWith('file') || skip.has(rel)) continue;
    m.set(rel, createHash('sha256').update(fs.readFileSync(path.join(base, rel))).digest('hex'));
  }
  return m;
}

const fill = (s: string) => s.replaceAll('{d}', dir);

beforeAll(() => {
  dir = makeFixtures('make_hostile_corpus.py');
  cases = JSON.parse(fs.readFileSync(path.join(dir, 'corpus.json'), 'utf8')).cases;
  initialHashes = hashes(dir, new Set());
});
afterAll(() => {
  if (dir) fs.rmSync(dir, { recursive: true, force: true });
});

describe('hostile-input corpus (files by NumPy and h5py, make_hostile_corpus.py)', () => {
  it('has cases of every class the corpus covers', () => {
    const classes = new Set(cases.map((c) => c.class));
    expect([...classes].sort()).toEqual(['data harm', 'resources', 'silent or unclear', 'too lenient']);
    expect(cases.length).toBeGreaterThan(40);
  });

  it('every case: exit status, message, nothing left behind, every existing file untouched', () => {
    const failures: string[] = [];
    for (const c of cases) {
      const before = snapshot(dir);
      const t0 = performance.now();
      const r = scanfold(c.args.map(fill), { cwd: c.cwd ? fill(c.cwd) : undefined });
      const seconds = (performance.now() - t0) / 1000;
      const after = snapshot(dir);
      const problems: string[] = [];
      if (r.signal) problems.push(`killed by ${r.signal} after ${seconds.toFixed(1)} s (a hang?)`);
      if (r.code !== c.code) problems.push(`exit ${r.code}, expected ${c.code}`);
      if (c.stderr && !new RegExp(c.stderr, 'm').test(r.err)) problems.push(`stderr does not match /${c.stderr}/`);
      const messages = r.err.split('\n').filter((l) => l && !/^[\w ()]+ \[[#.]+\]/.test(l));
      if (c.code !== 0 && messages.length > 2) problems.push(`${messages.length} lines of messages, expected one or two`);
      if (/\n\s+at .*\(|HDF5-DIAG|RangeError|TypeError/.test(r.err)) problems.push('a stack trace or library dump');
      for (const [rel, kind] of after) {
        if (c.outputs.includes(rel)) continue;
        if (!before.has(rel)) problems.push(`left ${rel} behind`);
        else if (before.get(rel) !== kind) problems.push(`changed ${rel}`);
      }
      for (const rel of before.keys()) if (!after.has(rel)) problems.push(`removed ${rel}`);
      for (const rel of c.outputs) {
        if (!after.has(rel)) problems.push(`did not write ${rel}`);
        else if (!before.has(rel)) fs.rmSync(path.join(dir, rel));
      }
      if (problems.length) failures.push(`${c.class} / ${c.name}: ${problems.join('; ')}\n    stderr: ${r.err.trim().slice(0, 400)}`);
    }
    expect(failures).toEqual([]);
    // Byte for byte, every file the corpus started with is as it was (outputs aside).
    const written = new Set(cases.flatMap((c) => c.outputs));
    const now = hashes(dir, written);
    for (const [rel, h] of initialHashes) if (!written.has(rel)) expect(now.get(rel), rel).toBe(h);
  });

  it('a chunk inflating to 512 MiB is refused at open, before HDF5 inflates it (peak RSS measured)', () => {
    const p = spawnSync(process.execPath, [BIN, 'summary', path.join(dir, 'bomb-512m.h5'), '--dataset', '/frames', '--budget', '64MiB', '--out', path.join(dir, 'o.h5')],
      { encoding: 'utf8', env: { ...process.env, SCANFOLD_REPORT_PEAK_RSS: '1' } });
    expect(p.status).toBe(2);
    const peak = Number(/peak-rss-bytes (\d+)/.exec(p.stderr)![1]);
    // Measured here: about 110 MiB for the whole process, against 1.2 GB when the chunk was inflated first.
    expect(peak).toBeLessThan(200 * 2 ** 20);
  });

  it('a symlinked --out stays a symlink, and its target holds the result (h5py reads it)', () => {
    const link = path.join(dir, 'result-link.h5');
    expect(fs.lstatSync(link).isSymbolicLink()).toBe(true);
    const p = spawnSync(PYTHON, ['-c', 'import h5py,sys; print(h5py.File(sys.argv[1])["mean_pattern"].shape)', link], { encoding: 'utf8' });
    // reference: h5py opens the result through the link
    expect(p.stdout.trim()).toBe('(16, 16)');
  });

  it('the Inf from overflowing float64 sums is counted in the file (h5py reads non_finite_results)', () => {
    const out = path.join(dir, 'overflow-result.h5');
    const r = scanfold(['summary', path.join(dir, 'overflow.npy'), '--out', out, '--quiet']);
    expect(r.code, r.err).toBe(0);
    const p = spawnSync(PYTHON, ['-c', `import h5py,sys,numpy as np
f = h5py.File(sys.argv[1])
a = np.load(sys.argv[2])
with np.errstate(over='ignore'):
    want = int(np.isinf(a.sum(axis=(2, 3))).sum() + np.isinf(a.mean(axis=(0, 1))).sum())
print(int(f.attrs['non_finite_results']), want, int(f['total_intensity'].attrs['non_finite_results']), int(np.isinf(f['total_intensity'][()]).sum()))`, out, path.join(dir, 'overflow.npy')], { encoding: 'utf8' });
    // reference: NumPy's own sums of the same 1e308 values overflow float64 (max ≈ 1.8e308) to Inf:
    // all 16 totals and all 64 mean-pattern pixels; the file's counts agree with the Inf h5py reads back.
    const [stored, numpy, totalAttr, totalInf] = p.stdout.trim().split(' ').map(Number);
    expect(numpy).toBe(80);
    expect(stored).toBe(numpy);
    expect(totalAttr).toBe(totalInf);
    fs.rmSync(out);
  });
});

const isRoot = process.getuid?.() === 0;

describe.skipIf(!isRoot)('write failures and signals (staged as root: another user, a full file system)', () => {
  let work: string;
  const NOBODY = 65534;
  beforeAll(() => {
    work = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-write-'));
    fs.chmodSync(work, 0o755);
    // reference: NumPy writes the inputs
    const p = spawnSync(PYTHON, ['-c', `import numpy as np, sys
np.save(sys.argv[1] + '/wide.npy', np.ones((1, 2, 512, 512), dtype='<u2'))
np.save(sys.argv[1] + '/small.npy', np.ones((3, 4, 16, 16), dtype='<u2'))
np.ones((320, 64, 64, 64), dtype='<u2').tofile(sys.argv[1] + '/long.raw')`, work], { encoding: 'utf8' });
    if (p.status !== 0) throw new Error(p.stderr);
    for (const f of fs.readdirSync(work)) fs.chmodSync(path.join(work, f), 0o644);
  });
  afterAll(() => {
    spawnSync('umount', [path.join(work, 'full')]);
    fs.rmSync(work, { recursive: true, force: true });
  });

  it('an output folder the user may not write to is refused before any pass, in one line', () => {
    const locked = path.join(work, 'locked');
    fs.mkdirSync(locked, { mode: 0o755 });
    const r = scanfold(['summary', path.join(work, 'small.npy'), '--out', path.join(locked, 'o.h5')], { uid: NOBODY, gid: NOBODY });
    expect(r.code).toBe(2);
    expect(r.err.trim()).toMatch(/^scanfold: --out .*locked\/o\.h5: cannot create a file in the folder .*locked \(permission denied\); nothing was written$/);
    expect(r.err).not.toMatch(/first pass/);
    expect(fs.readdirSync(locked)).toEqual([]);
  });

  it('a file the user may not write is never replaced, even in a folder anyone may write to', () => {
    const pub = path.join(work, 'pub');
    fs.mkdirSync(pub);
    fs.chmodSync(pub, 0o777);
    const victim = path.join(pub, 'victim.h5');
    fs.writeFileSync(victim, 'root\'s file');
    fs.chmodSync(victim, 0o644);
    const r = scanfold(['summary', path.join(work, 'small.npy'), '--out', victim], { uid: NOBODY, gid: NOBODY });
    expect(r.code).toBe(2);
    expect(r.err).toMatch(/victim\.h5: exists and this user may not write it/);
    expect(fs.readFileSync(victim, 'utf8')).toBe('root\'s file');
    expect(fs.readdirSync(pub)).toEqual(['victim.h5']);
  });

  it('inputs the user may not read say "permission denied"', () => {
    const secret = path.join(work, 'secret.npy');
    fs.copyFileSync(path.join(work, 'small.npy'), secret);
    fs.chmodSync(secret, 0o000);
    const open = path.join(work, 'open');
    fs.mkdirSync(open, { mode: 0o777 });
    fs.chmodSync(open, 0o777);
    for (const args of [['info', secret], ['summary', secret, '--out', path.join(open, 'x.h5')]]) {
      const r = scanfold(args, { uid: NOBODY, gid: NOBODY });
      expect(r.code).toBe(2);
      expect(r.err).toMatch(/secret\.npy: permission denied/);
    }
    expect(fs.readdirSync(open)).toEqual([]);
  });

  it('too little free space is refused before any pass; a disk filled during the pass ends in one line, leaving nothing', async (ctx) => {
    const full = path.join(work, 'full');
    fs.mkdirSync(full);
    const m = spawnSync('mount', ['-t', 'tmpfs', '-o', 'size=8m', 'tmpfs', full], { encoding: 'utf8' });
    if (m.status !== 0) ctx.skip(`cannot mount a tmpfs here: ${m.stderr.trim()}`);
    // Before the pass: 512×512 float64 mean and max patterns (4 MiB) with only ~1 MiB free.
    fs.writeFileSync(path.join(full, 'filler'), Buffer.alloc(7 << 20));
    const early = scanfold(['summary', path.join(work, 'wide.npy'), '--out', path.join(full, 'o.h5')]);
    expect(early.code).toBe(2);
    expect(early.err.trim()).toMatch(/^scanfold: --out .*full\/o\.h5: the results need about .* but the folder .*full has only .* free; nothing was written$/);
    expect(early.err).not.toMatch(/first pass/);
    fs.rmSync(path.join(full, 'filler'));
    expect(fs.readdirSync(full)).toEqual([]);

    // During the pass: another program fills the disk after the temporary file was created.
    const out = path.join(full, 'o.h5');
    const child = spawn(process.execPath, [BIN, 'summary', path.join(work, 'long.raw'), '--raw-shape', '320,64,64,64', '--dtype', 'uint16',
      '--kernel', 'reference', '--workers', '1', '--budget', '48MiB', '--out', out], { stdio: ['ignore', 'ignore', 'pipe'] });
    let err = '';
    child.stderr.on('data', (b) => { err += b; });
    // The progress bar's first line says the pass is under way.
    const t0 = Date.now();
    while (!/first pass \[/.test(err) && Date.now() - t0 < 20_000) await new Promise((r) => setTimeout(r, 2));
    expect(fs.readdirSync(full)).toHaveLength(1);
    const fd = fs.openSync(path.join(full, 'filler'), 'w');
    try { for (;;) fs.writeSync(fd, Buffer.alloc(64 << 10)); } catch (e) { expect((e as NodeJS.ErrnoException).code).toBe('ENOSPC'); }
    fs.closeSync(fd);
    const code = await new Promise<number | null>((resolve) => child.on('exit', (c) => resolve(c)));
    fs.rmSync(path.join(full, 'filler'));
    expect(code, err).toBe(1);
    const messages = err.split('\n').filter((l) => l && !/^first pass \[/.test(l));
    expect(messages).toHaveLength(1);
    expect(messages[0]).toMatch(/^scanfold: could not write .*full\/o\.h5: no space left on the device; nothing was left behind$/);
    expect(fs.readdirSync(full)).toEqual([]);
  });

  for (const [signal, code] of [['SIGINT', 130], ['SIGTERM', 143]] as const) {
    it(`${signal} during a pass leaves no temporary file`, async () => {
      const out = path.join(work, `sig-${signal}.h5`);
      const child = spawn(process.execPath, [BIN, 'summary', path.join(work, 'long.raw'), '--raw-shape', '320,64,64,64', '--dtype', 'uint16',
        '--kernel', 'reference', '--workers', '1', '--budget', '48MiB', '--out', out, '--quiet'], { stdio: ['ignore', 'ignore', 'pipe'] });
      let err = '';
      child.stderr.on('data', (b) => { err += b; });
      // Wait until the temporary file exists (the pass has started), then interrupt.
      const t0 = Date.now();
      const ours = () => fs.readdirSync(work).some((f) => f.startsWith(`.sig-${signal}.h5.`));
      while (!ours() && Date.now() - t0 < 20_000) await new Promise((r) => setTimeout(r, 5));
      expect(ours()).toBe(true);
      // Into the pass proper, not only the start-up.
      await new Promise((r) => setTimeout(r, 300));
      child.kill(signal);
      const exit = await new Promise<number | null>((resolve) => child.on('exit', (c) => resolve(c)));
      expect(exit, err).toBe(code);
      expect(fs.readdirSync(work).filter((f) => f.includes('sig-') || f.includes('.scanfold-'))).toEqual([]);
    });
  }
});
