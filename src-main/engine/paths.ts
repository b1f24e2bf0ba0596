import fs from 'node:fs';
import path from 'node:path';
import { fileURLToPath } from 'node:url';

let cachedRoot: string | null = null;

/** The directory holding Scanfold's package.json, found from this file (source or bundle in dist/). */
export function projectRoot(): string {
  if (cachedRoot) return cachedRoot;
  let dir = path.dirname(fileURLToPath(import.meta.url));
  for (;;) {
    const pkg = path.join(dir, 'package.json');
    if (fs.existsSync(pkg) && JSON.parse(fs.readFileSync(pkg, 'utf8')).name === 'scanfold') return (cachedRoot = dir);
    const up = path.dirname(dir);
    if (up === dir) throw new Error('cannot find the Scanfold installation (package.json) above ' + fileURLToPath(import.meta.url));
    dir = up;
  }
}

/** A built artefact under dist/, with a clear message when the build has not run. */
export function distFile(name: string): string {
  const file = path.join(projectRoot(), 'dist', name);
  if (!fs.existsSync(file)) throw new Error(`${file} is missing: run \`npm run build\` first`);
  return file;
}
