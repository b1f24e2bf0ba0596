// Worker thread entry: opens its own reader (positional reads for raw/.npy, its own h5wasm
// instance for HDF5), reads tiles straight into the kernel's memory and returns small
// partial results. Tiles never pass through the main thread.
import { parentPort, workerData } from 'node:worker_threads';
import * as Comlink from 'comlink';
import nodeEndpoint from 'comlink/dist/esm/node-adapter.mjs';
import type { SourceSpec, DatasetDescriptor } from '../../src-shared/model/dataset';
import { DTYPE_BYTES } from '../../src-shared/model/dtype';
import type { FirstPassGeometry, FirstPassKernel, FirstPassTileResult } from '../../src-shared/compute/first-pass-types';
import { createReferenceKernel } from '../../src-shared/compute/first-pass';
import { createWasmFirstPassKernel } from '../../src-shared/compute/first-pass-wasm';
import { openTileSource, type TileSource } from '../io/index';
import { loadWasmModule } from './wasm-loader';

export type KernelKind = 'wasm' | 'reference';

export interface OpenReply {
  descriptor: DatasetDescriptor;
  rowAlignment: number;
}

export interface KernelOptions {
  /** Largest tile this worker will be asked to read, in bytes. */
  maxTileBytes: number;
  kernel: KernelKind;
}

export interface FirstPassTileReply extends Pick<FirstPassTileResult, 'sum' | 'max' | 'nonFinite'> {
  row0: number;
  nRows: number;
  bytes: number;
  readMs: number;
  computeMs: number;
}

/** The whole preview cube (float32) and total-intensity image (float64), shared with the main thread. */
export interface FirstPassShared {
  preview: SharedArrayBuffer;
  total: SharedArrayBuffer;
  /** Preview values per preview row (qX × pY × pX). */
  previewRowValues: number;
}

function sharedOutputs(row0: number, nRows: number, g: FirstPassGeometry, shared: FirstPassShared) {
  const rows = Math.ceil(nRows / g.scanBin);
  return {
    preview: new Float32Array(shared.preview, (row0 / g.scanBin) * shared.previewRowValues * 4, rows * shared.previewRowValues),
    total: new Float64Array(shared.total, row0 * g.scanX * 8, nRows * g.scanX),
  };
}

let source: TileSource | null = null;
let sourceKey = '';
let firstPass: FirstPassKernel | null = null;
let firstPassKey = '';



const api = {
  /** Open (or keep open) the source; returns its descriptor and storage row alignment. */
  async open(spec: SourceSpec): Promise<OpenReply> {
    const key = JSON.stringify(spec);
    if (!source || key !== sourceKey) {
      source?.close();
      source = null;
      source = await openTileSource(spec);
      sourceKey = key;
    }
    return { descriptor: source.descriptor, rowAlignment: source.rowAlignment };
  },

  /**
   * One tile of the first pass. The preview rows and the totals go straight into the shared
   * arrays that hold the whole preview cube and total-intensity image; sum and max come back.
   */
  firstPassTile(row0: number, nRows: number, geometry: FirstPassGeometry, options: KernelOptions, shared: FirstPassShared): FirstPassTileReply {
    if (!source) throw new Error('worker: open() must be called before firstPassTile()');
    const k = firstPassKernel(options);
    const d = source.descriptor;
    const n = nRows * d.shape.scanX * d.shape.detY * d.shape.detX;
    const t0 = performance.now();
    const tile = k.tileBuffer(d.dtype, n);
    source.readRows(row0, nRows, tile);
    const t1 = performance.now();
    const r = k.run(d.dtype, nRows, geometry, sharedOutputs(row0, nRows, geometry, shared));
    const reply: FirstPassTileReply = {
      sum: r.sum, max: r.max, nonFinite: r.nonFinite, row0, nRows, bytes: n * DTYPE_BYTES[d.dtype], readMs: t1 - t0, computeMs: performance.now() - t1,
    };
    return Comlink.transfer(reply, [r.sum.buffer, r.max.buffer] as ArrayBuffer[]);
  },

  close(): void {
    source?.close();
    source = null;
    sourceKey = '';
  },

  /** For tests of failure handling: throw from inside a task, or end the thread abruptly. */
  fail(how: 'throw' | 'exit'): void {
    if (how === 'exit') process.exit(3);
    throw new Error('worker: deliberate failure');
  },

  ping(): number {
    return (workerData as { index?: number } | undefined)?.index ?? -1;
  },
};

function firstPassKernel(options: KernelOptions): FirstPassKernel {
  const key = `${options.kernel}:${options.maxTileBytes}`;
  if (firstPass && key === firstPassKey) return firstPass;
  const k = options.kernel === 'wasm'
    ? createWasmFirstPassKernel(loadWasmModule('first-pass'), options.maxTileBytes)
    : createReferenceKernel();
  firstPass = k;
  firstPassKey = key;
  return k;
}

export type TileWorkerApi = typeof api;

if (parentPort) Comlink.expose(api, nodeEndpoint(parentPort as never));
