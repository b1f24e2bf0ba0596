// The WebAssembly SIMD products of a randomized-SVD pass against their plain TypeScript twin
// (rangeBlock), which the NumPy reference tests check.
import fs from 'node:fs';
import path from 'node:path';
import { describe, expect, it } from 'vitest';
import { gaussianMatrix, rangeBlock } from '../../src-shared/compute/randomized-svd';
import { createWasmSketchKernel } from '../../src-shared/compute/sketch-wasm';
import { loadFastestWasmModule, loadWasmModule } from '../../src-main/workers/wasm-loader';

const wasmFile = (name: string) => fs.readFileSync(path.resolve(__dirname, `../../dist/wasm/${name}.wasm`));
// The engine's choice: the relaxed-SIMD build (fused multiply-add) where the runtime compiles it;
// on Node 20 the loader turns V8's flag on. Both builds are checked.
const fastest = loadFastestWasmModule('sketch');
const builds = [
  ['sketch.wasm (multiply, add)', new WebAssembly.Module(wasmFile('sketch'))],
  ['sketch-relaxed.wasm (fused multiply-add)', new WebAssembly.Module(wasmFile('sketch-relaxed'))],
] as const;

function relDiff(a: Float64Array, b: Float64Array): number {
  let num = 0, den = 0;
  for (let i = 0; i < a.length; i++) { num = Math.max(num, Math.abs(a[i] - b[i])); den = Math.max(den, Math.abs(b[i])); }
  return den > 0 ? num / den : num;
}

/** |a| (n × k) times |b| (k × l), or |a|ᵀ·|b| with `transA` (a: k × n). */
function absProduct(a: ArrayLike<number>, b: ArrayLike<number>, n: number, k: number, l: number, transA = false): Float64Array {
  const out = new Float64Array(n * l);
  for (let i = 0; i < n; i++) for (let j = 0; j < k; j++) {
    const x = Math.abs(transA ? a[j * n + i] : a[i * k + j]);
    for (let c = 0; c < l; c++) out[i * l + c] += x * Math.abs(b[j * l + c]);
  }
  return out;
}

// The rounding-error bound of an inner product of n terms in floating point, |fl(xᵀy) − xᵀy| ≤
// γ_n·|x|ᵀ|y| with γ_n = n·u / (1 − n·u) (Higham, Accuracy and Stability of Numerical Algorithms,
// 2nd ed. 2002, §3.1). The kernel rounds each input to float32 (u = 2⁻²⁴) and sums in float32,
// so two more roundings per term: γ_{n+2}. The twin works in float64 (its own error is ~10⁹ times smaller).
const U32 = 2 ** -24;
const gamma = (n: number) => (n * U32) / (1 - n * U32);

/** Every entry of got within its bound of want. */
function expectWithin(got: Float64Array, want: Float64Array, bound: Float64Array): void {
  let worst = 0;
  for (let i = 0; i < want.length; i++) worst = Math.max(worst, Math.abs(got[i] - want[i]) / bound[i]);
  expect(worst).toBeLessThanOrEqual(1);
}

it('the engine loads the relaxed build: the runtime compiles it (on Node 20 once the loader set the flag)', () => {
  expect(WebAssembly.validate(wasmFile('sketch-relaxed'))).toBe(true);
  // The loader falls back to the plain build's module (cached by loadWasmModule) only where the relaxed one does not compile.
  expect(fastest).not.toBe(loadWasmModule('sketch'));
});

describe.each(builds)('WebAssembly sketch kernel, %s', (_, module) => {
  // Sizes that reach every tail: rows n % 4 = 1, 2, 3; columns d % 4 = 1, 2, 3; widths padded to 8.
  it.each([[37, 53, 13, true, 0], [8, 16, 4, false, 0], [1, 7, 1, true, 0], [130, 300, 30, true, 0], [130, 301, 9, true, 21],
    [7, 10, 1, false, 0], [11, 6, 17, true, 13], [6, 3, 8, true, 0]] as const)(
    'n %i × d %i, l %i, centred %s, co-range %i: within float32 rounding of rangeBlock', (n, d, l, centred, s) => {
    // The kernel's rows are float32 (the features are made so): the twin gets the same values.
    const a = gaussianMatrix(n, d, 1).map((v) => Math.fround(v * 10 + 3));
    const z = gaussianMatrix(d, l, 2);
    const centre = centred ? gaussianMatrix(1, d, 3) : null;
    const psi = s ? { rows: gaussianMatrix(n, s, 4), s } : undefined;
    const want = rangeBlock(a, n, d, z, l, centre, psi);
    const k = createWasmSketchKernel(module);
    k.rows(n, d, l, s).set(a);
    const got = k.run(n, d, z, l, centre, undefined, psi);
    // Column sums and Σ of squares are made in float64.
    expect(relDiff(got.colSum, want.colSum)).toBeLessThan(1e-13);
    expect(Math.abs(got.sumSq / want.sumSq - 1)).toBeLessThan(1e-12);
    // Y = C·Z: each entry an inner product of d terms.
    const c = a.map((v, i) => v - (centre ? centre[i % d] : 0));
    const boundY = absProduct(c, z, n, d, l).map((v) => gamma(d + 2) * v);
    expectWithin(got.y, want.y, boundY);
    // W = Cᵀ·Y (or Cᵀ·Ψ): n terms each, on a Y that carries its own error: |C|ᵀ·boundY + γ_{n+2}·|C|ᵀ·(|Y| + boundY).
    const right = psi ? psi.rows : want.y.map((v, i) => Math.abs(v) + boundY[i]);
    const wl = psi ? s : l;
    const carried = psi ? new Float64Array(d * wl) : absProduct(c, boundY, d, n, wl, true);
    const boundW = absProduct(c, right, d, n, wl, true).map((v, i) => gamma(n + 2) * v + carried[i]);
    expectWithin(got.w, want.w, boundW);
    // And not merely within a loose bound: float32 products, a few units of float32 rounding off.
    expect(relDiff(got.y, want.y)).toBeLessThan(1e-5);
    expect(relDiff(got.w, want.w)).toBeLessThan(1e-5);
  });

  it('speed: a 1024 × 4096 block against a 4096 × 32 sketch', () => {
    const n = 1024, d = 4096, l = 32;
    const a = gaussianMatrix(n, d, 4);
    const z = gaussianMatrix(d, l, 5);
    const k = createWasmSketchKernel(module);
    let best = Infinity;
    for (let rep = 0; rep < 3; rep++) {
      k.rows(n, d, l).set(a);
      const t = performance.now();
      k.run(n, d, z, l, null);
      best = Math.min(best, performance.now() - t);
    }
    const gflops = (4 * n * d * l) / (best / 1000) / 1e9;
    let ref = performance.now();
    rangeBlock(a, n, d, z, l, null);
    ref = performance.now() - ref;
    console.log(`sketch block 1024×4096·4096×32 (Y = C·Z and W = Cᵀ·Y): WebAssembly ${best.toFixed(1)} ms (${gflops.toFixed(1)} GFLOP/s), TypeScript ${ref.toFixed(1)} ms`);
    expect(best).toBeLessThan(ref);
  });
});
