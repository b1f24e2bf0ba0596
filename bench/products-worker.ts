// One worker of the products benchmark (pca.bench.ts): it holds one block of feature rows in the
// sketch kernel's memory (float32, as the engine makes them) and, on each 'go', runs the
// products of a pass (Y = C·Z, W = Cᵀ·Y) over `blocks` blocks, as a pass's worker does, and
// answers with the milliseconds it took.
import { parentPort, workerData } from 'node:worker_threads';
import { loadFastestWasmModule } from '../src-main/workers/wasm-loader';
import { gaussianMatrix } from '../src-shared/compute/randomized-svd';
import { createWasmSketchKernel } from '../src-shared/compute/sketch-wasm';

const { block, d, l, blocks, seed } = workerData as { block: number; d: number; l: number; blocks: number; seed: number };
const kernel = createWasmSketchKernel(loadFastestWasmModule('sketch'));
const a = gaussianMatrix(block, d, seed);
const z = gaussianMatrix(d, l, seed + 1);
const into = { y: new Float64Array(block * l), w: new Float64Array(d * l) };
parentPort!.on('message', (m: string) => {
  if (m !== 'go') { process.exit(0); }
  let ms = 0;
  for (let b = 0; b < blocks; b++) {
    kernel.rows(block, d, l).set(a);
    const t = performance.now();
    kernel.run(block, d, z, l, null, into);
    ms += performance.now() - t;
  }
  parentPort!.postMessage(ms);
});
parentPort!.postMessage('ready');
