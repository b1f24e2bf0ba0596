// Where the Electron runtime binary is, without importing the electron package (whose first
// require tries to download the binary when it is missing): the path its installer records in
// node_modules/electron/path.txt, when that file and the binary both exist; else null.
import fs from 'node:fs';
import path from 'node:path';

export function electronBinary(root) {
  const pkg = path.join(root, 'node_modules/electron');
  const recorded = path.join(pkg, 'path.txt');
  if (!fs.existsSync(recorded)) return null;
  const rel = fs.readFileSync(recorded, 'utf8').trim();
  if (!rel) return null;
  const bin = path.join(pkg, 'dist', rel);
  return fs.existsSync(bin) ? bin : null;
}
