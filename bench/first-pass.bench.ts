// `npm run bench`: the first pass over the page-cached 2 GiB `large` sample, beside a plain
// sequential read of the same bytes and NumPy (memmap) doing the same sums, as ratios from
// one run. Not a timed test: these machines are noisy, so compare within one run.
import fs from 'node:fs';
import { Worker } from 'node:worker_threads';
import path from 'node:path';
import { spawnSync } from 'node:child_process';
import { Engine } from '../src-main/engine/engine';
import { openTileSource } from '../src-main/io/index';
import { writeSample } from '../samples/write-sample';
import { OutputFile } from '../src-main/io/output-file';
import { projectRoot } from '../src-main/engine/paths';
import { fmtBytes } from '../src-main/engine/budget';
import { allocTyped } from '../src-shared/model/dtype';
import { runAnalysesBenchmark } from './analyses.bench';
import { runCommandsBenchmark } from './commands.bench';
import { productsBenchmark, runPcaBenchmark } from './pca.bench';
import { runAppBenchmark } from './app.bench';

const PY = '/usr/bin/python3';

function gbps(bytes: number, seconds: number): string { return (bytes / seconds / 1e9).toFixed(2); }

/** Read a whole file sequentially in 64 MiB blocks into page-aligned WebAssembly memory. */
function plainRead(file: string): { seconds: number; bytes: number } {
  const block = 64 * 1024 * 1024;
  const mem = new WebAssembly.Memory({ initial: block / 65536 });
  const buf = new Uint8Array(mem.buffer, 0, block);
  const fd = fs.openSync(file, 'r');
  const size = fs.fstatSync(fd).size;
  const t0 = performance.now();
  let pos = 0;
  let x = 0;
  while (pos < size) {
    const n = fs.readSync(fd, buf, 0, Math.min(block, size - pos), pos);
    if (n <= 0) break;
    x ^= buf[n - 1];
    pos += n;
  }
  const seconds = (performance.now() - t0) / 1000;
  fs.closeSync(fd);
  if (x < 0) console.log(x);
  return { seconds, bytes: pos };
}

/**
 * The same read on `threads` threads at once, each taking every threads-th 64 MiB block (the
 * pass's own thread count: like with like). Median of three.
 */
async function plainReadThreads(file: string, threads: number): Promise<{ seconds: number; bytes: number }> {
  const code = `
    const { parentPort, workerData } = require('node:worker_threads');
    const fs = require('node:fs');
    const block = 64 * 1024 * 1024;
    const buf = new Uint8Array(new WebAssembly.Memory({ initial: block / 65536 }).buffer, 0, block);
    buf.fill(1);
    const fd = fs.openSync(workerData.file, 'r');
    const size = fs.fstatSync(fd).size;
    parentPort.postMessage('ready');
    parentPort.once('message', () => {
      for (let pos = workerData.i * block; pos < size; pos += workerData.n * block) fs.readSync(fd, buf, 0, Math.min(block, size - pos), pos);
      parentPort.postMessage('done');
    });`;
  const size = fs.statSync(file).size;
  const times: number[] = [];
  for (let rep = 0; rep < 3; rep++) {
    const ws = Array.from({ length: threads }, (_, i) => new Worker(code, { eval: true, workerData: { file, i, n: threads } }));
    await Promise.all(ws.map((w) => new Promise((r) => w.once('message', r))));
    const t0 = performance.now();
    ws.forEach((w) => w.postMessage('go'));
    await Promise.all(ws.map((w) => new Promise((r) => w.once('message', r))));
    times.push((performance.now() - t0) / 1000);
    await Promise.all(ws.map((w) => w.terminate()));
  }
  return { seconds: times.sort((a, b) => a - b)[1], bytes: size };
}

async function ensureLarge(dir: string): Promise<{ h5: string; raw: string; shape: number[] }> {
  fs.mkdirSync(dir, { recursive: true });
  const h5 = path.join(dir, 'large.h5');
  const raw = path.join(dir, 'large.u16');
  if (!fs.existsSync(h5)) {
    console.error(`generating ${h5} (2 GiB, once) …`);
    await writeSample({ size: 'large', out: h5 });
  }
  const src = await openTileSource({ path: h5, datasetPath: '/scan/frames' });
  const { scanY, scanX, detY, detX } = src.descriptor.shape;
  if (!fs.existsSync(raw) || fs.statSync(raw).size !== src.descriptor.byteSize) {
    console.error(`writing a raw copy ${raw} for the memmap comparison …`);
    const out = OutputFile.create(raw, { flag: 'benchmark raw copy', protect: [h5] });
    out.reserve(src.descriptor.byteSize);
    await out.write((tmp) => {
      const fd = fs.openSync(tmp, 'r+');
      try {
        const rows = 8;
        const tile = allocTyped(src.descriptor.dtype, rows * scanX * detY * detX);
        let pos = 0;
        for (let r = 0; r < scanY; r += rows) {
          const n = Math.min(rows, scanY - r);
          const view = tile.subarray(0, n * scanX * detY * detX);
          src.readRows(r, n, view);
          fs.writeSync(fd, new Uint8Array(view.buffer, view.byteOffset, view.byteLength), 0, view.byteLength, pos);
          pos += view.byteLength;
        }
      } finally {
        fs.closeSync(fd);
      }
    });
  }
  src.close();
  return { h5, raw, shape: [scanY, scanX, detY, detX] };
}

/**
 * The first pass on a fresh engine (cold: worker start-up, first touch of kernel memory) and
 * then three more on the same engine (warm, as in the application, whose workers live on);
 * the warm figure is the median of those three.
 */
async function timedFirstPass(spec: Parameters<Engine['firstPass']>[0], workers: number) {
  const engine = new Engine({ workers });
  try {
    const t0 = performance.now();
    const cold = await engine.firstPass(spec).result;
    const coldSeconds = (performance.now() - t0) / 1000;
    const warm = [];
    // As when a dataset is reopened: the previous result is released and its preview memory reused.
    let last = cold;
    for (let i = 0; i < 3; i++) {
      engine.release(last);
      last = await engine.firstPass(spec).result;
      warm.push(last);
    }
    const times = warm.map((w) => w.seconds).sort((a, b) => a - b);
    return { ...last, seconds: times[1], coldSeconds };
  } finally {
    await engine.close();
  }
}

export async function runBenchmark(opts: { dir: string; workers: number; parts: Set<string> }): Promise<void> {
  const { h5, raw, shape } = await ensureLarge(opts.dir);
  const [sy, sx, ky, kx] = shape;
  // Warm the page cache (and check the files are readable) before any timing.
  plainRead(raw); plainRead(h5);
  const reads = [plainRead(raw), plainRead(raw), plainRead(raw)].sort((a, b) => a.seconds - b.seconds);
  const readRate = reads[1].bytes / reads[1].seconds;
  if (opts.parts.has('first-pass')) await firstPassBenchmark({ h5, raw, shape, workers: opts.workers, read: reads[1] });
  if (opts.parts.has('analyses')) await runAnalysesBenchmark({ raw, shape, workers: opts.workers, readRate });
  if (opts.parts.has('commands')) runCommandsBenchmark({ raw, shape, workers: opts.workers });
  if (opts.parts.has('pca')) await runPcaBenchmark({ h5, shape, workers: opts.workers });
  if (opts.parts.has('products')) await productsBenchmark(opts.workers);
  if (opts.parts.has('app')) {
    const read = [plainRead(h5), plainRead(h5), plainRead(h5)].sort((a, b) => a.seconds - b.seconds)[1];
    await runAppBenchmark({ h5, workers: opts.workers, plainReadSeconds: read.seconds });
  }
}

async function firstPassBenchmark(opts: { h5: string; raw: string; shape: number[]; workers: number; read: { seconds: number; bytes: number } }): Promise<void> {
  const { h5, raw, shape, read } = opts;
  const [sy, sx, ky, kx] = shape;
  const rawSpec = { path: raw, format: 'raw' as const, raw: { shape: { scanY: sy, scanX: sx, detY: ky, detX: kx }, dtype: 'uint16' as const, byteOrder: 'little' as const, offset: 0 } };
  const h5Spec = { path: h5, datasetPath: '/scan/frames' };
  const fpRaw = await timedFirstPass(rawSpec, opts.workers);
  const fpH5 = await timedFirstPass(h5Spec, opts.workers);
  const bytes = fpRaw.descriptor.byteSize;
  let numpy: Record<string, number | string> | null = null;
  if (fs.existsSync(PY)) {
    const p = spawnSync(PY, [path.join(projectRoot(), 'bench/numpy_first_pass.py'), raw, String(sy), String(sx), String(ky), String(kx)], { encoding: 'utf8' });
    if (p.status === 0) numpy = JSON.parse(p.stdout.trim().split('\n').pop()!);
    else console.error('NumPy comparison skipped: ' + (p.stderr || p.error?.message));
  }
  const readRate = bytes / read.seconds;
  const readN = await plainReadThreads(raw, opts.workers);
  const readRateN = readN.bytes / readN.seconds;
  const both = (s: number) => `${(bytes / s / readRate).toFixed(2)} | ${(bytes / s / readRateN).toFixed(2)}`;
  const rows: string[][] = [
    ['plain sequential read (1 thread, into WASM memory, median of 3)', gbps(read.bytes, read.seconds), `1.00 | ${(readRate / readRateN).toFixed(2)}`],
    [`plain read (${opts.workers} threads, as the pass, median of 3)`, gbps(readN.bytes, readN.seconds), `${(readRateN / readRate).toFixed(2)} | 1.00`],
    [`first pass, raw file (${opts.workers} workers, warm engine)`, gbps(bytes, fpRaw.seconds), both(fpRaw.seconds)],
    [`first pass, raw file (${opts.workers} workers, fresh engine incl. start-up)`, gbps(bytes, fpRaw.coldSeconds), both(fpRaw.coldSeconds)],
    [`first pass, HDF5 chunked (${opts.workers} workers, warm engine)`, gbps(bytes, fpH5.seconds), both(fpH5.seconds)],
    [`first pass, HDF5 chunked (${opts.workers} workers, fresh engine incl. start-up)`, gbps(bytes, fpH5.coldSeconds), both(fpH5.coldSeconds)],
  ];
  if (numpy) {
    rows.push([`NumPy ${numpy.numpy} memmap: same sums and max`, gbps(bytes, numpy.first_pass as number), both(numpy.first_pass as number)]);
    rows.push([`NumPy ${numpy.numpy} memmap: plain sum`, gbps(bytes, numpy.plain_sum as number), both(numpy.plain_sum as number)]);
  }
  console.log(`first-pass benchmark on ${h5} (${shape.join('×')} uint16, ${fmtBytes(bytes)}, page-cached), one run:`);
  console.log(['what', 'GB/s', '× plain read, 1 thread', `× plain read, ${opts.workers} threads`].join(' | '));
  for (const r of rows) console.log(r.join(' | '));
  if (numpy) {
    console.log(`first pass (raw) vs NumPy same sums: ${((numpy.first_pass as number) / fpRaw.seconds).toFixed(2)}×; vs NumPy plain sum: ${((numpy.plain_sum as number) / fpRaw.seconds).toFixed(2)}×`);
  }
  const detail = `worker time split (raw): read ${(fpRaw.readMs / 1000).toFixed(2)} s, compute ${(fpRaw.computeMs / 1000).toFixed(2)} s (summed over workers); tiles of ${fpRaw.plan.tileRows} rows, preview ${fpRaw.preview.qY}×${fpRaw.preview.qX}×${fpRaw.preview.pY}×${fpRaw.preview.pX}`;
  console.log(detail);
}
