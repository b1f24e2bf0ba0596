// Micro-benchmark of the detector kernels on one thread: GB/s of uint16 input for a ~128 MiB
// tile of 128×128 patterns — one annular detector (over its runs vs dense sweep), four detectors at
// once, centre of mass unmasked and masked — next to a plain read of the same bytes from the
// page cache, NumPy doing the same sums, and the preview-cube images.
// From the project root, after `npm run build`:
//   npx esbuild bench/detector-kernels.ts --bundle --platform=node --format=esm --outfile=/tmp/bd.mjs && node /tmp/bd.mjs
// Options: --patterns N (4096), --repeats N (5), --dtype D (uint16), --skip-numpy, --sweep
//          (runs over a detector's own pixels vs the dense sweep, for annuli, disks and scattered
//          pixels: where SPARSE_RULE in virtual-image-wasm.ts and com-wasm.ts comes from).
import { spawnSync } from 'node:child_process';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { createWasmVirtualImageKernel, runsOf, type VirtualImageTuning } from '../src-shared/compute/virtual-image-wasm';
import { createWasmComKernel } from '../src-shared/compute/com-wasm';
import { previewImages } from '../src-shared/compute/preview-image';
import { createWasmPreviewImager } from '../src-shared/compute/preview-image-wasm';
import type { VirtualImageKernel, ComKernel } from '../src-shared/compute/tile-kernels-types';
import type { CompiledDetector } from '../src-shared/model/detectors';
import { DTYPE_BYTES, isDType, isFloatDType, type DType, type NumericArray } from '../src-shared/model/dtype';

const args = process.argv.slice(2);
const option = (name: string): string | undefined => {
  const i = args.indexOf(`--${name}`);
  return i >= 0 ? args[i + 1] : undefined;
};
const dtypeName = option('dtype') ?? 'uint16';
if (!isDType(dtypeName)) throw new Error(`--dtype: expected one of uint8 … float64, got ${dtypeName}`);
const dtype: DType = dtypeName;
const nPatterns = Number(option('patterns') ?? 4096);
const repeats = Number(option('repeats') ?? 5);
const detY = 128, detX = 128, nPix = detY * detX;
const nElements = nPatterns * nPix;
const bytes = nElements * DTYPE_BYTES[dtype];

const wasmFile = (name: string) => {
  const file = path.resolve('dist/wasm', `${name}.wasm`);
  if (!fs.existsSync(file)) throw new Error(`${file} is missing: run npm run build from the project root`);
  return new WebAssembly.Module(fs.readFileSync(file));
};
const viModule = wasmFile('virtual-image');
const comModule = wasmFile('com');

function annulus(cx: number, cy: number, rInner: number, rOuter: number, label: string): CompiledDetector {
  const indices: number[] = [];
  for (let y = 0; y < detY; y++) {
    for (let x = 0; x < detX; x++) {
      const r2 = (x - cx) ** 2 + (y - cy) ** 2;
      if (r2 >= rInner * rInner && r2 <= rOuter * rOuter) indices.push(y * detX + x);
    }
  }
  return { mode: 'indices', indices: Uint32Array.from(indices), detY, detX, label };
}
const fill = (d: CompiledDetector) => (d.mode === 'indices' ? d.indices.length : 0) / nPix;

/** Detector-like counts: small values with a long tail (as the first-pass benchmark uses). */
function fillCounts(a: NumericArray) {
  let s = 12345;
  const float = isFloatDType(dtype);
  const mask = dtype === 'uint8' || dtype === 'int8' ? 0x7f : 0x3ff;
  for (let i = 0; i < a.length; i++) {
    s = (Math.imul(s, 1103515245) + 12345) >>> 0;
    a[i] = float ? (s >>> 8) / 65536 : (s >>> 20) & mask;
  }
}

function timeRuns(n: number, f: () => void): number {
  const times: number[] = [];
  for (let i = 0; i < n; i++) {
    const t0 = performance.now();
    f();
    times.push(performance.now() - t0);
  }
  return Math.min(...times);
}

const gbps = (ms: number, b = bytes) => b / 1e9 / (ms / 1e3);
function report(name: string, ms: number, b = bytes): number {
  console.log(`${name.padEnd(52)} ${ms.toFixed(1).padStart(8)} ms ${gbps(ms, b).toFixed(2).padStart(7)} GB/s`);
  return gbps(ms, b);
}

console.log(`tile ${nPatterns} × ${detY}×${detX} ${dtype} = ${(bytes / 2 ** 20).toFixed(0)} MiB, one thread, node ${process.version}, best of ${repeats}`);

// --- the tile, once in each kernel's memory, and as a file in the page cache ------------------
const vi = createWasmVirtualImageKernel(viModule, bytes);
const com = createWasmComKernel(comModule, bytes);
const viTile = (k: VirtualImageKernel) => k.tileBuffer(dtype, nElements);
fillCounts(viTile(vi));
const tmp = fs.mkdtempSync(path.join(os.tmpdir(), 'scanfold-bench-'));
const tileFile = path.join(tmp, 'tile.bin');
{
  const t = viTile(vi);
  fs.writeFileSync(tileFile, new Uint8Array(t.buffer, t.byteOffset, bytes));
}

// --- plain reads ---------------------------------------------------------------------------
const readInto = (target: NumericArray) => {
  const fd = fs.openSync(tileFile, 'r');
  const view = new Uint8Array(target.buffer, target.byteOffset, bytes);
  let done = 0;
  while (done < bytes) done += fs.readSync(fd, view, done, bytes - done, done);
  fs.closeSync(fd);
};
const comTileOf = (k: ComKernel) => k.tileBuffer(dtype, nElements);
readInto(comTileOf(com)); // warms the page cache and fills the COM kernel's tile
const plainRead = report('read the tile from the page cache (fs.readSync)', timeRuns(repeats, () => readInto(comTileOf(com))));
let sink = 0;
{
  const t = viTile(vi);
  const words = new Float64Array(t.buffer, t.byteOffset, bytes / 8);
  report('JS loop over the tile as Float64Array', timeRuns(repeats, () => {
    let s = 0;
    for (let i = 0; i < words.length; i++) s += words[i];
    sink += s;
  }));
}

// --- virtual images --------------------------------------------------------------------------
const adf = annulus(63.5, 63.5, 20, 60, 'ADF');
const four = [
  annulus(63.5, 63.5, 0, 12, 'BF'),
  annulus(63.5, 63.5, 12, 20, 'ABF'),
  adf,
  annulus(63.5, 63.5, 40, 64, 'HAADF'),
];
const bytesOf = (a: NumericArray) => new Uint8Array(a.buffer, a.byteOffset, a.byteLength);
const copyTile = (to: NumericArray, from: NumericArray) => bytesOf(to).set(bytesOf(from));
function runVirtual(detectors: CompiledDetector[], tuning: VirtualImageTuning = {}, n = repeats): number {
  const k = createWasmVirtualImageKernel(viModule, bytes, tuning);
  k.setDetectors(detectors);
  // Same bytes as every other case.
  copyTile(k.tileBuffer(dtype, nElements), viTile(vi));
  k.run(dtype, nPatterns);
  return timeRuns(n, () => { k.tileBuffer(dtype, nElements); sink += k.run(dtype, nPatterns).images[0]; });
}
console.log(`\nvirtual images (ADF annulus 20–60 px: fill ${(fill(adf) * 100).toFixed(0)} %)`);
const oneSparse = report('one annulus, over runs of its pixels', runVirtual([adf], { sparseFill: 2 }));
const oneDense = report('one annulus, dense SIMD sweep', runVirtual([adf], { sparseFill: 0 }));
const oneAuto = report('one annulus, kernel\'s choice', runVirtual([adf]));
console.log(`four detectors: ${four.map((d) => `${d.label} ${(fill(d) * 100).toFixed(0)} %`).join(', ')}`);
const fourAuto = report('four detectors in one pass, kernel\'s choice', runVirtual(four));
report('four detectors in one pass, all dense', runVirtual(four, { sparseFill: 0 }));
report('four detectors in one pass, all over their runs', runVirtual(four, { sparseFill: 2 }));

// --- centre of mass --------------------------------------------------------------------------
function runCom(mask: CompiledDetector | null, threshold: number, sparseFill?: number): number {
  const k = createWasmComKernel(comModule, bytes, sparseFill === undefined ? {} : { sparseFill });
  k.setOptions({ mask, threshold }, detY, detX);
  copyTile(k.tileBuffer(dtype, nElements), viTile(vi));
  k.run(dtype, nPatterns);
  return timeRuns(repeats, () => { k.tileBuffer(dtype, nElements); sink += k.run(dtype, nPatterns).sumX[0]; });
}
const disk = annulus(63.5, 63.5, 0, 40, 'disk');
console.log(`\ncentre of mass (mask: disk r = 40 px, fill ${(fill(disk) * 100).toFixed(0)} %)`);
const comPlain = report('COM unmasked', runCom(null, 0));
report('COM unmasked, threshold 3', runCom(null, 3));
const comMasked = report('COM masked, kernel\'s choice', runCom(disk, 0));
report('COM masked, dense sweep', runCom(disk, 0, 0));

// --- NumPy on the same sizes ------------------------------------------------------------------
let numpyFour = NaN, numpyCom = NaN;
if (!args.includes('--skip-numpy') && dtype === 'uint16') {
  const masksFile = path.join(tmp, 'masks.bin');
  const masks = new Float64Array(four.length * nPix);
  four.forEach((d, j) => { if (d.mode === 'indices') for (const i of d.indices) masks[j * nPix + i] = 1; });
  fs.writeFileSync(masksFile, new Uint8Array(masks.buffer));
  const script = `
import sys, time, json
import numpy as np
n, dy, dx, reps = ${nPatterns}, ${detY}, ${detX}, ${repeats}
tile = np.fromfile(${JSON.stringify(tileFile)}, dtype='<u2').reshape(n, dy, dx)
masks = np.fromfile(${JSON.stringify(masksFile)}, dtype='<f8').reshape(-1, dy * dx)
def best(f):
    t = []
    for _ in range(reps):
        t0 = time.perf_counter(); f(); t.append(time.perf_counter() - t0)
    return min(t)
yy, xx = np.mgrid[0:dy, 0:dx]
def com():
    s = tile.sum(axis=(1, 2), dtype=np.float64)
    return (tile * xx).sum(axis=(1, 2)) / s, (tile * yy).sum(axis=(1, 2)) / s
print(json.dumps({'numpy': np.__version__,
  'four': best(lambda: tile.reshape(n, -1) @ masks.T),
  'com': best(com)}))
`;
  const p = spawnSync('/usr/bin/python3', ['-c', script], { encoding: 'utf8', env: { ...process.env, OMP_NUM_THREADS: '1', OPENBLAS_NUM_THREADS: '1' } });
  if (p.status === 0) {
    const r = JSON.parse(p.stdout) as { numpy: string; four: number; com: number };
    console.log(`\nNumPy ${r.numpy}, one thread, same tile`);
    numpyFour = report('NumPy tile.reshape(n, -1) @ masks.T (four masks)', r.four * 1e3);
    numpyCom = report('NumPy COM (tile * xx).sum / tile.sum', r.com * 1e3);
  } else {
    console.log(`NumPy comparison skipped: ${p.stderr.trim().split('\n').pop()}`);
  }
}

// --- preview cube -----------------------------------------------------------------------------
{
  const qY = 256, qX = 256, pY = 32, pX = 32;
  const imager = createWasmPreviewImager(wasmFile('preview-image'), qY, qX, pY, pX);
  const cube = imager.cube();
  for (let i = 0; i < cube.length; i++) cube[i] = (i * 2654435761) % 1000;
  const ring = (r0: number, r1: number) => Float64Array.from({ length: pY * pX }, (_, i) => {
    const r = Math.hypot((i % pX) - 15.5, Math.floor(i / pX) - 15.5);
    return r >= r0 && r <= r1 ? 1 : 0;
  });
  const bins = (w: Float64Array) => w.reduce((a, v) => a + (v !== 0 ? 1 : 0), 0);
  const large = ring(5, 16);
  const rings = [ring(0, 3), ring(3, 6), large, ring(10, 16)];
  console.log(`\npreview cube ${qY}×${qX}×${pY}×${pX} float32 (${(cube.byteLength / 2 ** 20).toFixed(0)} MiB)`);
  imager.images([large]);
  report(`WASM, one annulus of ${bins(large)} bins`, timeRuns(repeats, () => { sink += imager.images([large])[0][0]; }), cube.byteLength);
  report(`WASM, four detectors (${rings.map(bins).join(', ')} bins)`, timeRuns(repeats, () => { sink += imager.images(rings)[0][0]; }), cube.byteLength);
  const c = imager.cube();
  previewImages(c, qY, qX, pY, pX, [large]);
  report('plain JS (previewImages), one annulus', timeRuns(repeats, () => { sink += previewImages(c, qY, qX, pY, pX, [large])[0][0]; }), cube.byteLength);
  report('plain JS (previewImages), four detectors', timeRuns(repeats, () => { sink += previewImages(c, qY, qX, pY, pX, rings)[0][0]; }), cube.byteLength);
}

// --- where runs stop paying ------------------------------------------------------------------
// Cold: the whole tile, fresh from memory, as the engine's large tiles are. Warm: the same
// 64 patterns over and over, in cache, as a small tile right after its read is.
if (args.includes('--sweep')) {
  const warmPatterns = 64;
  const viTimes = (d: CompiledDetector, sparseFill: number, patterns: number) => {
    const k = createWasmVirtualImageKernel(viModule, bytes, { sparseFill });
    k.setDetectors([d]);
    copyTile(k.tileBuffer(dtype, nElements), viTile(vi));
    k.run(dtype, patterns);
    return timeRuns(repeats, () => { for (let i = 0; i < nPatterns / patterns; i++) sink += k.run(dtype, patterns).images[0]; });
  };
  const comTimes = (d: CompiledDetector, sparseFill: number, patterns: number) => {
    const k = createWasmComKernel(comModule, bytes, { sparseFill });
    k.setOptions({ mask: d, threshold: 0 }, detY, detX);
    copyTile(k.tileBuffer(dtype, nElements), viTile(vi));
    k.run(dtype, patterns);
    return timeRuns(repeats, () => { for (let i = 0; i < nPatterns / patterns; i++) sink += k.run(dtype, patterns).total[0]; });
  };
  const row = (what: string, d: CompiledDetector, times: typeof viTimes) => {
    const [cr, cd, wr, wd] = [times(d, 2, nPatterns), times(d, 0, nPatterns), times(d, 2, warmPatterns), times(d, 0, warmPatterns)];
    const pick = (a: number, b: number) => (a < b ? 'runs ' : 'dense');
    console.log(`${what.padEnd(24)} ${cr.toFixed(1).padStart(7)} ${cd.toFixed(1).padStart(7)} ${pick(cr, cd)}   ${wr.toFixed(1).padStart(7)} ${wd.toFixed(1).padStart(7)} ${pick(wr, wd)}`);
  };
  const weightedOf = (d: CompiledDetector): CompiledDetector => {
    const weights = new Float64Array(nPix);
    if (d.mode === 'indices') for (const i of d.indices) weights[i] = 0.75;
    return { mode: 'weights', weights, detY, detX, label: d.label };
  };
  let seed = 7;
  const scattered = (q: number): CompiledDetector => {
    const indices: number[] = [];
    for (let i = 0; i < nPix; i++) {
      seed = (Math.imul(seed, 1103515245) + 12345) >>> 0;
      if (seed / 2 ** 32 < q) indices.push(i);
    }
    return { mode: 'indices', indices: Uint32Array.from(indices), detY, detX, label: `scattered ${q}` };
  };
  const describe = (d: CompiledDetector) => {
    const indices = d.mode === 'indices' ? d.indices : new Uint32Array(0);
    return `fill ${(fill(d) * 100).toFixed(1).padStart(4)} %, ${(runsOf(indices).length / 2).toString().padStart(4)} runs`;
  };
  console.log(`\n${dtype}: runs over the detector's own pixels vs the dense sweep (ms per ${nPatterns} patterns)`);
  const header = (title: string) => console.log(`${title.padEnd(24)}    cold: runs   dense           warm: runs   dense`);
  const rings = [6, 10, 14, 18, 22, 26, 30, 36, 44, 52, 64].map((r) => annulus(63.5, 63.5, 4, r, 'ring'));
  const scatter = [0.01, 0.03, 0.1, 0.3].map(scattered);
  header('virtual image, annulus');
  for (const d of rings) row(describe(d), d, viTimes);
  header('  same, weight 0.75');
  for (const d of rings) row(describe(d), weightedOf(d), viTimes);
  header('  scattered pixels');
  for (const d of scatter) row(describe(d), d, viTimes);
  header('COM, disk mask');
  for (const r of [4, 8, 12, 16, 20, 26, 32, 40, 50, 64]) { const d = annulus(63.5, 63.5, 0, r, 'disk'); row(describe(d), d, comTimes); }
  header('  scattered pixels');
  for (const d of scatter) row(describe(d), d, comTimes);
}

console.log('\nratios (best, one thread)');
console.log(`one annulus (kernel's choice) / plain read   ${(oneAuto / plainRead).toFixed(2)}   (runs ${(oneSparse / plainRead).toFixed(2)}, dense ${(oneDense / plainRead).toFixed(2)})`);
console.log(`four detectors / NumPy                       ${(fourAuto / numpyFour).toFixed(2)}`);
console.log(`COM unmasked / NumPy                         ${(comPlain / numpyCom).toFixed(2)}   COM masked / NumPy ${(comMasked / numpyCom).toFixed(2)}`);
console.log(`COM unmasked / plain read                    ${(comPlain / plainRead).toFixed(2)}${sink === 0.5 ? '.' : ''}`);
fs.rmSync(tmp, { recursive: true, force: true });
