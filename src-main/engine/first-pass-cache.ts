// First-pass results kept between commands, so that `image` or `com` after `summary` (or after
// each other) need not read a 40 GB file again just to find the bad pixels. Keyed by the
// dataset's fingerprint and by the size, modification time and inode of every file its data
// comes from: a file changed in any way is a new key, and its old entry ages out. The preview
// cube is not kept (it can be large); the scan-sized vacuum finding made from it is, and so
// are the centre-of-mass sums the pass took, so `com` after `summary` reads nothing.
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';
import { createHash } from 'node:crypto';
import type { DatasetDescriptor } from '../../src-shared/model/dataset';
import type { BadPixels, BrightFieldDisk } from '../../src-shared/contract/service';
import type { VacuumFinding } from '../../src-shared/compute/vacuum';
import type { ComSumsOverGoodPixels } from './com-field';
import type { DetectorSpec } from '../../src-shared/model/detectors';

export interface CachedFirstPass {
  meanPattern: Float64Array;
  maxPattern: Float64Array;
  totalIntensity: Float64Array;
  nonFinite: number;
  badPixels: BadPixels;
  disk: BrightFieldDisk | { notFound: string };
  vacuum: VacuumFinding | null;
  /**
   * Centre-of-mass sums per position over the whole detector less the bad pixels, no threshold
   * (what `com` computes with its defaults), taken in the same pass; null when they could not be.
   */
  com: ComSumsOverGoodPixels | null;
  /** Default images taken in the pass (bright field, annular dark field), with their detectors. */
  defaultImages: DefaultImage[];
}

export interface DefaultImage {
  label: string;
  detector: DetectorSpec;
  image: Float64Array;
}

/** The cache keeps at most this much; the least recently used entries go first. */
export const CACHE_LIMIT_BYTES = 256 * 2 ** 20;
// 4: the mean pattern of float data with NaN/Inf divides by each pixel's finite values.
const FORMAT = 'scanfold-first-pass-4';

/** Where entries live: SCANFOLD_CACHE_DIR ('off' disables), else the user's cache folder. */
export function defaultCacheDir(): string | null {
  const env = process.env.SCANFOLD_CACHE_DIR;
  if (env === 'off') return null;
  if (env) return env;
  const base = process.env.XDG_CACHE_HOME || path.join(os.homedir(), '.cache');
  return path.join(base, 'scanfold');
}

/** The entry's key, or null when a source file cannot be examined. */
export function cacheKey(d: DatasetDescriptor): string | null {
  const files: unknown[] = [];
  for (const f of d.sourceFiles) {
    try {
      const st = fs.statSync(f);
      files.push([f, st.dev, st.ino, st.size, st.mtimeMs]);
    } catch {
      return null;
    }
  }
  const h = createHash('sha256');
  h.update(JSON.stringify({ format: FORMAT, fingerprint: d.fingerprint, shape: d.shape, dtype: d.dtype, dataset: d.datasetPath, files }));
  return h.digest('hex').slice(0, 40);
}

export function readCachedFirstPass(dir: string, key: string, d: DatasetDescriptor): CachedFirstPass | null {
  const file = path.join(dir, `${key}.first-pass`);
  let buf: Buffer;
  try {
    buf = fs.readFileSync(file);
  } catch {
    return null;
  }
  try {
    const headerBytes = buf.readUInt32LE(0);
    const header = JSON.parse(buf.toString('utf8', 4, 4 + headerBytes));
    if (header.format !== FORMAT) return null;
    const { detY, detX, scanY, scanX } = d.shape;
    const pixels = detY * detX, positions = scanY * scanX;
    let at = 4 + headerBytes;
    const f64 = (n: number) => {
      const out = new Float64Array(n);
      Buffer.from(out.buffer).set(buf.subarray(at, at + 8 * n));
      at += 8 * n;
      return out;
    };
    const u8 = (n: number) => { const out = Uint8Array.from(buf.subarray(at, at + n)); at += n; return out; };
    const meanPattern = f64(pixels), maxPattern = f64(pixels), totalIntensity = f64(positions);
    const badMask = u8(pixels);
    const vacuumMask = header.vacuum?.hasMask ? u8(positions) : null;
    const com = header.com ? { total: f64(positions), sumX: f64(positions), sumY: f64(positions), nonFinite: header.com.nonFinite } : null;
    const defaultImages: DefaultImage[] = (header.defaultImages ?? []).map((d: { label: string; detector: DetectorSpec }) => ({ ...d, image: f64(positions) }));
    if (at !== buf.length) return null;
    // Touch it: the size limit drops the least recently used entries.
    const now = new Date();
    fs.utimesSync(file, now, now);
    return {
      meanPattern, maxPattern, totalIntensity, nonFinite: header.nonFinite,
      badPixels: { mask: badMask, hot: header.hot, dead: header.dead },
      disk: header.disk,
      vacuum: header.vacuum ? { mask: vacuumMask, positions: header.vacuum.positions, threshold: header.vacuum.threshold ?? NaN, gapSigmas: header.vacuum.gapSigmas } : null,
      com,
      defaultImages,
    };
  } catch {
    return null; // damaged: treat as absent (it is rewritten after the next pass)
  }
}

/** Keep an entry (best effort: a cache that cannot be written costs only time). */
export function writeCachedFirstPass(dir: string, key: string, v: CachedFirstPass): void {
  try {
    fs.mkdirSync(dir, { recursive: true, mode: 0o700 });
    const header = Buffer.from(JSON.stringify({
      format: FORMAT, nonFinite: v.nonFinite, hot: v.badPixels.hot, dead: v.badPixels.dead, disk: v.disk,
      vacuum: v.vacuum ? { hasMask: v.vacuum.mask !== null, positions: v.vacuum.positions, threshold: v.vacuum.threshold, gapSigmas: v.vacuum.gapSigmas } : null,
      com: v.com ? { nonFinite: v.com.nonFinite } : null,
      defaultImages: v.defaultImages.map((d) => ({ label: d.label, detector: d.detector })),
    }));
    const parts = [Buffer.alloc(4), header, ...[v.meanPattern, v.maxPattern, v.totalIntensity].map((a) => Buffer.from(a.buffer, a.byteOffset, a.byteLength)),
      Buffer.from(v.badPixels.mask), ...(v.vacuum?.mask ? [Buffer.from(v.vacuum.mask)] : []),
      ...(v.com ? [v.com.total, v.com.sumX, v.com.sumY].map((a) => Buffer.from(a.buffer, a.byteOffset, a.byteLength)) : []),
      ...v.defaultImages.map((d) => Buffer.from(d.image.buffer, d.image.byteOffset, d.image.byteLength))];
    parts[0].writeUInt32LE(header.length, 0);
    // Written aside and renamed: a reader never sees half an entry. The folder is ours alone.
    const tmp = path.join(dir, `.${key}.${process.pid}.${Date.now()}.tmp`);
    fs.writeFileSync(tmp, Buffer.concat(parts), { flag: 'wx', mode: 0o600 });
    fs.renameSync(tmp, path.join(dir, `${key}.first-pass`));
    trimCache(dir);
  } catch {
    // best effort
  }
}

function trimCache(dir: string): void {
  const entries = fs.readdirSync(dir).filter((f) => f.endsWith('.first-pass')).map((f) => {
    const st = fs.statSync(path.join(dir, f));
    return { f, size: st.size, used: st.mtimeMs };
  }).sort((a, b) => b.used - a.used);
  let total = 0;
  for (const e of entries) {
    total += e.size;
    if (total > CACHE_LIMIT_BYTES) fs.rmSync(path.join(dir, e.f), { force: true });
  }
}
