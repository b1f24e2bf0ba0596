// The one way Scanfold writes a file the user named. The target's folder is resolved once
// (through symlinks and "..", as the system does); a private folder of our own (mode 0700,
// created with mkdtemp beside the target) holds the result while it is written, so nobody can
// plant a link on its name; the finished file is synced and renamed onto the target (the folder
// is named by machine and process, so a later write can remove one a killed writer left). Scanfold
// never removes a file it did not create, never writes over a file it reads (compared by
// device and inode, so links are seen through), never replaces a file the user may not write,
// and never replaces anything but a regular file.
import * as fs from 'node:fs';
import * as nodePath from 'node:path';
import os from 'node:os';
import { InputError, OutputError } from '../../src-shared/model/errors';
import { fmtBytes } from '../../src-shared/model/bytes';
import { errnoText, fileKindText, physicalPath, sameFile, type FileIdentity } from './input-file';

export interface OutputOptions {
  /** How the user named it, for messages ("--out"). */
  flag?: string;
  /** Files the command reads; the output may not be any of them. */
  protect?: readonly string[];
}

/** HDF5's metadata and attributes beside the result arrays, generously. */
const RESULT_OVERHEAD_BYTES = 256 * 1024;

/** A name part of at most this many UTF-8 bytes keeps temporary names under the usual 255-byte limit. */
const NAME_PART_BYTES = 120;

interface Pending {
  dir: string;
  dirId: FileIdentity;
  file: string;
  fileId: FileIdentity | null;
}

/** Temporary folders of this process not yet removed, removed at exit (only if still ours). */
const pending = new Set<Pending>();
let exitHookInstalled = false;

function installExitHook(): void {
  if (exitHookInstalled) return;
  exitHookInstalled = true;
  process.on('exit', () => {
    for (const p of pending) removeOurs(p);
  });
}

/** This machine, in the temporary folders' names (a folder shared by several machines holds folders of each). */
const HOST_TAG = os.hostname().replace(/[^A-Za-z0-9_-]/g, '').slice(0, 24) || 'host';

/**
 * Temporary folders a writer of the same target left behind when it was killed (a crash cannot
 * clean up): named by this machine and a process that no longer runs, owned by this user, and
 * holding at most the one file a writer puts there. Anything else is left alone.
 */
function removeStaleFolders(dir: string, base: string): void {
  const prefix = `.${base}.scanfold-${HOST_TAG}-`;
  let names: string[];
  try { names = fs.readdirSync(dir); } catch { return; }
  for (const name of names) {
    if (!name.startsWith(prefix)) continue;
    const m = /^(\d+)-[A-Za-z0-9]{6}$/.exec(name.slice(prefix.length));
    if (!m || isRunning(Number(m[1]))) continue;
    const folder = nodePath.join(dir, name);
    try {
      const st = fs.lstatSync(folder);
      if (!st.isDirectory() || (process.getuid && st.uid !== process.getuid())) continue;
      const inside = fs.readdirSync(folder);
      if (inside.length > 1 || inside.some((f) => f !== (base || 'result'))) continue;
      for (const f of inside) {
        const file = nodePath.join(folder, f);
        if (fs.lstatSync(file).isFile()) fs.unlinkSync(file);
      }
      fs.rmdirSync(folder);
    } catch {
      // gone meanwhile, or not ours to remove: leave it
    }
  }
}

function isRunning(pid: number): boolean {
  if (pid === process.pid) return true;
  try {
    process.kill(pid, 0);
    return true;
  } catch (e) {
    return (e as NodeJS.ErrnoException).code !== 'ESRCH';
  }
}

/** Remove our temporary file and folder, each only if it is still the one we created. */
function removeOurs(p: Pending): void {
  try {
    const st = fs.lstatSync(p.file);
    if (p.fileId && st.isFile() && sameFile(st, p.fileId)) fs.unlinkSync(p.file);
  } catch {
    // already gone
  }
  try {
    const st = fs.lstatSync(p.dir);
    if (st.isDirectory() && sameFile(st, p.dirId)) fs.rmdirSync(p.dir);
  } catch {
    // already gone, or not empty (then someone else put a file there: leave it)
  }
  pending.delete(p);
}

/**
 * An output file, checked and with its temporary file created. Call `write` once with a
 * function that fills the temporary file, or `discard` to give up; either way nothing but the
 * finished result is ever left behind.
 */
export class OutputFile {
  /** Where the result lands: the canonical path of the target (a symlink's final target). */
  readonly path: string;
  /** The path as the user gave it, for messages. */
  readonly requested: string;
  /** The temporary file, in a private folder beside `path`. */
  readonly tmpPath: string;
  private readonly tmp: Pending;
  private readonly flag: string;
  private readonly protectedPaths: string[] = [];
  private readonly protectedIds: (FileIdentity & { path: string })[] = [];
  private done = false;

  private constructor(requested: string, target: string, flag: string, protect: readonly string[]) {
    this.requested = requested;
    this.path = target;
    this.flag = flag;
    this.protect(protect);
    const dir = nodePath.dirname(target);
    const base = truncateUtf8(nodePath.basename(target), NAME_PART_BYTES);
    removeStaleFolders(dir, base);
    let tmpDir: string;
    try {
      tmpDir = fs.mkdtempSync(nodePath.join(dir, `.${base}.scanfold-${HOST_TAG}-${process.pid}-`));
    } catch (e) {
      throw new InputError(`${flag} ${requested}: cannot create a file in the folder ${dir} (${errnoText((e as NodeJS.ErrnoException).code)}); nothing was written`, 'bad-output');
    }
    const dirId = identity(fs.lstatSync(tmpDir));
    this.tmp = { dir: tmpDir, dirId, file: nodePath.join(tmpDir, base || 'result'), fileId: null };
    installExitHook();
    pending.add(this.tmp);
    try {
      const fd = fs.openSync(this.tmp.file, fs.constants.O_CREAT | fs.constants.O_EXCL | fs.constants.O_WRONLY, 0o666);
      try { this.tmp.fileId = identity(fs.fstatSync(fd)); } finally { fs.closeSync(fd); }
    } catch (e) {
      removeOurs(this.tmp);
      throw new InputError(`${flag} ${requested}: cannot create a file in the folder ${dir} (${errnoText((e as NodeJS.ErrnoException).code)}); nothing was written`, 'bad-output');
    }
    this.tmpPath = this.tmp.file;
  }

  /**
   * Check `out` and create its temporary file. Refuses a folder, a device, a FIFO, a socket, a
   * dangling symlink, a missing folder, a file the user may not write, and any file in
   * `protect`; a symlink to a regular file is written through (the link stays and its target
   * receives the result, as a shell's `>` does).
   */
  static create(out: unknown, options: OutputOptions = {}): OutputFile {
    const flag = options.flag ?? '--out';
    if (typeof out !== 'string' || out.trim() === '') throw new InputError(`${flag} needs a file name, such as results.h5`, 'bad-output');
    // eslint-disable-next-line no-control-regex
    if (/[\x00-\x1f\x7f]/.test(out)) throw new InputError(`${flag} ${JSON.stringify(out)}: the name holds control characters (a newline?); expected a plain file name`, 'bad-output');
    const requested = physicalPath(out);
    const target = resolveTarget(requested, flag);
    return new OutputFile(requested, target, flag, options.protect ?? []);
  }

  /** Add files the command reads (known only after opening the input); checked now and again before the rename. */
  protect(paths: readonly string[]): void {
    for (const p of paths) {
      const abs = physicalPath(p);
      if (!this.protectedPaths.includes(abs)) this.protectedPaths.push(abs);
    }
    this.checkNotAnInput();
  }

  /** Add files by identity (what the engine's readers opened, under whatever name). */
  protectIdentities(files: readonly (FileIdentity & { path: string })[]): void {
    this.protectedIds.push(...files);
    this.checkNotAnInput();
  }

  /**
   * Refuse now, before any pass, when the folder lacks room for about `bytes` of results (plus
   * HDF5's own overhead). The disk can still fill up during the pass; `write` reports that.
   */
  reserve(bytes: number): void {
    const dir = nodePath.dirname(this.path);
    let free: number;
    try {
      const st = fs.statfsSync(dir);
      free = st.bavail * st.bsize;
    } catch {
      return; // not knowable here; the write itself will tell
    }
    const need = Math.ceil(bytes * 1.1) + RESULT_OVERHEAD_BYTES;
    if (free < need) {
      throw new InputError(`${this.flag} ${this.requested}: the results need about ${fmtBytes(need)}, but the folder ${dir} has only ${fmtBytes(free)} free; nothing was written`, 'bad-output');
    }
  }

  /**
   * Fill the temporary file, sync it, check the target once more and rename the result onto it.
   * On any failure the temporary file is removed and a write failure becomes one line.
   */
  async write(fill: (tmpPath: string) => Promise<void> | void): Promise<string> {
    if (this.done) throw new Error(`OutputFile ${this.path}: already written or discarded`);
    try {
      await fill(this.tmpPath);
      const st = statOrNull(this.tmpPath, true);
      if (!st || !st.isFile() || !this.tmp.fileId || !sameFile(st, this.tmp.fileId)) {
        throw new OutputError(`could not write ${this.requested}: the temporary file ${this.tmpPath} was removed or replaced while writing`, 'temporary file replaced');
      }
      syncFile(this.tmpPath);
      // The target may have changed during a long pass: check it again just before the rename.
      const target = resolveTarget(this.requested, this.flag);
      if (target !== this.path) throw new InputError(`${this.flag} ${this.requested}: now names ${target}, not ${this.path} as when the command started; nothing was written`, 'bad-output');
      this.checkNotAnInput();
      const existing = statOrNull(this.path);
      if (existing) fs.chmodSync(this.tmpPath, existing.mode & 0o7777);
      fs.renameSync(this.tmpPath, this.path);
      this.done = true;
      removeOurs(this.tmp);
      syncFolder(nodePath.dirname(this.path));
      return this.path;
    } catch (e) {
      this.discard();
      throw this.asWriteFailure(e);
    }
  }

  /** Give up: remove the temporary file and folder (only if still ours). */
  discard(): void {
    if (this.done) return;
    this.done = true;
    removeOurs(this.tmp);
  }

  private checkNotAnInput(): void {
    const out = statOrNull(this.path);
    if (!out) return;
    const hit = (p: string, how: string) => new InputError(`${this.flag} ${this.requested}: is a file this command reads${how}; writing results there would destroy it. Choose another name`, 'bad-output');
    for (const p of this.protectedPaths) {
      const st = statOrNull(p);
      if (st && sameFile(st, out)) throw hit(p, p === this.path || p === this.requested ? '' : ` (the same file as ${p}, through a link)`);
    }
    for (const f of this.protectedIds) {
      if (sameFile(f, out)) throw hit(f.path, f.path === this.path ? '' : ` (read as ${f.path})`);
    }
  }

  private asWriteFailure(e: unknown): unknown {
    if (e instanceof InputError || e instanceof OutputError) return e;
    const reason = writeFailureReason(e);
    if (reason === null) return e;
    const left = statOrNull(this.tmpPath, true) ? `; the temporary file ${this.tmpPath} could not be removed` : '; nothing was left behind';
    return new OutputError(`could not write ${this.requested}: ${reason}${left}`, reason);
  }
}

function identity(st: fs.Stats): FileIdentity {
  return { dev: st.dev, ino: st.ino };
}

/** The first bytes of a name, whole characters only, at most `max` bytes of UTF-8. */
function truncateUtf8(name: string, max: number): string {
  let out = '';
  let bytes = 0;
  for (const ch of name) {
    const b = Buffer.byteLength(ch);
    if (bytes + b > max) break;
    out += ch;
    bytes += b;
  }
  return out;
}

/**
 * The regular file (or new name) that `requested` stands for, canonical: a symlink is followed
 * to its final target, the folder is resolved by the system (links and ".." included); anything
 * but a regular file the user may write, or a new name in an existing folder, is refused.
 */
function resolveTarget(requested: string, flag: string): string {
  // "x.h5/" names a folder to the system; writing "x.h5" instead would not be what was asked.
  if (/[\\/]$/.test(requested)) throw new InputError(`${flag} ${requested}: ends with a slash, so it names a folder; expected a file name such as results.h5`, 'bad-output');
  const lst = statOrNull(requested, true);
  if (lst?.isSymbolicLink()) {
    let target: string;
    try {
      target = fs.realpathSync.native(requested);
    } catch (e) {
      const code = (e as NodeJS.ErrnoException).code;
      throw new InputError(`${flag} ${requested}: is a symbolic link to ${readLinkText(requested)}, which ${code === 'ENOENT' ? 'does not exist' : `cannot be followed (${errnoText(code)})`}; give the name of a regular file or a new name`, 'bad-output');
    }
    return checkExisting(target, requested, flag);
  }
  if (lst) return checkExisting(fs.realpathSync.native(requested), requested, flag);
  let dir: string;
  try {
    dir = fs.realpathSync.native(nodePath.dirname(requested));
  } catch {
    throw new InputError(`${flag} ${requested}: the folder ${nodePath.dirname(requested)} does not exist`, 'bad-output');
  }
  const dst = statOrNull(dir);
  if (!dst?.isDirectory()) throw new InputError(`${flag} ${requested}: ${dir} is ${dst ? fileKindText(dst) : 'missing'}, not a folder`, 'bad-output');
  return nodePath.join(dir, nodePath.basename(requested));
}

function checkExisting(target: string, requested: string, flag: string): string {
  const st = statOrNull(target);
  if (!st) throw new InputError(`${flag} ${requested}: cannot be examined; expected a file name such as results.h5`, 'bad-output');
  if (st.isDirectory()) throw new InputError(`${flag} ${requested}: is a folder; expected a file name such as results.h5`, 'bad-output');
  if (!st.isFile()) throw new InputError(`${flag} ${requested}: is ${fileKindText(st)}, not a regular file; Scanfold only writes regular files, so give a file name such as results.h5`, 'bad-output');
  // Replacing by rename would get round the file's own permissions: honour them, and a file
  // made read-only for everyone stays so even for a user (root) whom the system would let write.
  try {
    fs.accessSync(target, fs.constants.W_OK);
    if ((st.mode & 0o222) === 0) throw new Error('read-only for everyone');
  } catch {
    throw new InputError(`${flag} ${requested}: exists and this user may not write it (read-only, or someone else's); Scanfold replaces only files you may write. Choose another name`, 'bad-output');
  }
  return target;
}

function readLinkText(p: string): string {
  try { return fs.readlinkSync(p); } catch { return 'somewhere'; }
}

function statOrNull(p: string, noFollow = false): fs.Stats | null {
  try {
    return noFollow ? fs.lstatSync(p) : fs.statSync(p);
  } catch {
    return null;
  }
}

function syncFile(p: string): void {
  const fd = fs.openSync(p, 'r+');
  try { fs.fsyncSync(fd); } finally { fs.closeSync(fd); }
}

/** Make the rename durable; some file systems refuse to sync a folder, which is harmless. */
function syncFolder(dir: string): void {
  try {
    const fd = fs.openSync(dir, 'r');
    try { fs.fsyncSync(fd); } finally { fs.closeSync(fd); }
  } catch {
    // not supported here
  }
}

const ERRNO_MESSAGES: [RegExp, string][] = [
  [/no space left on device/i, 'no space left on the device'],
  [/disk quota exceeded/i, 'disk quota exceeded'],
  [/permission denied|operation not permitted/i, 'permission denied'],
  [/read-only file system/i, 'read-only file system'],
  [/file too large/i, 'file too large for this file system or the process limit'],
  [/input\/output error/i, 'input/output error (is the disk failing?)'],
];

/**
 * Why a write failed, in one line, or null when `e` is not a write failure. Node reports an
 * errno code; HDF5 (through h5wasm) reports a stack of dozens of lines whose deepest entry
 * carries the system's message ("error message = 'No space left on device'").
 */
export function writeFailureReason(e: unknown): string | null {
  const code = (e as NodeJS.ErrnoException | null)?.code;
  if (typeof code === 'string' && /^E[A-Z]+$/.test(code)) return errnoText(code);
  const text = e instanceof Error ? e.message : String(e);
  for (const [re, reason] of ERRNO_MESSAGES) if (re.test(text)) return reason;
  const sys = /error message = '([^']*)'/.exec(text);
  if (sys) return sys[1].toLowerCase();
  if (/HDF5-DIAG|H5F|H5D|file write failed|unable to (write|flush|close)/i.test(text)) return 'the HDF5 library could not write the file';
  return null;
}
