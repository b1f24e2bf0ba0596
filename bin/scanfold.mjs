#!/usr/bin/env node
// Entry of the `scanfold` command: runs the bundled CLI built by `npm run build` (run on install).
import fs from 'node:fs';
import { fileURLToPath } from 'node:url';

const cli = fileURLToPath(new URL('../dist/cli.mjs', import.meta.url));
if (!fs.existsSync(cli)) {
  process.stderr.write(`scanfold: ${cli} is missing; run \`npm run build\` in the Scanfold folder first\n`);
  process.exit(1);
}
await import(cli);
