import type { RangeBlock } from './randomized-svd';
import { ensureMemoryBytes, PAGE_BYTES, roundUp } from './wasm-memory';

/**
 * The WebAssembly SIMD twin of rangeBlock (randomized-svd.ts), built from wasm-src/sketch.ts:
 * for a block of feature rows C (n × d), Y = C·Z and W = Cᵀ·Y. The rows are written in float32;
 * the column sums and Σ of squares are made in float64; the products run in float32 (see
 * wasm-src/sketch.ts) and come back as float64. The caller writes
 * the rows straight into kernel memory (`rows`), then calls `run`. Growing the memory detaches
 * views, so take the view from `rows` before every `run` and do not keep it after.
 */
export interface SketchKernel {
  /** A view of n × d float32 values in kernel memory for the block's rows (room for l sketch columns is made too). */
  rows(n: number, d: number, l: number, s?: number): Float32Array;
  /**
   * The products for the rows last written; `centre` (d values) is taken out of them first, in
   * place. With `into`, Y and W are written there (n × l and d × l) instead of fresh arrays.
   */
  run(n: number, d: number, z: Float64Array, l: number, centre: Float64Array | null, into?: { y: Float64Array; w: Float64Array },
    /** One-pass sketch: W = Cᵀ·psi (psi: n × s) instead of Cᵀ·Y. */
    psi?: { rows: Float64Array; s: number }): RangeBlock;
  /** A view for n uint16 patterns of nPix pixels in kernel memory, for clusterSums (read the tile into it). */
  patternsU16(n: number, nPix: number, k: number): Uint16Array;
  /** Per-cluster sums (k × nPix) of the patterns last written by patternsU16, by their labels (each 0 … k − 1). */
  clusterSums(n: number, nPix: number, labels: Int32Array, k: number): Float64Array;
}

export function createWasmSketchKernel(wasmModule: WebAssembly.Module): SketchKernel {
  const memory = new WebAssembly.Memory({ initial: 1 });
  const instance = new WebAssembly.Instance(wasmModule, {
    env: { memory, abort: () => { throw new Error('sketch: WebAssembly kernel aborted'); } },
  });
  const ex = instance.exports as unknown as {
    centreRows(a: number, n: number, d: number, centre: number, colSum: number): number;
    matmul(a: number, m: number, k: number, b: number, l: number, out: number): void;
    matmulTransA(a: number, m: number, k: number, b: number, l: number, out: number): void;
    clusterSumsU16(tile: number, n: number, nPix: number, labels: number, sums: number): void;
  };
  const clusterLayout = (n: number, nPix: number, k: number) => {
    const tile = PAGE_BYTES;
    const labels = roundUp(tile + n * nPix * 2, 64);
    const sums = roundUp(labels + n * 4, 64);
    return { tile, labels, sums, end: sums + k * nPix * 8 };
  };
  const layout = (n: number, d: number, l: number, s = 0) => {
    // Sketch widths padded to whole tiles of 8 float32 columns.
    const L = roundUp(Math.max(l, 1), 8);
    const S = roundUp(s, 8);
    const WL = Math.max(L, S);
    let at = PAGE_BYTES;
    const take = (bytes: number) => { const p = at; at = roundUp(at + bytes, 64); return p; };
    const a = take(n * d * 4), z = take(d * L * 4), y = take(n * L * 4), w = take(d * WL * 4), psi = take(n * S * 4);
    const colSum = take(d * 8), centre = take(d * 8);
    return { L, S, a, z, y, w, psi, colSum, centre, end: at };
  };
  return {
    rows(n, d, l, s = 0) {
      const lay = layout(n, d, l, s);
      ensureMemoryBytes(memory, lay.end, 'sketch');
      return new Float32Array(memory.buffer, lay.a, n * d);
    },
    patternsU16(n, nPix, k) {
      const lay = clusterLayout(n, nPix, k);
      ensureMemoryBytes(memory, lay.end, 'cluster sums');
      return new Uint16Array(memory.buffer, lay.tile, n * nPix);
    },
    clusterSums(n, nPix, labels, k) {
      const lay = clusterLayout(n, nPix, k);
      if (memory.buffer.byteLength < lay.end) throw new Error('cluster sums: patternsU16(n, nPix, k) must be called first');
      for (let i = 0; i < n; i++) if (!(labels[i] >= 0 && labels[i] < k)) throw new RangeError(`cluster sums: label ${labels[i]} outside 0 … ${k - 1}`);
      new Int32Array(memory.buffer, lay.labels, n).set(labels.subarray(0, n));
      new Float64Array(memory.buffer, lay.sums, k * nPix).fill(0);
      ex.clusterSumsU16(lay.tile, n, nPix, lay.labels, lay.sums);
      return new Float64Array(memory.buffer, lay.sums, k * nPix).slice();
    },
    run(n, d, z, l, centre, into, psi) {
      if (z.length !== d * l) throw new RangeError(`sketch: Z holds ${z.length} values, expected ${d}×${l}`);
      const lay = layout(n, d, l, psi?.s ?? 0);
      if (memory.buffer.byteLength < lay.end) throw new Error('sketch: rows(n, d, l) must be called before run');
      const { L } = lay;
      const buf = memory.buffer;
      // Z in float32, padded to L columns with zeros.
      const zp = new Float32Array(buf, lay.z, d * L);
      if (L === l) zp.set(z);
      else { zp.fill(0); for (let j = 0; j < d; j++) zp.set(z.subarray(j * l, (j + 1) * l), j * L); }
      new Float64Array(buf, lay.colSum, d).fill(0);
      if (centre) new Float64Array(buf, lay.centre, d).set(centre);
      const sumSq = ex.centreRows(lay.a, n, d, centre ? lay.centre : 0, lay.colSum);
      ex.matmul(lay.a, n, d, lay.z, L, lay.y);
      let wCols = L, wWant = l;
      if (psi) {
        // Ψᵀ rows padded to S columns.
        const pp = new Float32Array(buf, lay.psi, n * lay.S);
        if (lay.S === psi.s) pp.set(psi.rows.subarray(0, n * psi.s));
        else { pp.fill(0); for (let i = 0; i < n; i++) pp.set(psi.rows.subarray(i * psi.s, (i + 1) * psi.s), i * lay.S); }
        ex.matmulTransA(lay.a, n, d, lay.psi, lay.S, lay.w);
        wCols = lay.S;
        wWant = psi.s;
      } else {
        ex.matmulTransA(lay.a, n, d, lay.y, L, lay.w);
      }
      const yv = new Float32Array(buf, lay.y, n * L);
      const wv = new Float32Array(buf, lay.w, d * wCols);
      const unpad = (v: Float32Array, rows: number, have: number, want: number, target?: Float64Array) => {
        const o = target ?? new Float64Array(rows * want);
        if (o.length !== rows * want) throw new RangeError(`sketch: output holds ${o.length} values, expected ${rows}×${want}`);
        if (have === want) o.set(v);
        else for (let i = 0; i < rows; i++) o.set(v.subarray(i * have, i * have + want), i * want);
        return o;
      };
      return { y: unpad(yv, n, L, l, into?.y), w: unpad(wv, d, wCols, wWant, into?.w), colSum: new Float64Array(buf, lay.colSum, d).slice(), sumSq };
    },
  };
}
