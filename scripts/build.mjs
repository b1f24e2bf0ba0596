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
// Entries built a second time, as NAME-relaxed.wasm, with relaxed SIMD (fused multiply-add) on;
// the loader takes that build where the runtime compiles it (wasm-loader.ts).
const RELAXED_ENTRIES = new Set(['sketch']);
if (fs.existsSync(wasmSrc)) {
  const asc = path.join(root, 'node_modules/assemblyscript/bin/asc.js');
  for (const f of fs.readdirSync(wasmSrc)) {
    if (!f.endsWith('.ts') || f.startsWith('_') || f.endsWith('.d.ts')) continue;
    const name = f.replace(/\.ts$/, '');
    const src = path.join(wasmSrc, f);
    const builds = [[`${name}.wasm`, 'simd']];
    if (RELAXED_ENTRIES.has(name)) builds.push([`${name}-relaxed.wasm`, 'simd,relaxed-simd']);
    for (const [file, features] of builds) {
      const out = path.join(dist, 'wasm', file);
      if (fs.existsSync(out) && newestMtime(wasmSrc) <= fs.statSync(out).mtimeMs) continue;
      // The preview cube's memory is shared: the first pass's workers write into it directly.
      const memoryFlags = SHARED_MEMORY_ENTRIES.has(name)
        ? ['--enable', `${features},threads`, '--sharedMemory', '--maximumMemory', '65536']
        : ['--enable', features];
      execFileSync(process.execPath, [asc, src, '-o', out, '-O3', '--noAssert', ...memoryFlags,
        '--runtime', 'stub', '--importMemory', '--initialMemory', '1'], { stdio: 'inherit', cwd: root });
    }
  }
}

function newestMtime(dir) {
  return Math.max(...fs.readdirSync(dir).map((f) => fs.statSync(path.join(dir, f)).mtimeMs));
}

// 2. Bundles. Packages are bundled in: resolving and loading some twenty ES modules from
//    node_modules took ~0.2 s of every command's start. h5wasm stays outside (it loads its .wasm
//    beside itself), as do the optional native parts of ws and the test-only browser driver.
//    Code used by several entries, or loaded on demand (export, serve), goes to dist/chunks.
const BUNDLE_EXTERNAL = ['h5wasm', 'h5wasm/*', 'h5wasm-plugins', 'h5wasm-plugins/*', 'bufferutil', 'utf-8-validate', 'electron', 'playwright-core'];
const bundleOptions = {
  bundle: true,
  platform: 'node',
  format: 'esm',
  target: 'node20',
  external: BUNDLE_EXTERNAL,
  splitting: true,
  outExtension: { '.js': '.mjs' },
  // Bundled CommonJS packages require Node's built-ins: give the ES modules a require.
  banner: { js: "import { createRequire as __scanfoldCreateRequire } from 'node:module'; const require = __scanfoldCreateRequire(import.meta.url);" },
  chunkNames: 'chunks/[name]-[hash]',
  sourcemap: true,
  logLevel: 'warning',
};
const entries = {
  'cli': 'src-main/cli/entry.ts',
  'tile-worker': 'src-main/workers/tile-worker.ts',
};
fs.rmSync(path.join(dist, 'chunks'), { recursive: true, force: true });
await build({
  ...bundleOptions,
  entryPoints: Object.fromEntries(Object.entries(entries).map(([k, p]) => [k, path.join(root, p)])),
  outdir: dist,
});
// `npm run bench`, in a folder of its own that is not shipped (electron-builder.yml leaves it out).
fs.rmSync(path.join(dist, 'bench'), { recursive: true, force: true });
await build({
  ...bundleOptions,
  entryPoints: { bench: path.join(root, 'bench/main.ts'), 'products-worker': path.join(root, 'bench/products-worker.ts') },
  outdir: path.join(dist, 'bench'),
});

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
  // The chart library's own styles (the scree chart), beside ours.
  fs.copyFileSync(path.join(root, 'node_modules/uplot/dist/uPlot.min.css'), path.join(out, 'uplot.css'));
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
