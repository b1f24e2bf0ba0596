/**
 * An error caused by what the user gave us (a file, a flag, a shape), as opposed to a bug.
 * The CLI maps it to exit status 2; the UI shows its message as is. Messages name the
 * file and say what was expected.
 */
export class InputError extends Error {
  override readonly name = 'InputError';
  constructor(message: string, readonly code: InputErrorCode = 'bad-input') {
    super(message);
  }
}

export type InputErrorCode =
  | 'bad-input'
  | 'missing-file'
  | 'unreadable'
  | 'not-a-file'
  | 'bad-output'
  | 'too-large'
  | 'bad-request'
  | 'ambiguous'
  | 'short-file'
  | 'bad-dtype'
  | 'bad-shape'
  | 'bad-rank'
  | 'missing-filter'
  | 'not-a-dataset'
  | 'unsupported'
  /** A session file that is damaged, or not one. */
  | 'bad-session'
  /** A session file written by a newer Scanfold. */
  | 'newer-session'
  /** Data whose fingerprint differs from the one a session recorded. */
  | 'different-data';

/**
 * Writing a result failed after the work was done (no space, a disk error, permission taken
 * away). The message is one line: what could not be written, why, and that nothing was left.
 */
export class OutputError extends Error {
  override readonly name = 'OutputError';
  constructor(message: string, readonly reason: string) {
    super(message);
  }
}

export function isOutputError(e: unknown): e is OutputError {
  return e instanceof Error && e.name === 'OutputError';
}

/** A job stopped because somebody asked it to. */
export class CancelledError extends Error {
  override readonly name = 'CancelledError';
  constructor(message = 'job cancelled') {
    super(message);
  }
}

export function isInputError(e: unknown): e is InputError {
  return e instanceof Error && e.name === 'InputError';
}
