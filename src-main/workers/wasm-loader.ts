import fs from 'node:fs';
import path from 'node:path';
import v8 from 'node:v8';
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
 * The relaxed-SIMD build of NAME (dist/wasm/NAME-relaxed.wasm: fused multiply-add) where this
 * runtime compiles it, else the plain build. Node 20's V8 has relaxed SIMD behind a flag, which is
 * set here (process-wide, once) when the build does not validate without it; later runtimes
 * have it on. SCANFOLD_WASM_RELAXED=off keeps the plain build.
 */
export function loadFastestWasmModule(name: string): WebAssembly.Module {
  const key = `${name}-relaxed`;
  const cached = compiled.get(key);
  if (cached) return cached;
  const file = path.join(projectRoot(), 'dist', 'wasm', `${key}.wasm`);
  if (process.env.SCANFOLD_WASM_RELAXED === 'off' || !fs.existsSync(file)) return loadWasmModule(name);
  const bytes = fs.readFileSync(file);
  if (!WebAssembly.validate(bytes) && !relaxedFlagTried) {
    relaxedFlagTried = true;
    v8.setFlagsFromString('--experimental-wasm-relaxed-simd');
  }
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
