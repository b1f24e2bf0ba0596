// Micro-benchmark of the first-pass kernel on one thread: GB/s of input for a tile of
// 16 scan rows × 256 × 128×128 (128 MiB of uint16), detBin 4, scanBin 1, all four outputs,
// next to plain memory reads of the same tile and the TypeScript reference.
// From the project root, after `npm run build`:
//   npx esbuild bench/first-pass-kernel.ts --bundle --platform=node --format=esm --outfile=/tmp/bench-first-pass.mjs && node /tmp/bench-first-pass.mjs
// Options: --dtype D (uint16), --det-bin N (4), --scan-bin N (1), --rows N (16), --repeats N (5),
//          --skip-reference, --wasm FILE (another build of wasm-src/first-pass.ts).
import fs from 'node:fs';
import path from 'node:path';
import { firstPassReference } from '../src-shared/compute/first-pass';
import { createWasmFirstPassKernel } from '../src-shared/compute/first-pass-wasm';
import type { FirstPassGeometry } from '../src-shared/compute/first-pass-types';
import { allocTyped, DTYPE_BYTES, isDType, isFloatDType, type DType, type NumericArray } from '../src-shared/model/dtype';

const args = process.argv.slice(2);
const option = (name: string): string | undefined => {
  const i = args.indexOf(`--${name}`);
  return i >= 0 ? args[i + 1] : undefined;
};
const numberOption = (name: string, fallback: number) => Number(option(name) ?? fallback);
const dtypeName = option('dtype') ?? 'uint16';
if (!isDType(dtypeName)) throw new Error(`--dtype: expected one of uint8 … float64, got ${dtypeName}`);
const dtype: DType = dtypeName;
const nRows = numberOption('rows', 16);
const repeats = numberOption('repeats', 5);
const skipReference = args.includes('--skip-reference');
const g: FirstPassGeometry = { scanX: 256, detY: 128, detX: 128, detBin: numberOption('det-bin', 4), scanBin: numberOption('scan-bin', 1) };

const wasmFile = path.resolve(option('wasm') ?? 'dist/wasm/first-pass.wasm');
if (!fs.existsSync(wasmFile)) throw new Error(`${wasmFile} is missing: run npm run build from the project root`);
const wasmModule = new WebAssembly.Module(fs.readFileSync(wasmFile));

const nElements = nRows * g.scanX * g.detY * g.detX;
const bytes = nElements * DTYPE_BYTES[dtype];

/** Detector-like counts (small, with a long tail); float data get the same values plus fractions. */
function fillCounts(a: NumericArray) {
  let s = 12345;
  const float = isFloatDType(dtype);
  const mask = dtype === 'uint8' || dtype === 'int8' ? 0x7f : 0x3ff;
  for (let i = 0; i < a.length; i++) {
    s = (Math.imul(s, 1103515245) + 12345) >>> 0;
    a[i] = float ? (s >>> 8) / 65536 : (s >>> 20) & mask;
  }
}

function timeRuns(n: number, f: () => void): { best: number; median: number } {
  const times: number[] = [];
  for (let i = 0; i < n; i++) {
    const t0 = performance.now();
    f();
    times.push(performance.now() - t0);
  }
  times.sort((a, b) => a - b);
  return { best: times[0], median: times[Math.floor(times.length / 2)] };
}

function report(name: string, t: { best: number; median: number }): number {
  const gbps = (ms: number) => bytes / 1e9 / (ms / 1e3);
  console.log(`${name.padEnd(42)} best ${t.best.toFixed(1).padStart(7)} ms ${gbps(t.best).toFixed(2).padStart(6)} GB/s   median ${gbps(t.median).toFixed(2).padStart(6)} GB/s`);
  return gbps(t.best);
}

console.log(`tile ${nRows}×${g.scanX}×${g.detY}×${g.detX} ${dtype} = ${(bytes / 2 ** 20).toFixed(0)} MiB, detBin ${g.detBin}, scanBin ${g.scanBin}, one thread, node ${process.version}`);

const kernel = createWasmFirstPassKernel(wasmModule, bytes);
fillCounts(kernel.tileBuffer(dtype, nElements));
kernel.run(dtype, nRows, g); // warm-up: lets the engine tier up and sizes the memory
const wasm = report('WASM kernel (sum, max, totals, preview)', timeRuns(repeats, () => {
  kernel.tileBuffer(dtype, nElements);
  kernel.run(dtype, nRows, g);
}));

// Plain reads of the same bytes, for scale.
const tileBytes = kernel.tileBuffer(dtype, nElements);
const words = new Uint32Array(tileBytes.buffer, tileBytes.byteOffset, bytes / 4);
let sink = 0;
const read = report('JS loop summing the tile as Uint32', timeRuns(repeats, () => {
  let s = 0;
  for (let i = 0; i < words.length; i++) s = (s + words[i]) | 0;
  sink ^= s;
}));
const copyTarget = new Uint8Array(bytes);
const copy = report('copy of the tile (TypedArray.set)', timeRuns(repeats, () => {
  copyTarget.set(new Uint8Array(words.buffer, words.byteOffset, bytes));
}));

let reference = NaN;
if (!skipReference) {
  const copyOfTile = allocTyped(dtype, nElements);
  new Uint8Array(copyOfTile.buffer).set(copyTarget);
  reference = report('TS reference', timeRuns(1, () => { firstPassReference(copyOfTile, nRows, g); }));
}

console.log(`ratios (best): WASM / JS read ${(wasm / read).toFixed(2)}, WASM / copy ${(wasm / copy).toFixed(2)}, WASM / TS reference ${(wasm / reference).toFixed(1)}`);
console.log(`WASM: ${(wasm / DTYPE_BYTES[dtype]).toFixed(2)} G elements/s${sink === 0.5 ? '.' : ''}`);
