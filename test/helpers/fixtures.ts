import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { execFileSync, spawnSync } from 'node:child_process';
import { expect } from 'vitest';
import { isInputError } from '../../src-shared/model/errors';
import { DTYPE_BYTES, isDType, typedView, type DType, type NumericArray } from '../../src-shared/model/dtype';
import type { CompiledDetector } from '../../src-shared/model/detectors';
import { WORKER_THREAD_BYTES } from '../../src-main/engine/budget';
import { H5WASM_BASE_BYTES } from '../../src-main/io/hdf5';
import { writeSample } from '../../samples/write-sample';

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

/**
 * Run a fixture script from test/fixtures that writes cases.json ({ numpy, cases }) into a fresh
 * temp folder named from `prefix`; returns the folder, NumPy's version and the cases.
 */
export function loadFixtureCases<C>(script: string, prefix: string): { dir: string; numpy: string; cases: C[] } {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), prefix));
  execFileSync(PYTHON, [path.join(__dirname, '..', 'fixtures', script), dir], { stdio: 'pipe' });
  const meta = JSON.parse(fs.readFileSync(path.join(dir, 'cases.json'), 'utf8')) as { numpy: string; cases: C[] };
  return { dir, numpy: meta.numpy, cases: meta.cases };
}

/** A headerless little-endian float64 file, as NumPy's tofile writes it. */
export function readRawF64(file: string): Float64Array {
  const bytes = fs.readFileSync(file);
  return new Float64Array(bytes.buffer.slice(bytes.byteOffset, bytes.byteOffset + bytes.byteLength));
}

/** The raw tile `<name>.tile.bin` in dir: n values of dtype (its byte length is checked). */
export function readFixtureTile(dir: string, name: string, dtype: string, n: number): { tile: NumericArray; dtype: DType } {
  if (!isDType(dtype)) throw new Error(`fixture ${name}: unknown dtype ${dtype}`);
  const bytes = fs.readFileSync(path.join(dir, `${name}.tile.bin`));
  expect(bytes.byteLength).toBe(n * DTYPE_BYTES[dtype]);
  return { tile: typedView(dtype, bytes.buffer.slice(bytes.byteOffset, bytes.byteOffset + bytes.byteLength), 0, n), dtype };
}

/** A fixture case's masks (`<name>.masks.f64` in dir) as compiled detectors: 0/1 masks as sorted indices, weights as they are. */
export function readFixtureDetectors(
  dir: string,
  c: { name: string; detY: number; detX: number; masks: { label: string; mode: 'binary' | 'weights' }[] },
): CompiledDetector[] {
  const all = readRawF64(path.join(dir, `${c.name}.masks.f64`));
  const nPix = c.detY * c.detX;
  return c.masks.map((m, k) => {
    const values = all.subarray(k * nPix, (k + 1) * nPix);
    if (m.mode === 'weights') return { mode: 'weights', weights: Float64Array.from(values), detY: c.detY, detX: c.detX, label: m.label };
    const indices: number[] = [];
    values.forEach((v, i) => { if (v === 1) indices.push(i); });
    return { mode: 'indices', indices: Uint32Array.from(indices), detY: c.detY, detX: c.detX, label: m.label };
  });
}

/**
 * A budget that leaves about `extraBytes` for tiles and results once every worker's fixed cost
 * (its thread, and h5wasm for HDF5) is counted: small budgets force many tiles per worker.
 */
export function tightBudget(workers: number, hdf5: boolean, extraBytes = 1 << 20): number {
  return workers * (WORKER_THREAD_BYTES + (hdf5 ? H5WASM_BASE_BYTES : 0)) + extraBytes;
}

/** A fresh temp folder (named from `prefix`) holding the demo sample as demo.h5 (dataset /scan/frames). */
export async function makeDemoSample(prefix: string): Promise<{ dir: string; file: string }> {
  const dir = fs.mkdtempSync(path.join(os.tmpdir(), prefix));
  const file = path.join(dir, 'demo.h5');
  await writeSample({ size: 'demo', out: file });
  return { dir, file };
}

/** The InputError a request ends in (its message and code); fails the test when it succeeds or fails otherwise. */
export async function inputError(p: Promise<unknown>): Promise<{ message: string; code?: string }> {
  try {
    await p;
  } catch (e) {
    expect(isInputError(e), String(e)).toBe(true);
    return e as { message: string; code?: string };
  }
  throw new Error('expected an InputError');
}
