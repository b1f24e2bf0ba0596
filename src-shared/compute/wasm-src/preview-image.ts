// AssemblyScript: virtual images from the preview cube, compiled to WebAssembly SIMD. The plain
// TypeScript version (../preview-image.ts) is the reference these results are tested against.
//
// The cube is float32, C-order (nPositions, nBins), and stays in the module's memory (the JS
// side, ../preview-image-wasm.ts, has it filled there once). A detector is a 16-byte record of
// the table: i32 n, u32 runs, u32 weights, unused: n runs of whole groups of four bins,
// (u32 first group, u32 groups) each, relative to a position's first bin, and the f64 weights
// of every bin of those groups packed run after run (zero where the detector does not reach).
// Groups past nBins read the next position's bins with weight 0; the last position's reach
// past the cube lands in slack the JS side keeps. Cube values are finite (the first pass
// leaves non-finite values out), so a zero weight contributes exactly zero.
//
// out[d · nPositions + pos] = Σ w · cube[pos, bin] in f64.

import { highHalf, laneSumF64 } from './_simd-helpers';

export function previewImages(cube: usize, nPositions: i32, nBins: i32, table: usize, nDet: i32, out: usize): void {
  const positionBytes = <usize>nBins * 4;
  for (let pos = 0; pos < nPositions; pos++) {
    const base = cube + <usize>pos * positionBytes;
    for (let d = 0; d < nDet; d++) {
      const rec = table + <usize>d * 16;
      const n = load<i32>(rec);
      const runs = <usize>load<u32>(rec, 4);
      let w = <usize>load<u32>(rec, 8);
      // Four sums, so that consecutive f64 adds do not wait on each other.
      let s0 = f64x2.splat(0), s1 = s0, s2 = s0, s3 = s0;
      for (let r = 0; r < n; r++) {
        let p = base + <usize>load<u32>(runs + <usize>r * 8) * 16;
        const end = p + <usize>load<u32>(runs + <usize>r * 8, 4) * 16;
        for (; p + 32 <= end; p += 32) {
          const v = v128.load(p);
          const u = v128.load(p, 16);
          s0 = f64x2.add(s0, f64x2.mul(f64x2.promote_low_f32x4(v), v128.load(w)));
          s1 = f64x2.add(s1, f64x2.mul(f64x2.promote_low_f32x4(highHalf(v)), v128.load(w, 16)));
          s2 = f64x2.add(s2, f64x2.mul(f64x2.promote_low_f32x4(u), v128.load(w, 32)));
          s3 = f64x2.add(s3, f64x2.mul(f64x2.promote_low_f32x4(highHalf(u)), v128.load(w, 48)));
          w += 64;
        }
        if (p < end) {
          const v = v128.load(p);
          s0 = f64x2.add(s0, f64x2.mul(f64x2.promote_low_f32x4(v), v128.load(w)));
          s1 = f64x2.add(s1, f64x2.mul(f64x2.promote_low_f32x4(highHalf(v)), v128.load(w, 16)));
          w += 32;
        }
      }
      store<f64>(out + (<usize>d * <usize>nPositions + <usize>pos) * 8, laneSumF64(f64x2.add(f64x2.add(s0, s1), f64x2.add(s2, s3))));
    }
  }
}
