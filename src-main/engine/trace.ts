/**
 * SCANFOLD_TRACE=1 prints each phase of a command on stderr with the milliseconds since the
 * process started (Node's performance clock starts there): what a developer reads to see where
 * a user's wait goes. Off, it costs one branch.
 */
const on = typeof process !== 'undefined' && !!process.env.SCANFOLD_TRACE;

export function trace(what: string): void {
  if (on) process.stderr.write(`trace ${performance.now().toFixed(1)} ms  ${what}\n`);
}
