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
  | 'short-file'
  | 'bad-dtype'
  | 'bad-shape'
  | 'bad-rank'
  | 'missing-filter'
  | 'not-a-dataset'
  | 'unsupported';

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
