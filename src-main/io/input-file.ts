// The one way Scanfold opens a file the user named for reading: datasets, masks, the files an
// HDF5 dataset draws its data from. It never blocks (a named pipe would wait forever for a
// writer), refuses anything that is not a regular file, and says in plain words why.
import * as fs from 'node:fs';
import * as nodePath from 'node:path';
import { InputError } from '../../src-shared/model/errors';

export interface OpenedFile {
  fd: number;
  /** Absolute path. */
  path: string;
  size: number;
  /** Device and inode: the file's identity through symlinks and hard links. */
  identity: FileIdentity;
}

export interface FileIdentity {
  dev: number;
  ino: number;
}

export function sameFile(a: FileIdentity, b: FileIdentity): boolean {
  return a.dev === b.dev && a.ino === b.ino;
}

/** What a non-regular file is, in words a user knows. */
/** Whether two names lead to the same file (through links too); by name when either does not exist yet. */
export function sameFileAt(a: string, b: string): boolean {
  try {
    return sameFile(fs.statSync(a), fs.statSync(b));
  } catch {
    return physicalPath(a) === physicalPath(b);
  }
}

export function fileKindText(st: fs.Stats): string {
  if (st.isDirectory()) return 'a folder';
  if (st.isFIFO()) return 'a named pipe (FIFO)';
  if (st.isCharacterDevice()) return 'a character device';
  if (st.isBlockDevice()) return 'a block device (a disk)';
  if (st.isSocket()) return 'a socket';
  if (st.isSymbolicLink()) return 'a symbolic link';
  return 'not a regular file';
}

/** One line for an errno from opening or reading a file. */
export function errnoText(code: string | undefined): string {
  switch (code) {
    case 'ENOENT': return 'file not found';
    case 'ENOTDIR': return 'a folder on the path is a file';
    case 'EACCES': case 'EPERM': return 'permission denied';
    case 'ELOOP': return 'too many levels of symbolic links';
    case 'ENAMETOOLONG': return 'the name is too long';
    case 'EISDIR': return 'is a folder';
    case 'EEXIST': return 'a file of that name is in the way';
    case 'ENOSPC': return 'no space left on the device';
    case 'EDQUOT': return 'disk quota exceeded';
    case 'EROFS': return 'read-only file system';
    case 'EFBIG': return 'file too large for this file system or the process limit';
    case 'EIO': return 'input/output error (is the disk failing?)';
    case 'EMFILE': case 'ENFILE': return 'too many open files';
    case 'ENXIO': return 'no such device';
    default: return code ?? 'unknown error';
  }
}

/**
 * An absolute path that names the file the system would open for `p`: relative paths are put
 * under the working folder without folding "..", which the system resolves through symlinks
 * (so "link/../x" is the "x" beside the link's target, as in a shell), not as text.
 */
export function physicalPath(p: string): string {
  return nodePath.isAbsolute(p) ? p : nodePath.join(process.cwd(), '.') + nodePath.sep + p;
}

/** The canonical absolute name of an existing file (symlinks and ".." resolved by the system), or its physical path. */
export function canonicalPath(p: string): string {
  try {
    return fs.realpathSync.native(physicalPath(p));
  } catch {
    return physicalPath(p);
  }
}

// O_NONBLOCK keeps open() of a FIFO from waiting for a writer; it changes nothing for regular files.
const OPEN_FLAGS = fs.constants.O_RDONLY | (fs.constants.O_NONBLOCK ?? 0);

/**
 * Open a file for positional reads. `expected` says what it should have been ("a NumPy .npy
 * file"); every failure is an InputError that names the file and says why.
 */
export function openInputFile(path: string, expected: string): OpenedFile {
  const given = physicalPath(path);
  let file = given;
  let fd: number;
  try {
    fd = fs.openSync(given, OPEN_FLAGS);
  } catch (e) {
    const code = (e as NodeJS.ErrnoException).code;
    if (code === 'ENOENT' || code === 'ENOTDIR') {
      throw new InputError(`${file}: file not found; expected ${expected} at this path`, 'missing-file');
    }
    if (code === 'EACCES' || code === 'EPERM') {
      throw new InputError(`${file}: permission denied (this user may not read it); expected a readable ${stripArticle(expected)}`, 'unreadable');
    }
    throw new InputError(`${file}: cannot open it (${errnoText(code)}); expected ${expected}`, 'bad-input');
  }
  try {
    const st = fs.fstatSync(fd);
    if (!st.isFile()) {
      throw new InputError(`${file}: is ${fileKindText(st)}, not a regular file; expected ${expected}`, 'not-a-file');
    }
    file = canonicalPath(given);
    return { fd, path: file, size: st.size, identity: { dev: st.dev, ino: st.ino } };
  } catch (e) {
    fs.closeSync(fd);
    throw e;
  }
}

/** Check that a file can be opened as input (for libraries that open it by name themselves). */
export function checkInputFile(path: string, expected: string, check?: (f: OpenedFile) => void): OpenedFile {
  const f = openInputFile(path, expected);
  try {
    check?.(f);
    return f;
  } finally {
    fs.closeSync(f.fd);
  }
}

/**
 * Read exactly `bytes.byteLength` bytes at `position`, in pieces of at most `maxPiece`
 * bytes, straight into `bytes` (no staging buffer). A file that ends early is an input
 * problem (it was truncated after we checked its size), so it raises a 'short-file' error.
 */
export function readFullyAt(fd: number, bytes: Uint8Array, position: number, what: string, maxPiece = MAX_READ_PIECE): void {
  const total = bytes.byteLength;
  let done = 0;
  while (done < total) {
    const want = Math.min(maxPiece, total - done);
    let got: number;
    try {
      got = fs.readSync(fd, bytes, done, want, position + done);
    } catch (e) {
      const code = (e as NodeJS.ErrnoException).code;
      throw new InputError(`${what}: reading ${want} bytes at byte ${position + done} failed (${errnoText(code)}); expected a readable file`, 'bad-input');
    }
    if (got === 0) {
      throw new InputError(
        `${what}: file ended at byte ${position + done}; expected ${total - done} more bytes there (was the file truncated while open?)`,
        'short-file');
    }
    done += got;
  }
}

/** readSync takes at most ~2 GiB per call; 1 GiB pieces stay well inside that on every platform. */
export const MAX_READ_PIECE = 2 ** 30;

function stripArticle(s: string): string {
  return s.replace(/^(a|an) /, '');
}
