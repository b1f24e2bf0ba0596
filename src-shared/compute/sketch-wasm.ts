import type { RangeBlock } from './randomized-svd';
import { ensureMemoryBytes, PAGE_BYTES, roundUp } from './wasm-memory';

/**
 * The WebAssembly SIMD twin of rangeBlock (randomized-svd.ts), built from wasm-src/sketch.ts:
 * for a block of feature rows C (n × d), Y = C·Z and W = Cᵀ·Y in float64. The caller writes
 * the rows straight into kernel memory (`rows`), then calls `run`. Growing the memory detaches
 * views, so take the view from `rows` before every `run` and do not keep it after.
 */
export interface SketchKernel {
  /** A view of n × d float64 values in kernel memory for the block's rows (room for l sketch columns is made too). */
  rows(n: number, d: number, l: number): Float64Array;
  /**
   * The products for the rows last written; `centre` (d values) is taken out of them first, in
   * place. With `into`, Y and W are written there (n × l and d × l) instead of fresh arrays.
   */
  run(n: number, d: number, z: Float64Array, l: number, centre: Float64Array | null, into?: { y: Float64Array; w: Float64Array }): RangeBlock;
}

export function createWasmSketchKernel(wasmModule: WebAssembly.Module): SketchKernel {
  const memory = new WebAssembly.Memory({ initial: 1 });
  const instance = new WebAssembly.Instance(wasmModule, {
    env: { memory, abort: () => { throw new Error('sketch: WebAssembly kernel aborted'); } },
  });
  const ex = instance.exports as unknown as {
    centreRows(a: number, n: number, d: number, centre: number, colSum: number): number;
    matmul(a: number, m: number, k: number, b: number, l: number, out: number, accumulate: number): void;
    matmulTransA(a: number, m: number, k: number, b: number, l: number, out: number, accumulate: number): void;
  };
  const layout = (n: number, d: number, l: number) => {
    const L = roundUp(Math.max(l, 1), 4);
    let at = PAGE_BYTES;
    const take = (bytes: number) => { const p = at; at = roundUp(at + bytes, 64); return p; };
    const a = take(n * d * 8), z = take(d * L * 8), y = take(n * L * 8), w = take(d * L * 8);
    const colSum = take(d * 8), centre = take(d * 8);
    return { L, a, z, y, w, colSum, centre, end: at };
  };
  return {
    rows(n, d, l) {
      const lay = layout(n, d, l);
      ensureMemoryBytes(memory, lay.end, 'sketch');
      return new Float64Array(memory.buffer, lay.a, n * d);
    },
    run(n, d, z, l, centre, into) {
      if (z.length !== d * l) throw new RangeError(`sketch: Z holds ${z.length} values, expected ${d}×${l}`);
      const lay = layout(n, d, l);
      if (memory.buffer.byteLength < lay.end) throw new Error('sketch: rows(n, d, l) must be called before run');
      const { L } = lay;
      const buf = memory.buffer;
      // Z padded to L columns with zeros.
      const zp = new Float64Array(buf, lay.z, d * L);
      if (L === l) zp.set(z);
      else { zp.fill(0); for (let j = 0; j < d; j++) zp.set(z.subarray(j * l, (j + 1) * l), j * L); }
      new Float64Array(buf, lay.colSum, d).fill(0);
      if (centre) new Float64Array(buf, lay.centre, d).set(centre);
      const sumSq = ex.centreRows(lay.a, n, d, centre ? lay.centre : 0, lay.colSum);
      ex.matmul(lay.a, n, d, lay.z, L, lay.y, 0);
      ex.matmulTransA(lay.a, n, d, lay.y, L, lay.w, 0);
      const yv = new Float64Array(buf, lay.y, n * L);
      const wv = new Float64Array(buf, lay.w, d * L);
      const unpad = (v: Float64Array, rows: number, target?: Float64Array) => {
        const o = target ?? new Float64Array(rows * l);
        if (o.length !== rows * l) throw new RangeError(`sketch: output holds ${o.length} values, expected ${rows}×${l}`);
        if (L === l) o.set(v);
        else for (let i = 0; i < rows; i++) o.set(v.subarray(i * L, i * L + l), i * l);
        return o;
      };
      return { y: unpad(yv, n, into?.y), w: unpad(wv, d, into?.w), colSum: new Float64Array(buf, lay.colSum, d).slice(), sumSq };
    },
  };
}
