// Build step (runs on `npm install` through `prepare`, and before tests and benchmarks):
//  1. compile the WebAssembly kernels from src-shared/compute/wasm-src (AssemblyScript) to dist/wasm;
//  2. bundle the CLI and the worker entry points with esbuild to dist/.
import { build } from 'esbuild';
import { execFileSync } from 'node:child_process';
import fs from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';

const root = path.resolve(path.dirname(fileURLToPath(import.meta.url)), '..');
const dist = path.join(root, 'dist');
fs.mkdirSync(path.join(dist, 'wasm'), { recursive: true });

// 1. WebAssembly kernels: every file in wasm-src whose name does not start with "_" is an entry.
const wasmSrc = path.join(root, 'src-shared/compute/wasm-src');
const SHARED_MEMORY_ENTRIES = new Set(['preview-image']);
if (fs.existsSync(wasmSrc)) {
  const asc = path.join(root, 'node_modules/assemblyscript/bin/asc.js');
  for (const f of fs.readdirSync(wasmSrc)) {
    if (!f.endsWith('.ts') || f.startsWith('_') || f.endsWith('.d.ts')) continue;
    const name = f.replace(/\.ts$/, '');
    const out = path.join(dist, 'wasm', `${name}.wasm`);
    const src = path.join(wasmSrc, f);
    if (fs.existsSync(out) && newestMtime(wasmSrc) <= fs.statSync(out).mtimeMs) continue;
    // The preview cube's memory is shared: the first pass's workers write into it directly.
    const memoryFlags = SHARED_MEMORY_ENTRIES.has(name)
      ? ['--enable', 'simd,threads', '--sharedMemory', '--maximumMemory', '65536']
      : ['--enable', 'simd'];
    execFileSync(process.execPath, [asc, src, '-o', out, '-O3', '--noAssert', ...memoryFlags,
      '--runtime', 'stub', '--importMemory', '--initialMemory', '1'], { stdio: 'inherit', cwd: root });
  }
}

function newestMtime(dir) {
  return Math.max(...fs.readdirSync(dir).map((f) => fs.statSync(path.join(dir, f)).mtimeMs));
}

// 2. Bundles. External: packages in node_modules (h5wasm loads its own .wasm beside itself).
const entries = {
  'cli': 'src-main/cli/main.ts',
  'tile-worker': 'src-main/workers/tile-worker.ts',
  // Not shipped (electron-builder.yml leaves it out): `npm run bench`.
  'bench': 'bench/main.ts',
};
const existing = Object.fromEntries(Object.entries(entries).filter(([, p]) => fs.existsSync(path.join(root, p))));
if (Object.keys(existing).length) {
  await build({
    entryPoints: Object.fromEntries(Object.entries(existing).map(([k, p]) => [k, path.join(root, p)])),
    outdir: dist,
    outExtension: { '.js': '.mjs' },
    bundle: true,
    platform: 'node',
    format: 'esm',
    target: 'node20',
    packages: 'external',
    sourcemap: true,
    logLevel: 'warning',
  });
}

// 3. The renderer (served mode and, later, the Electron window): one browser bundle, its page
//    and styles, into dist/renderer.
const renderer = path.join(root, 'src-renderer');
if (fs.existsSync(path.join(renderer, 'main.tsx'))) {
  const out = path.join(dist, 'renderer');
  fs.mkdirSync(out, { recursive: true });
  await build({
    entryPoints: [path.join(renderer, 'main.tsx')],
    outfile: path.join(out, 'app.js'),
    bundle: true,
    platform: 'browser',
    format: 'esm',
    target: 'es2022',
    jsx: 'automatic',
    sourcemap: true,
    minify: true,
    define: { 'process.env.NODE_ENV': '"production"' },
    logLevel: 'warning',
  });
  for (const f of ['index.html', 'styles.css']) fs.copyFileSync(path.join(renderer, f), path.join(out, f));
}

// 4. The desktop shell (src-main/electron): the main process and the engine's utility process
//    (ESM), and the sandboxed preload (CommonJS, as Electron requires). Electron stays external.
const shellEntries = [
  ['electron-main.mjs', 'src-main/electron/main.ts', 'esm'],
  ['engine-host.mjs', 'src-main/electron/engine-host.ts', 'esm'],
  ['electron-preload.cjs', 'src-main/electron/preload.ts', 'cjs'],
];
for (const [outName, entry, format] of shellEntries) {
  if (!fs.existsSync(path.join(root, entry))) continue;
  await build({
    entryPoints: [path.join(root, entry)],
    outfile: path.join(dist, outName),
    bundle: true,
    platform: 'node',
    format,
    target: 'node20',
    packages: 'external',
    external: ['electron'],
    sourcemap: true,
    logLevel: 'warning',
  });
}
