// `npm run bench`: the throughput benchmark on the 2 GiB 'large' sample (generated once into
// bench-data/), beside a plain read and NumPy. Kept out of src-main so the CLI and the packaged
// application carry none of it.
import path from 'node:path';
import { parseArgs } from 'node:util';
import { projectRoot } from '../src-main/engine/paths';
import { runBenchmark } from './first-pass.bench';

const { values } = parseArgs({ options: { dir: { type: 'string' }, workers: { type: 'string' }, only: { type: 'string' } }, strict: true });
const dir = path.resolve(values.dir ?? path.join(projectRoot(), 'bench-data'));
const workers = values.workers === undefined ? 2 : Number(values.workers);
if (!Number.isInteger(workers) || workers < 1) {
  console.error(`bench: --workers ${values.workers}: expected a whole number ≥ 1`);
  process.exit(2);
}
const PARTS = ['first-pass', 'analyses', 'commands', 'pca', 'products', 'app'] as const;
const only = values.only?.split(',');
const unknown = only?.filter((p) => !(PARTS as readonly string[]).includes(p)) ?? [];
if (unknown.length) {
  console.error(`bench: --only ${values.only}: expected a comma-separated list of ${PARTS.join(', ')}`);
  process.exit(2);
}
await runBenchmark({ dir, workers, parts: new Set(only ?? PARTS) });
