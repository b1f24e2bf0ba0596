import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { spawnSync } from 'node:child_process';

/** Debian's interpreter, which has numpy, h5py and hdf5plugin (the pyenv python3 on PATH may not). */
export const PYTHON = '/usr/bin/python3';

/** Run a fixture script from test/fixtures into a fresh temp folder; returns the folder. */
export function makeFixtures(script: string, ...args: string[]): string {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-fx-'));
  const p = spawnSync(PYTHON, [path.join(__dirname, '..', 'fixtures', script), dir, ...args], { encoding: 'utf8' });
  if (p.status !== 0) throw new Error(`${script} failed: ${p.stderr || p.error?.message}`);
  return dir;
}

/** Read a little-endian float64 or uint16 .npy written by NumPy (test-side parser, independent of src-main/io). */
export function readNpyF64(file: string): { shape: number[]; data: Float64Array } {
  const buf = fs.readFileSync(file);
  if (buf.readUInt8(0) !== 0x93 || buf.toString('latin1', 1, 6) !== 'NUMPY') throw new Error(`${file}: not .npy`);
  const major = buf.readUInt8(6);
  const hlen = major === 1 ? buf.readUInt16LE(8) : buf.readUInt32LE(8);
  const start = major === 1 ? 10 : 12;
  const header = buf.toString('latin1', start, start + hlen);
  if (!header.includes("'<f8'")) throw new Error(`${file}: expected '<f8', header ${header}`);
  const shape = /'shape':\s*\(([^)]*)\)/.exec(header)![1].split(',').map((s) => s.trim()).filter(Boolean).map(Number);
  const off = start + hlen;
  const n = shape.reduce((a, b) => a * b, 1);
  const data = new Float64Array(n);
  for (let i = 0; i < n; i++) data[i] = buf.readDoubleLE(off + 8 * i);
  return { shape, data };
}

/** Largest relative difference |a-b| / max(|b|, tiny), treating equal infinities as equal. */
export function maxRelDiff(a: ArrayLike<number>, b: ArrayLike<number>): number {
  if (a.length !== b.length) throw new Error(`length ${a.length} vs ${b.length}`);
  let m = 0;
  for (let i = 0; i < a.length; i++) {
    if (a[i] === b[i]) continue;
    const d = Math.abs(a[i] - b[i]) / Math.max(Math.abs(b[i]), 1e-300);
    if (!(d <= m)) m = d;
  }
  return m;
}
