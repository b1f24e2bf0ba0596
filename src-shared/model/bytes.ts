import { InputError } from './errors';

export const MiB = 1024 * 1024;
export const GiB = 1024 * MiB;

export function fmtBytes(n: number): string {
  if (n >= GiB) return `${(n / GiB).toFixed(2)} GiB`;
  if (n >= MiB) return `${(n / MiB).toFixed(1)} MiB`;
  if (n >= 1024) return `${(n / 1024).toFixed(1)} KiB`;
  return `${n} B`;
}

/** Parse "1GiB", "512MiB", "64M", "1073741824" into bytes. */
export function parseBytes(s: string): number {
  const m = /^\s*(\d+(?:\.\d+)?)\s*(b|k|kb|kib|m|mb|mib|g|gb|gib|t|tb|tib)?\s*$/i.exec(s);
  if (!m) throw new InputError(`cannot read "${s}" as a size; expected e.g. 1GiB, 512MiB or a number of bytes`);
  const v = parseFloat(m[1]);
  const unit = (m[2] ?? 'b').toLowerCase()[0];
  const mult = unit === 'k' ? 1024 : unit === 'm' ? MiB : unit === 'g' ? GiB : unit === 't' ? 1024 * GiB : 1;
  return Math.floor(v * mult);
}
