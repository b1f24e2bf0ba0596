import fs from 'node:fs';
import { createRequire } from 'node:module';
import path from 'node:path';
import { pathToFileURL } from 'node:url';
import { fileKindText, physicalPath } from './input-file';
// Loaded on first use: readers of raw and .npy data, and their worker threads, never pay for it.
import type h5wasmDefault from 'h5wasm/node';

export type H5Lib = typeof h5wasmDefault;
export type H5Module = Awaited<typeof h5wasmDefault.ready>;

export interface H5Runtime {
  h5wasm: H5Lib;
  Module: H5Module;
  /** The directory HDF5 loads compression plugins from, or null when none was found. */
  pluginDir: string | null;
}

/** Filters compiled into the HDF5 library that h5wasm ships (szip via libaec: read back from an h5py file). */
const BUILTIN_FILTERS = new Map<number, string>([
  [1, 'deflate'], [2, 'shuffle'], [3, 'fletcher32'], [4, 'szip'], [5, 'nbit'], [6, 'scaleoffset'],
]);

/**
 * h5wasm-plugins file stem → HDF5 registered filter id (ids from The HDF Group's registry;
 * bitgroom and granular bitround from memory).
 */
const PLUGIN_FILTERS: Record<string, { id: number; name: string }> = {
  lzf: { id: 32000, name: 'lzf' },
  blosc: { id: 32001, name: 'blosc' },
  bz2: { id: 307, name: 'bzip2' },
  lz4: { id: 32004, name: 'lz4' },
  bshuf: { id: 32008, name: 'bitshuffle' },
  zfp: { id: 32013, name: 'zfp' },
  zstd: { id: 32015, name: 'zstd' },
  jpeg: { id: 32019, name: 'jpeg' },
  bitgroom: { id: 32022, name: 'bitgroom' },
  bitround: { id: 32023, name: 'bitround' },
  blosc2: { id: 32026, name: 'blosc2' },
};

/** Registered filters we have no decoder for, named so that the refusal says what the file needs. */
const OTHER_KNOWN_FILTERS = new Map<number, string>([
  [32017, 'sz'], [32018, 'fcidecomp'], [32024, 'sz3'],
]);

const FILTER_NAMES = new Map<number, string>([
  ...BUILTIN_FILTERS,
  ...Object.values(PLUGIN_FILTERS).map((f) => [f.id, f.name] as [number, string]),
  ...OTHER_KNOWN_FILTERS,
]);

let runtime: Promise<H5Runtime> | null = null;

export interface FileOpen {
  /** The path HDF5 asked for, made absolute without folding ".." (the system resolves it). */
  path: string;
  /** Device and inode of what was opened. */
  dev?: number;
  ino?: number;
  /** Why the open failed: an errno code, or what the file was when not a regular file. */
  failed?: string;
}

let openLog: FileOpen[] | null = null;
/** Every regular file HDF5 opened in this thread, by device:inode. */
const opened = new Map<string, { path: string; dev: number; ino: number }>();

/** Every regular file HDF5 has opened in this thread: inputs, their external data, virtual sources. */
export function filesOpenedByHdf5(): { path: string; dev: number; ino: number }[] {
  return [...opened.values()];
}

/**
 * h5wasm's Node build reads the real disk through Node's fs module, so wrapping fs.openSync
 * sees every file HDF5 touches on our behalf: the external files that hold a dataset's raw
 * data, the sources of a virtual dataset, and those it looked for and did not find. Each is
 * opened without blocking and must be a regular file (a FIFO named as external data would
 * otherwise hang the read forever); its identity is kept so no output can replace it.
 */
function installOpenLog(skipDir: string | null): void {
  const original = fs.openSync;
  const wrapped = function (this: unknown, ...args: Parameters<typeof fs.openSync>) {
    const log = openLog;
    const p = typeof args[0] === 'string' ? physicalPath(args[0]) : null;
    const own = p !== null && skipDir !== null && (p === skipDir || p.startsWith(skipDir + path.sep));
    if (p === null || own) return original.apply(this, args);
    if (typeof args[1] === 'number') args[1] |= fs.constants.O_NONBLOCK ?? 0;
    let fd: number;
    try {
      fd = original.apply(this, args);
    } catch (e) {
      log?.push({ path: p, failed: (e as NodeJS.ErrnoException).code ?? 'error' });
      throw e;
    }
    const st = fs.fstatSync(fd);
    if (!st.isFile()) {
      fs.closeSync(fd);
      log?.push({ path: p, failed: fileKindText(st) });
      throw Object.assign(new Error(`${p} is ${fileKindText(st)}, not a regular file`), { code: 'EINVAL' });
    }
    opened.set(`${st.dev}:${st.ino}`, { path: p, dev: st.dev, ino: st.ino });
    log?.push({ path: p, dev: st.dev, ino: st.ino });
    return fd;
  };
  (fs as { openSync: typeof fs.openSync }).openSync = wrapped as typeof fs.openSync;
}

/** Run `fn` and return, beside its result or error, every file HDF5 opened or failed to open meanwhile. */
export function withFileOpenLog<T>(fn: () => T): { result?: T; error?: unknown; opens: FileOpen[] } {
  const outer = openLog;
  const log: FileOpen[] = [];
  openLog = log;
  try {
    return { result: fn(), opens: log };
  } catch (error) {
    return { error, opens: log };
  } finally {
    openLog = outer;
    outer?.push(...log);
  }
}
let availableFilterIds: Set<number> | null = null;

/**
 * The h5wasm module of this thread (each worker thread has its own module graph, hence
 * its own instance), initialised once: errors throw instead of returning garbage, and the
 * compression plugins from h5wasm-plugins are on the search path.
 */
export function getH5(): Promise<H5Runtime> {
  runtime ??= initialise().catch((e) => {
    runtime = null;
    throw e;
  });
  return runtime;
}

async function initialise(): Promise<H5Runtime> {
  const h5wasm: H5Lib = (await import('h5wasm/node')).default;
  const Module = await h5wasm.ready;
  // Without it a failed read leaves the output buffer as it was and reports nothing.
  Module.activate_throwing_error_handler();
  // The node build reads the real disk (NODERAWFS), so HDF5 can load the plugins where the
  // package keeps them. The compiled-in default paths are dropped: a native plugin found there
  // on the user's machine cannot load into WebAssembly and would turn a read into an error.
  for (let n = Module.get_plugin_search_paths().length; n > 0; n--) Module.remove_plugin_search_path(0);
  const pluginDir = findPluginDir();
  const ids = new Set(BUILTIN_FILTERS.keys());
  if (pluginDir) {
    Module.insert_plugin_search_path(pluginDir, 0);
    for (const file of fs.readdirSync(pluginDir)) {
      const m = /^libH5Z(\w+)\.so$/.exec(file);
      const known = m ? PLUGIN_FILTERS[m[1]] : undefined;
      if (known) ids.add(known.id);
    }
  }
  availableFilterIds = ids;
  installOpenLog(pluginDir);
  return { h5wasm, Module, pluginDir };
}

/**
 * Where h5wasm-plugins keeps its .so files. Resolved from this file first (source tree or an
 * esbuild bundle in dist/ with packages external), then from the working directory;
 * SCANFOLD_H5_PLUGIN_DIR overrides both for installs where node_modules sits elsewhere.
 */
function findPluginDir(): string | null {
  const override = process.env.SCANFOLD_H5_PLUGIN_DIR;
  if (override && fs.existsSync(override)) return path.resolve(override);
  const bases: string[] = [];
  try {
    if (import.meta.url) bases.push(import.meta.url);
  } catch {
    // import.meta is empty when bundled to CommonJS; the working directory still works.
  }
  bases.push(pathToFileURL(path.join(process.cwd(), 'package.json')).href);
  for (const base of bases) {
    try {
      const pkg = createRequire(base).resolve('h5wasm-plugins/package.json');
      const dir = path.join(path.dirname(pkg), 'plugins');
      if (fs.existsSync(dir)) return dir;
    } catch {
      // not resolvable from this base; try the next
    }
  }
  return null;
}

/** Our short name for an HDF5 filter id; the name stored in the file when the id is not one we know. */
export function filterName(id: number, storedName?: string): string {
  const known = FILTER_NAMES.get(id);
  if (known) return known;
  const stored = storedName?.trim();
  return stored ? stored : `filter-${id}`;
}

/**
 * Whether this thread's h5wasm can decode a filter, given by HDF5 id or by our short name.
 * Valid once getH5() has resolved (the plugin set is known only then).
 */
export function isFilterAvailable(filter: number | string): boolean {
  if (!availableFilterIds) throw new Error('isFilterAvailable: call getH5() first');
  let id: number | undefined;
  if (typeof filter === 'number') {
    id = filter;
  } else {
    // h5py calls deflate 'gzip'.
    const name = filter.toLowerCase() === 'gzip' ? 'deflate' : filter.toLowerCase();
    for (const [k, v] of FILTER_NAMES) if (v === name) id = k;
  }
  return id !== undefined && availableFilterIds.has(id);
}

/** Names of every filter this thread can decode, for messages. */
export function availableFilterNames(): string[] {
  if (!availableFilterIds) throw new Error('availableFilterNames: call getH5() first');
  return [...availableFilterIds].map((id) => filterName(id)).sort();
}

/**
 * HDF5's error stack, as the throwing handler reports it, is dozens of lines; keep the
 * distinct one-line reasons (deepest last) so a message stays readable.
 */
export function briefHdf5Error(e: unknown): string {
  const text = e instanceof Error ? e.message : String(e);
  const reasons: string[] = [];
  for (const m of text.matchAll(/ in [\w.]+\(\): ([^\n]+)/g)) {
    const reason = m[1].trim();
    if (!reasons.includes(reason)) reasons.push(reason);
  }
  if (reasons.length === 0) return text.split('\n')[0].slice(0, 300);
  return reasons.slice(-3).join('; ');
}
