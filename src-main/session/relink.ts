// Finding a session's data again: at its absolute path, else at its path relative to the
// session file, else beside the session under its file name; or where the user says it now is
// (relink). Whatever is found must carry the fingerprint the session recorded: other data is
// never analysed in its place.
import fs from 'node:fs';
import nodePath from 'node:path';
import { shapeText, type DatasetDescriptor, type SourceSpec } from '../../src-shared/model/dataset';
import { InputError } from '../../src-shared/model/errors';
import { DTYPE_BYTES } from '../../src-shared/model/dtype';
import type { SessionDatasetRef } from '../../src-shared/model/session';

export type DatasetStatus = 'found' | 'moved' | 'missing' | 'different';

export interface Located {
  status: DatasetStatus;
  /** Where the data was found (or the file that held other data), else null. */
  path: string | null;
  /** One line: where it was found, or what differs, or where it was looked for. */
  how: string;
  descriptor: DatasetDescriptor | null;
}

/** Whether `key` (as given to --relink OLD=NEW) names this dataset: its id, either path, or its file name. */
export function relinkMatches(ref: SessionDatasetRef, key: string): boolean {
  return [ref.id, ref.absolutePath, ref.relativePath, nodePath.basename(ref.absolutePath)].includes(key) || nodePath.resolve(key) === ref.absolutePath;
}

/** What differs between the recorded dataset and the one found, in words. */
export function differences(ref: SessionDatasetRef, d: DatasetDescriptor): string {
  const out: string[] = [];
  if (ref.format !== d.format) out.push(`format ${d.format}, not ${ref.format}`);
  if (shapeText(ref.shape) !== shapeText(d.shape)) out.push(`shape ${shapeText(d.shape)}, not ${shapeText(ref.shape)}`);
  if (ref.dtype !== d.dtype) out.push(`type ${d.dtype}, not ${ref.dtype}`);
  if (!out.length) out.push('the same shape and type, but other values (sampled bytes differ)');
  return out.join('; ');
}

/**
 * Locate one dataset of a session saved at `sessionPath`. `relinkTo` (the user's NEW for this
 * dataset) is the only place looked at when given, and data there with another fingerprint is
 * refused with an InputError; otherwise the usual places are tried in turn.
 */
/**
 * The spec that opens a session's dataset at `path`. Sessions written before raw files had to be
 * covered by their description (--trailer) recorded no trailer for a file with bytes after the
 * data: those bytes are taken as its trailer, and the fingerprint still decides whether it is
 * the same data.
 */
export function sessionSpecAt(ref: SessionDatasetRef, path: string): SourceSpec {
  const spec: SourceSpec = { ...ref.spec, path };
  const raw = spec.raw;
  if (!raw || raw.trailer !== undefined) return spec;
  const { scanY, scanX, detY, detX } = raw.shape;
  const bytes = scanY * scanX * detY * detX * (DTYPE_BYTES[raw.dtype] ?? 0);
  let size = 0;
  try { size = fs.statSync(path).size; } catch { return spec; }
  const extra = size - raw.offset - bytes;
  return extra > 0 && Number.isSafeInteger(extra) ? { ...spec, raw: { ...raw, trailer: extra } } : spec;
}

export async function locateDataset(ref: SessionDatasetRef, sessionPath: string, relinkTo: string | undefined,
  describe: (spec: SourceSpec) => Promise<DatasetDescriptor>): Promise<Located> {
  const folder = nodePath.dirname(sessionPath);
  const candidates: [string, string][] = relinkTo !== undefined
    ? [[nodePath.resolve(relinkTo), 'where it was relinked']]
    : [[ref.absolutePath, 'at its recorded path'], [nodePath.resolve(folder, ref.relativePath), 'relative to the session file'],
      [nodePath.join(folder, nodePath.basename(ref.absolutePath)), 'beside the session file']];
  const seen = new Set<string>();
  let other: Located | null = null;
  for (const [path, where] of candidates) {
    if (seen.has(path)) continue;
    seen.add(path);
    if (!fs.existsSync(path)) {
      if (relinkTo !== undefined) throw new InputError(`--relink ${ref.absolutePath}=${relinkTo}: ${path} does not exist`, 'missing-file');
      continue;
    }
    let d: DatasetDescriptor;
    try {
      d = await describe(sessionSpecAt(ref, path));
    } catch (e) {
      if (relinkTo !== undefined) throw e;
      other ??= { status: 'different', path, how: `${path} could not be opened as the dataset (${(e as Error).message})`, descriptor: null };
      continue;
    }
    if (d.fingerprint === ref.fingerprint) {
      const status = path === ref.absolutePath ? 'found' : 'moved';
      return { status, path, how: status === 'found' ? `at ${path}` : `${where}: ${path}`, descriptor: d };
    }
    const what = `${path} holds other data than the session used: ${differences(ref, d)} (fingerprint ${d.fingerprint}, expected ${ref.fingerprint})`;
    if (relinkTo !== undefined) throw new InputError(`--relink: ${what}; refused`, 'different-data');
    other ??= { status: 'different', path, how: what, descriptor: null };
  }
  return other ?? { status: 'missing', path: null, how: `not found at ${[...seen].join(', nor ')}; give its new place with relink`, descriptor: null };
}
