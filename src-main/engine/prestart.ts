import { Worker } from 'node:worker_threads';
import { distFile } from './paths';
import { enableRelaxedSimd } from '../workers/wasm-loader';

/**
 * Worker threads started before a command's own modules load. A worker takes about 90 ms to
 * boot and load its module, about as long as the main thread takes to load the command line;
 * started first, the two overlap and a fresh `scanfold` process reads its first tile that much
 * sooner. A pool adopts them as it would spawn its own (see WorkerPool). They are unreferenced
 * until adopted, so a command that ends early (a flag error, --help) still exits at once; one
 * that fails before adoption is dropped.
 */
const waiting: { worker: Worker; dead: boolean }[] = [];
let prestartedFile: string | null = null;

export function prestartWorkers(count: number): void {
  if (!Number.isInteger(count) || count < 1) return;
  // Process-wide V8 flags go before any worker starts (see enableRelaxedSimd).
  enableRelaxedSimd();
  prestartedFile = distFile('tile-worker.mjs');
  for (let i = 0; i < count; i++) {
    const entry = { worker: new Worker(prestartedFile), dead: false };
    entry.worker.unref();
    entry.worker.once('error', () => { entry.dead = true; });
    entry.worker.once('exit', () => { entry.dead = true; });
    waiting.push(entry);
  }
}

/** A prestarted, still running worker of `workerFile`, now referenced; null when none is left. */
export function adoptPrestarted(workerFile: string): Worker | null {
  if (workerFile !== prestartedFile) return null;
  for (let entry = waiting.shift(); entry; entry = waiting.shift()) {
    if (entry.dead) continue;
    entry.worker.ref();
    return entry.worker;
  }
  return null;
}

/** Stops the prestarted workers no pool took (a pool smaller than guessed). */
export function dropPrestarted(): void {
  for (const entry of waiting.splice(0)) void entry.worker.terminate();
}

/**
 * How many workers a command will want, read from its arguments before they are parsed: the
 * --workers flag, else the machine's cores (the engine's default). Null for what starts no
 * engine (no command, help, version, or a command that does not read data).
 */
export function workersWanted(argv: readonly string[], cores: number, dataCommands: ReadonlySet<string>): number | null {
  const [cmd, ...rest] = argv;
  if (!cmd || !dataCommands.has(cmd) || rest.some((a) => a === '--help' || a === '-h')) return null;
  for (let i = 0; i < rest.length; i++) {
    const a = rest[i];
    const value = a === '--workers' ? rest[i + 1] : a.startsWith('--workers=') ? a.slice('--workers='.length) : undefined;
    if (value !== undefined) {
      const n = Number(value);
      return Number.isInteger(n) && n >= 1 ? Math.min(n, cores) : null;
    }
  }
  return cores;
}
