import type { DType } from '../model/dtype';

/**
 * Memory conventions every WebAssembly kernel wrapper shares: [0, 64 KiB) is left to the
 * module (the kernels have no static data, which is what lets a worker hand one memory to all
 * of them), the tile starts at 64 KiB (page-aligned, so files are read straight into it), and
 * a 32-bit module addresses at most 4 GiB.
 */
export const PAGE_BYTES = 65536;
export const TILE_OFFSET = PAGE_BYTES;
export const MAX_PAGES = 65536;

export function roundUp(n: number, to: number): number {
  return Math.ceil(n / to) * to;
}

export function pagesFor(bytes: number): number {
  return Math.ceil(bytes / PAGE_BYTES);
}

/** Grow `memory` to hold at least `bytes` (growing detaches views of a non-shared memory). */
export function ensureMemoryBytes(memory: WebAssembly.Memory, bytes: number, what: string): void {
  const have = memory.buffer.byteLength;
  if (bytes <= have) return;
  const pages = pagesFor(bytes);
  if (pages > MAX_PAGES) throw new RangeError(`${what}: needs ${bytes} bytes of WebAssembly memory, more than the 4 GiB a 32-bit module can address; use smaller tiles`);
  memory.grow(pages - have / PAGE_BYTES);
}

/**
 * The memory a kernel works in: the worker's own, shared by every kernel of the worker so one
 * tile's worth serves whichever analysis runs, grown to `initialBytes`; or, alone, a new one.
 */
export function kernelMemory(initialBytes: number, what: string, workerMemory?: WebAssembly.Memory): WebAssembly.Memory {
  if (!workerMemory) return new WebAssembly.Memory({ initial: pagesFor(initialBytes) });
  ensureMemoryBytes(workerMemory, initialBytes, what);
  return workerMemory;
}

/** Each kernel module exports one function per dtype: PREFIXUint8 … PREFIXFloat64. */
export function exportNames(prefix: string): Record<DType, string> {
  return {
    uint8: `${prefix}Uint8`, uint16: `${prefix}Uint16`, uint32: `${prefix}Uint32`,
    int8: `${prefix}Int8`, int16: `${prefix}Int16`, int32: `${prefix}Int32`,
    float32: `${prefix}Float32`, float64: `${prefix}Float64`,
  };
}

/**
 * What a kernel wrote into memory for its current options (mask runs, lane masks, weights,
 * detector tables), kept so that later runs with the same options write it back with one copy
 * per range instead of preparing it again. The kernels of a worker share one memory and lay
 * out their scratch at the same places after the tile, so another kernel may have written
 * over these bytes since: they are always written back before a run that reuses them.
 */
export class KeptWrites {
  private ranges: { at: number; bytes: Uint8Array }[] = [];

  /** Keeps a copy of `byteLength` bytes at `at`, just written. */
  keep(buffer: ArrayBufferLike, at: number, byteLength: number): void {
    if (byteLength > 0) this.ranges.push({ at, bytes: new Uint8Array(buffer, at, byteLength).slice() });
  }

  restore(buffer: ArrayBufferLike): void {
    for (const r of this.ranges) new Uint8Array(buffer, r.at, r.bytes.length).set(r.bytes);
  }

  clear(): void {
    this.ranges = [];
  }
}
