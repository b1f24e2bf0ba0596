import { createHash } from 'node:crypto';

/**
 * A fingerprint that identifies a dataset without hashing all of it: SHA-256 over the
 * descriptive fields (format, shape, dtype, byte size) and a few sampled blocks of the data
 * (start, end and evenly spaced blocks in between). Two files with the same fingerprint
 * are, with overwhelming likelihood, the same data; a moved or renamed file keeps it.
 */
export function fingerprint(meta: Record<string, unknown>, samples: Uint8Array[]): string {
  const h = createHash('sha256');
  h.update(JSON.stringify(meta));
  for (const s of samples) {
    h.update(String(s.byteLength));
    h.update(s);
  }
  return 'sha256:' + h.digest('hex').slice(0, 32);
}

/** Byte offsets (relative to the data start) of `count` sample blocks of `block` bytes spread over `size` bytes. */
export function sampleOffsets(size: number, block: number, count: number): number[] {
  if (size <= block * count) return [0];
  const out: number[] = [];
  for (let i = 0; i < count; i++) out.push(Math.floor(((size - block) * i) / (count - 1)));
  return out;
}
