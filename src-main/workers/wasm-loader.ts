import fs from 'node:fs';
import path from 'node:path';
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

function projectRoot(): string {
  const start = path.dirname(fileURLToPath(import.meta.url));
  for (let dir = start; ; dir = path.dirname(dir)) {
    if (fs.existsSync(path.join(dir, 'package.json'))) return dir;
    if (path.dirname(dir) === dir) {
      throw new Error(`cannot find the Scanfold project (a directory holding package.json) above ${start}: run npm run build from the project`);
    }
  }
}
