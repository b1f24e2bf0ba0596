import * as fs from 'node:fs';

const HDF5_SIGNATURE = Buffer.from([0x89, 0x48, 0x44, 0x46, 0x0d, 0x0a, 0x1a, 0x0a]);

/**
 * Where the HDF5 superblock starts, or null: at byte 0, or after a user block at 512, 1024,
 * 2048, … bytes (the HDF5 file format specification places it only there), searched up to
 * the end of the file, so a user block of any size is found.
 */
export function hdf5SignatureOffset(fd: number, size: number): number | null {
  const head = Buffer.alloc(8);
  for (let off = 0; off + 8 <= size; off = off === 0 ? 512 : off * 2) {
    if (fs.readSync(fd, head, 0, 8, off) === 8 && head.equals(HDF5_SIGNATURE)) return off;
  }
  return null;
}
