// The one way Scanfold writes a file the user named. A result is written to a temporary file
// of our own, created exclusively in the target's folder before any work starts, then synced
// and renamed onto the target. Scanfold never removes or replaces a file it did not create,
// never writes over a file it reads (compared by device and inode, so symlinks and hard links
// are seen through), and never replaces anything but a regular file.
import * as fs from 'node:fs';
import * as nodePath from 'node:path';
import { randomBytes } from 'node:crypto';
import { InputError, OutputError } from '../../src-shared/model/errors';
import { errnoText, fileKindText, sameFile, type FileIdentity } from './input-file';
import { fmtBytes } from '../../src-shared/model/bytes';

export interface OutputOptions {
  /** How the user named it, for messages ("--out"). */
  flag?: string;
  /** Files the command reads; the output may not be any of them. */
  protect?: readonly string[];
}

/** HDF5's metadata and attributes beside the result arrays, generously. */
const RESULT_OVERHEAD_BYTES = 256 * 1024;

/** Temporary files of this process not yet renamed or removed, removed at exit. */
const pending = new Map<string, FileIdentity>();
let exitHookInstalled = false;

function installExitHook(): void {
  if (exitHookInstalled) return;
  exitHookInstalled = true;
  process.on('exit', () => {
    for (const [tmp, id] of pending) removeIfOurs(tmp, id);
  });
}

/** Remove `tmp` only if it is still the file we created. */
function removeIfOurs(tmp: string, id: FileIdentity): void {
  try {
    const st = fs.lstatSync(tmp);
    if (st.isFile() && sameFile(st, id)) fs.unlinkSync(tmp);
  } catch {
    // already gone
  }
  pending.delete(tmp);
}

/**
 * An output file, checked and with its temporary file created. Call `write` once with a
 * function that fills the temporary file, or `discard` to give up; either way nothing but the
 * finished result is ever left behind.
 */
export class OutputFile {
  /** Where the result lands: the path given, or the final target of a symlink given. */
  readonly path: string;
  /** The path as the user gave it (absolute), for messages. */
  readonly requested: string;
  /** The temporary file, in the same folder as `path`. */
  readonly tmpPath: string;
  private readonly tmpIdentity: FileIdentity;
  private readonly flag: string;
  private readonly protectedPaths: string[] = [];
  private done = false;

  private constructor(requested: string, target: string, flag: string, protect: readonly string[]) {
    this.requested = requested;
    this.path = target;
    this.flag = flag;
    this.protect(protect);
    const dir = nodePath.dirname(target);
    const base = nodePath.basename(target);
    // A name nobody else uses: hidden, random, and created with O_EXCL so an existing file is never touched.
    for (let attempt = 0; ; attempt++) {
      const tmp = nodePath.join(dir, `.${base.slice(0, 180)}.${randomBytes(6).toString('hex')}.scanfold-partial`);
      let fd: number;
      try {
        fd = fs.openSync(tmp, fs.constants.O_CREAT | fs.constants.O_EXCL | fs.constants.O_WRONLY, 0o666);
      } catch (e) {
        const code = (e as NodeJS.ErrnoException).code;
        if (code === 'EEXIST' && attempt < 8) continue;
        throw new InputError(`${flag} ${requested}: cannot create a file in the folder ${dir} (${errnoText(code)}); nothing was written`, 'bad-output');
      }
      try {
        const st = fs.fstatSync(fd);
        this.tmpPath = tmp;
        this.tmpIdentity = { dev: st.dev, ino: st.ino };
      } finally {
        fs.closeSync(fd);
      }
      installExitHook();
      pending.set(this.tmpPath, this.tmpIdentity);
      return;
    }
  }

  /**
   * Check `out` and create its temporary file. Refuses a folder, a device, a FIFO, a socket, a
   * dangling symlink, a missing folder and any file in `protect`; a symlink to a regular file is
   * written through (the link stays and its target receives the result, as a shell's `>` does).
   */
  static create(out: unknown, options: OutputOptions = {}): OutputFile {
    const flag = options.flag ?? '--out';
    if (typeof out !== 'string' || out.trim() === '') throw new InputError(`${flag} needs a file name, such as results.h5`, 'bad-output');
    const requested = nodePath.resolve(out);
    const target = resolveTarget(requested, flag);
    return new OutputFile(requested, target, flag, options.protect ?? []);
  }

  /** Add files the command reads (known only after opening the input); checked now and again before the rename. */
  protect(paths: readonly string[]): void {
    for (const p of paths) {
      const abs = nodePath.resolve(p);
      if (!this.protectedPaths.includes(abs)) this.protectedPaths.push(abs);
    }
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
      this.assertTmpIsOurs();
      syncFile(this.tmpPath);
      // The target may have changed during a long pass: check it again just before the rename.
      const target = resolveTarget(this.requested, this.flag);
      if (target !== this.path) throw new InputError(`${this.flag} ${this.requested}: changed to point at ${target} while the command ran; nothing was written`, 'bad-output');
      this.checkNotAnInput();
      const existing = statOrNull(this.path);
      if (existing) fs.chmodSync(this.tmpPath, existing.mode & 0o7777);
      fs.renameSync(this.tmpPath, this.path);
      pending.delete(this.tmpPath);
      this.done = true;
      syncFolder(nodePath.dirname(this.path));
      return this.path;
    } catch (e) {
      this.discard();
      throw this.asWriteFailure(e);
    }
  }

  /** Give up: remove the temporary file (only if it is still ours). */
  discard(): void {
    if (this.done) return;
    this.done = true;
    removeIfOurs(this.tmpPath, this.tmpIdentity);
  }

  private assertTmpIsOurs(): void {
    const st = statOrNull(this.tmpPath, true);
    if (!st || !st.isFile() || !sameFile(st, this.tmpIdentity)) {
      throw new OutputError(`could not write ${this.requested}: the temporary file ${this.tmpPath} was removed or replaced while writing; nothing was written`, 'temporary file replaced');
    }
  }

  private checkNotAnInput(): void {
    const out = statOrNull(this.path);
    if (!out) return;
    for (const p of this.protectedPaths) {
      const st = statOrNull(p);
      if (st && sameFile(st, out)) {
        const how = p === this.path ? '' : ` (the same file as ${p}, through a link)`;
        throw new InputError(`${this.flag} ${this.requested}: is a file this command reads${how}; writing results there would destroy it. Choose another name`, 'bad-output');
      }
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

/**
 * The regular file (or new name) that `requested` stands for: a symlink is followed to its
 * final target; anything but a regular file or a new name in an existing folder is refused.
 */
function resolveTarget(requested: string, flag: string): string {
  let target = requested;
  const lst = statOrNull(requested, true);
  if (lst?.isSymbolicLink()) {
    try {
      target = fs.realpathSync(requested);
    } catch (e) {
      const code = (e as NodeJS.ErrnoException).code;
      throw new InputError(`${flag} ${requested}: is a symbolic link to ${readLinkText(requested)}, which ${code === 'ENOENT' ? 'does not exist' : `cannot be followed (${errnoText(code)})`}; give the name of a regular file or a new name`, 'bad-output');
    }
  }
  const st = statOrNull(target);
  if (st) {
    if (st.isDirectory()) throw new InputError(`${flag} ${requested}: is a folder; expected a file name such as results.h5`, 'bad-output');
    if (!st.isFile()) throw new InputError(`${flag} ${requested}: is ${fileKindText(st)}, not a regular file; Scanfold only writes regular files, so give a file name such as results.h5`, 'bad-output');
    return target;
  }
  const dir = nodePath.dirname(target);
  const dst = statOrNull(dir);
  if (!dst) throw new InputError(`${flag} ${requested}: the folder ${dir} does not exist`, 'bad-output');
  if (!dst.isDirectory()) throw new InputError(`${flag} ${requested}: ${dir} is ${fileKindText(dst)}, not a folder`, 'bad-output');
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
