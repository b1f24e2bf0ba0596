// The WebAssembly SIMD products of a randomized-SVD pass against their plain TypeScript twin
// (rangeBlock), which the NumPy reference tests check.
import fs from 'node:fs';
import path from 'node:path';
import { describe, expect, it } from 'vitest';
import { gaussianMatrix, rangeBlock } from '../../src-shared/compute/randomized-svd';
import { createWasmSketchKernel } from '../../src-shared/compute/sketch-wasm';

const module = new WebAssembly.Module(fs.readFileSync(path.resolve(__dirname, '../../dist/wasm/sketch.wasm')));

function relDiff(a: Float64Array, b: Float64Array): number {
  let num = 0, den = 0;
  for (let i = 0; i < a.length; i++) { num = Math.max(num, Math.abs(a[i] - b[i])); den = Math.max(den, Math.abs(b[i])); }
  return den > 0 ? num / den : num;
}

describe('WebAssembly sketch kernel', () => {
  it.each([[37, 53, 13, true], [8, 16, 4, false], [1, 7, 1, true], [130, 300, 30, true]] as const)('n %i × d %i, l %i, centred %s: equals rangeBlock', (n, d, l, centred) => {
    const a = gaussianMatrix(n, d, 1).map((v) => v * 10 + 3);
    const z = gaussianMatrix(d, l, 2);
    const centre = centred ? gaussianMatrix(1, d, 3) : null;
    const want = rangeBlock(a, n, d, z, l, centre);
    const k = createWasmSketchKernel(module);
    k.rows(n, d, l).set(a);
    const got = k.run(n, d, z, l, centre);
    expect(relDiff(got.y, want.y)).toBeLessThan(1e-12);
    expect(relDiff(got.w, want.w)).toBeLessThan(1e-12);
    expect(relDiff(got.colSum, want.colSum)).toBeLessThan(1e-13);
    expect(Math.abs(got.sumSq / want.sumSq - 1)).toBeLessThan(1e-12);
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
