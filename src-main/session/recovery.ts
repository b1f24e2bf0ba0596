// Autosave: the app's work is written every few seconds to a recovery file, beside its session
// file (".NAME.scanfold.h5.INSTANCE.recovery.h5"), or in Scanfold's state folder while the
// session has no file yet; each running engine has its own, so one never writes over another's
// (or over a crash's that is still to be offered). An index in the state folder lists the recovery files written, so the next start
// can offer them after a crash; only files in that index are ever removed.
import fs from 'node:fs';
import os from 'node:os';
import nodePath from 'node:path';

export interface RecoveryEntry {
  recovery: string;
  /** The session file it recovers, or null for work never saved. */
  session: string | null;
}

/** Scanfold's state folder: SCANFOLD_STATE_DIR, else $XDG_STATE_HOME/scanfold, else ~/.local/state/scanfold. */
export function defaultStateDir(): string {
  if (process.env.SCANFOLD_STATE_DIR) return process.env.SCANFOLD_STATE_DIR;
  const base = process.env.XDG_STATE_HOME || nodePath.join(os.homedir(), '.local', 'state');
  return nodePath.join(base, 'scanfold');
}

export class RecoveryIndex {
  /** Names this engine's recovery files apart from those of other instances (or of a crashed one). */
  readonly instance = `${Date.now().toString(36)}-${process.pid}`;

  constructor(readonly dir: string) {}

  isOwn(recovery: string): boolean {
    return nodePath.basename(recovery).includes(`.${this.instance}.`);
  }

  private get file(): string {
    return nodePath.join(this.dir, 'recovery-index.json');
  }

  /** Where the recovery file of `session` (absolute, or null) goes. */
  pathFor(session: string | null): string {
    if (session === null) return nodePath.join(this.dir, `unsaved.${this.instance}.recovery.h5`);
    return nodePath.join(nodePath.dirname(session), `.${nodePath.basename(session)}.${this.instance}.recovery.h5`);
  }

  entries(): RecoveryEntry[] {
    try {
      const list = JSON.parse(fs.readFileSync(this.file, 'utf8')) as unknown;
      if (!Array.isArray(list)) return [];
      return list.filter((e): e is RecoveryEntry => !!e && typeof e.recovery === 'string' && (e.session === null || typeof e.session === 'string'));
    } catch {
      return [];
    }
  }

  add(entry: RecoveryEntry): void {
    const list = this.entries().filter((e) => e.recovery !== entry.recovery);
    this.write([...list, entry]);
  }

  /** Remove a recovery file this index lists (and its entry); false for anything else. */
  remove(recovery: string): boolean {
    const list = this.entries();
    if (!list.some((e) => e.recovery === recovery)) return false;
    try { fs.unlinkSync(recovery); } catch { /* already gone */ }
    this.write(list.filter((e) => e.recovery !== recovery));
    return true;
  }

  private write(list: RecoveryEntry[]): void {
    fs.mkdirSync(this.dir, { recursive: true, mode: 0o700 });
    const tmp = `${this.file}.${process.pid}.tmp`;
    fs.writeFileSync(tmp, JSON.stringify(list, null, 1));
    fs.renameSync(tmp, this.file);
  }
}
