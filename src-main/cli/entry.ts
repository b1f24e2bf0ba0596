// Entry of the bundled command line: starts the worker threads a data command will use, then
// loads the command line itself, so the two start-ups overlap (see engine/prestart.ts).
import os from 'node:os';
import { prestartWorkers, workersWanted } from '../engine/prestart';

/** Commands that read data through the engine's worker pool. */
const DATA_COMMANDS = new Set(['summary', 'image', 'com', 'calibrate', 'pattern', 'pca', 'kmeans', 'fit']);

const wanted = workersWanted(process.argv.slice(2), os.availableParallelism(), DATA_COMMANDS);
if (wanted !== null) prestartWorkers(wanted);
await import('./main');
