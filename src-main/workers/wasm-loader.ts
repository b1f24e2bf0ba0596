import fs from 'node:fs';
import path from 'node:path';
import v8 from 'node:v8';
import { isMainThread } from 'node:worker_threads';
import { fileURLToPath } from 'node:url';

const compiled = new Map<string, WebAssembly.Module>();

/**
 * Compiles dist/wasm/NAME.wasm of this project. The project root is the nearest directory above
 * this file that holds package.json, which is right both for the source (src-main/workers under
 * vitest) and for the bundles in dist/.
 */
export function loadWasmModule(name: string): WebAssembly.Module {
  const cached = compiled.get(name);
  if (cached) return cached;
  const root = projectRoot();
  const file = path.join(root, 'dist', 'wasm', `${name}.wasm`);
  if (!fs.existsSync(file)) {
    throw new Error(`WebAssembly kernel ${file} is missing: run npm run build`);
  }
  const module = new WebAssembly.Module(fs.readFileSync(file));
  compiled.set(name, module);
  return module;
}

let relaxedFlagTried = false;

/**
 * Relaxed SIMD (fused multiply-add) for the NAME-relaxed.wasm builds: on in Node 22 and later and
 * in Electron; Node 20's V8 has it behind a flag, which this sets, once and only on the main
 * thread (V8 flags are process-wide): call it before starting workers, which then compile the
 * relaxed builds as well. Does nothing where they already compile or were turned off.
 */
export function enableRelaxedSimd(): void {
  if (relaxedFlagTried || !isMainThread || process.env.SCANFOLD_WASM_RELAXED === 'off') return;
  relaxedFlagTried = true;
  const file = path.join(projectRoot(), 'dist', 'wasm', 'sketch-relaxed.wasm');
  if (!fs.existsSync(file) || WebAssembly.validate(fs.readFileSync(file))) return;
  v8.setFlagsFromString('--experimental-wasm-relaxed-simd');
}

/**
 * The relaxed-SIMD build of NAME (dist/wasm/NAME-relaxed.wasm) where this runtime compiles it
 * (see enableRelaxedSimd), else the plain build. SCANFOLD_WASM_RELAXED=off keeps the plain build.
 */
export function loadFastestWasmModule(name: string): WebAssembly.Module {
  const key = `${name}-relaxed`;
  const cached = compiled.get(key);
  if (cached) return cached;
  const file = path.join(projectRoot(), 'dist', 'wasm', `${key}.wasm`);
  if (process.env.SCANFOLD_WASM_RELAXED === 'off' || !fs.existsSync(file)) return loadWasmModule(name);
  enableRelaxedSimd();
  const bytes = fs.readFileSync(file);
  if (!WebAssembly.validate(bytes)) return loadWasmModule(name);
  const module = new WebAssembly.Module(bytes);
  compiled.set(key, module);
  return module;
}

function projectRoot(): string {
  const start = path.dirname(fileURLToPath(import.meta.url));
  for (let dir = start; ; dir = path.dirname(dir)) {
    if (fs.existsSync(path.join(dir, 'package.json'))) return dir;
    if (path.dirname(dir) === dir) {
      throw new Error(`cannot find the Scanfold project (a directory holding package.json) above ${start}: run npm run build from the project`);
    }
  }
}
