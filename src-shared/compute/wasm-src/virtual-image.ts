// AssemblyScript: virtual images of several detectors in one pass over a tile, compiled to
// WebAssembly SIMD. The plain TypeScript twin (../virtual-image.ts) is the reference these
// results are tested against.
//
// The JS side (../virtual-image-wasm.ts) lays out every buffer in the imported memory and passes
// pointers; nothing here allocates. The tile is C-order (nPatterns, nPix) of one element type.
// Each detector is one 32-byte record of the detector table: i32 kind, i32 n, u32 a, u32 b,
// i32 image (its row of out), and 12 unused bytes:
//   SPARSE_RUNS      n runs of consecutive pixels at a: (u32 first, u32 length), length ≤ 32768
//                                                                         Σ I over them
//   SPARSE_WEIGHTED  n runs at a as for SPARSE_RUNS, the f64 weights of their pixels one run
//                    after the other at b                                Σ w·I
//   DENSE_BINARY     (integer and float32 data) a lane mask at a, n = pixels set
//                                                                         Σ I over the set pixels
//   DENSE_WEIGHTS    f64 weights at a, one per pixel                       Σ w·I
// Dense arrays hold roundUp(nPix, 32) entries, zero past nPix, so whole (pairs of) vectors run to
// the end of a pattern; the last pattern's over-read lands in memory the JS side keeps after the tile.
// Lane masks match the data width: u8 0xFF for 8-bit data, i16 1 for 16-bit data (a
// multiplier for i32x4.dot_i16x8_s), u32 0xFFFFFFFF for 32-bit integers and float32.
//
// Float data: non-finite values are left out of every sum and counted once per pixel of the
// union of the detectors' supports, given as `union`: a lane mask in the data's width
// (all-ones inside) when unionDense, else unionCount runs of consecutive pixels (as for SPARSE_RUNS).
//
// Results go to out[image · nPatterns + p] (f64). Binary detectors over integer data are summed
// exactly in integer lanes (i32 within one run or block of pixels, then i64). The JS side puts
// dense binary detectors next to each other, so that 8/16-bit data can serve four of them from
// each vector load.

import { finiteMaskF32, finiteMaskF64, highHalf, laneSumI32, laneSumI64, laneSumF64, loadF64x2 } from './_simd-helpers';

const SPARSE_RUNS: i32 = 0;
const SPARSE_WEIGHTED: i32 = 1;
const DENSE_BINARY: i32 = 2;
const DENSE_WEIGHTS: i32 = 3;

/**
 * Pixels of one pattern handled for every dense detector before moving on: the block (≤ 8 KiB
 * of data, 8 KiB as f64) stays in L1 while each detector's mask or weights stream past it, and
 * i32 lanes cannot overflow within one block (16-bit: at most 128 vectors · 65536 per lane).
 */
const BLOCK: i32 = 1024;

export function virtualImagesUint8(tile: usize, nPatterns: i32, nPix: i32, table: usize, nDet: i32,
  union: usize, unionCount: i32, unionDense: i32, scratch: usize, acc: usize, out: usize): f64 {
  return virtualImages<u8>(tile, nPatterns, nPix, table, nDet, union, unionCount, unionDense, scratch, acc, out);
}
export function virtualImagesUint16(tile: usize, nPatterns: i32, nPix: i32, table: usize, nDet: i32,
  union: usize, unionCount: i32, unionDense: i32, scratch: usize, acc: usize, out: usize): f64 {
  return virtualImages<u16>(tile, nPatterns, nPix, table, nDet, union, unionCount, unionDense, scratch, acc, out);
}
export function virtualImagesUint32(tile: usize, nPatterns: i32, nPix: i32, table: usize, nDet: i32,
  union: usize, unionCount: i32, unionDense: i32, scratch: usize, acc: usize, out: usize): f64 {
  return virtualImages<u32>(tile, nPatterns, nPix, table, nDet, union, unionCount, unionDense, scratch, acc, out);
}
export function virtualImagesInt8(tile: usize, nPatterns: i32, nPix: i32, table: usize, nDet: i32,
  union: usize, unionCount: i32, unionDense: i32, scratch: usize, acc: usize, out: usize): f64 {
  return virtualImages<i8>(tile, nPatterns, nPix, table, nDet, union, unionCount, unionDense, scratch, acc, out);
}
export function virtualImagesInt16(tile: usize, nPatterns: i32, nPix: i32, table: usize, nDet: i32,
  union: usize, unionCount: i32, unionDense: i32, scratch: usize, acc: usize, out: usize): f64 {
  return virtualImages<i16>(tile, nPatterns, nPix, table, nDet, union, unionCount, unionDense, scratch, acc, out);
}
export function virtualImagesInt32(tile: usize, nPatterns: i32, nPix: i32, table: usize, nDet: i32,
  union: usize, unionCount: i32, unionDense: i32, scratch: usize, acc: usize, out: usize): f64 {
  return virtualImages<i32>(tile, nPatterns, nPix, table, nDet, union, unionCount, unionDense, scratch, acc, out);
}
export function virtualImagesFloat32(tile: usize, nPatterns: i32, nPix: i32, table: usize, nDet: i32,
  union: usize, unionCount: i32, unionDense: i32, scratch: usize, acc: usize, out: usize): f64 {
  return virtualImages<f32>(tile, nPatterns, nPix, table, nDet, union, unionCount, unionDense, scratch, acc, out);
}
export function virtualImagesFloat64(tile: usize, nPatterns: i32, nPix: i32, table: usize, nDet: i32,
  union: usize, unionCount: i32, unionDense: i32, scratch: usize, acc: usize, out: usize): f64 {
  return virtualImages<f64>(tile, nPatterns, nPix, table, nDet, union, unionCount, unionDense, scratch, acc, out);
}

/** Bytes of one detector record. */
const RECORD: usize = 32;

// @ts-ignore: decorator
@inline function virtualImages<T extends number>(tile: usize, nPatterns: i32, nPix: i32, table: usize, nDet: i32,
  union: usize, unionCount: i32, unionDense: i32, scratch: usize, acc: usize, out: usize): f64 {
  const patternBytes = <usize>nPix * sizeof<T>();
  let nDense = 0;
  let needScratch = false;
  for (let d = 0; d < nDet; d++) {
    const kind = load<i32>(table + <usize>d * RECORD);
    if (kind >= DENSE_BINARY) nDense++;
    if (kind == DENSE_WEIGHTS) needScratch = true;
  }
  const countInBlocks = isFloat<T>() && unionDense != 0 && nDense > 0;
  let nonFinite: i64 = 0;

  for (let p = 0; p < nPatterns; p++) {
    const pattern = tile + <usize>p * patternBytes;

    if (nDense > 0) {
      memory.fill(acc, 0, <usize>nDet * 8);
      for (let b0 = 0; b0 < nPix; b0 += BLOCK) {
        const len = min(BLOCK, nPix - b0);
        const lenV = (len + 31) & ~31;
        const src = pattern + <usize>b0 * sizeof<T>();
        if (needScratch) {
          const count = toF64Block<T>(src, scratch, lenV, union + <usize>b0 * sizeof<T>(), countInBlocks);
          if (isFloat<T>()) nonFinite += count;
        } else if (countInBlocks) {
          nonFinite += countNonFiniteBlock<T>(src, lenV, union + <usize>b0 * sizeof<T>());
        }
        let d = 0;
        while (d < nDet) {
          const rec = table + <usize>d * RECORD;
          const kind = load<i32>(rec);
          const at = acc + <usize>d * 8;
          if (kind == DENSE_BINARY && isFloat<T>()) {
            if (sizeof<T>() == 4) store<f64>(at, load<f64>(at) + binaryBlockF32(src, <usize>load<u32>(rec, 8) + <usize>b0 * 4, lenV));
          } else if (kind == DENSE_BINARY) {
            const maskOffset = <usize>b0 * sizeof<T>();
            if (sizeof<T>() <= 2 && d + 4 <= nDet && load<i32>(rec, 3 * RECORD) == DENSE_BINARY) {
              // Four dense binary detectors (the JS side keeps them adjacent) from one pass over the block.
              binaryBlock4<T>(src, lenV, at,
                <usize>load<u32>(rec, 8) + maskOffset, <usize>load<u32>(rec, RECORD + 8) + maskOffset,
                <usize>load<u32>(rec, 2 * RECORD + 8) + maskOffset, <usize>load<u32>(rec, 3 * RECORD + 8) + maskOffset);
              d += 4;
              continue;
            }
            if (sizeof<T>() <= 2 && d + 2 <= nDet && load<i32>(rec, RECORD) == DENSE_BINARY) {
              binaryBlock2<T>(src, lenV, at, <usize>load<u32>(rec, 8) + maskOffset, <usize>load<u32>(rec, RECORD + 8) + maskOffset);
              d += 2;
              continue;
            }
            store<i64>(at, load<i64>(at) + binaryBlock<T>(src, <usize>load<u32>(rec, 8) + maskOffset, lenV));
          } else if (kind == DENSE_WEIGHTS) {
            const weights = <usize>load<u32>(rec, 8) + <usize>b0 * 8;
            store<f64>(at, load<f64>(at) + dotF64(scratch, weights, lenV));
          }
          d++;
        }
      }
      for (let d = 0; d < nDet; d++) {
        const rec = table + <usize>d * RECORD;
        const kind = load<i32>(rec);
        if (kind < DENSE_BINARY) continue;
        let value: f64;
        if (kind == DENSE_BINARY && isInteger<T>()) {
          let sum = load<i64>(acc + <usize>d * 8);
          // 16-bit unsigned values were biased by −32768 to fit the signed dot product.
          if (isInteger<T>() && sizeof<T>() == 2 && !isSigned<T>()) sum += <i64>32768 * <i64>load<i32>(rec, 4);
          value = <f64>sum;
        } else {
          value = load<f64>(acc + <usize>d * 8);
        }
        store<f64>(out + (<usize>load<i32>(rec, 16) * <usize>nPatterns + <usize>p) * 8, value);
      }
    }

    // After the dense sweep (one sequential stream, which the hardware prefetches well) the
    // pattern is in cache for the detectors summed over their own pixels.
    for (let d = 0; d < nDet; d++) {
      const rec = table + <usize>d * RECORD;
      const kind = load<i32>(rec);
      if (kind >= DENSE_BINARY) continue;
      const n = load<i32>(rec, 4);
      const a = <usize>load<u32>(rec, 8);
      const value = kind == SPARSE_WEIGHTED ? weightedRunsSum<T>(pattern, a, <usize>load<u32>(rec, 12), n) : runsSum<T>(pattern, a, n);
      store<f64>(out + (<usize>load<i32>(rec, 16) * <usize>nPatterns + <usize>p) * 8, value);
    }

    if (isFloat<T>() && !countInBlocks && unionCount > 0) nonFinite += countNonFiniteRuns<T>(pattern, union, unionCount);
  }
  return <f64>nonFinite;
}

// ---------------------------------------------------------------------------------------------
// Sparse detectors: over their own pixels only, as runs of consecutive pixels.

// @ts-ignore: decorator
@inline function finiteOrZero(v: f64): f64 {
  return select<f64>(v, 0, Math.abs(v) < Infinity);
}

/**
 * Σ over runs of consecutive pixels: whole vectors, then the run's last partial vector with the
 * lanes past its end masked off (that load may reach into the next pattern, or into the slack
 * the JS side keeps after the tile).
 */
// @ts-ignore: decorator
@inline function runsSum<T extends number>(pattern: usize, runs: usize, n: i32): f64 {
  const lanes = 16 / <i32>sizeof<T>();
  if (isInteger<T>()) {
    let total = i64x2.splat(0);
    for (let r = 0; r < n; r++) {
      const first = pattern + <usize>load<u32>(runs + <usize>r * 8) * sizeof<T>();
      const length = load<i32>(runs + <usize>r * 8, 4);
      const whole = length & ~(lanes - 1);
      const vecEnd = first + <usize>whole * sizeof<T>();
      const tail = v128.and(v128.load(vecEnd), leadingLanes<T>(length - whole));
      let q = first;
      if (sizeof<T>() == 4) {
        let a0 = i64x2.splat(0), a1 = a0;
        for (; q < vecEnd; q += 16) {
          const v = v128.load(q);
          a0 = i64x2.add(a0, isSigned<T>() ? i64x2.extend_low_i32x4_s(v) : i64x2.extend_low_i32x4_u(v));
          a1 = i64x2.add(a1, isSigned<T>() ? i64x2.extend_high_i32x4_s(v) : i64x2.extend_high_i32x4_u(v));
        }
        a0 = i64x2.add(a0, isSigned<T>() ? i64x2.extend_low_i32x4_s(tail) : i64x2.extend_low_i32x4_u(tail));
        a1 = i64x2.add(a1, isSigned<T>() ? i64x2.extend_high_i32x4_s(tail) : i64x2.extend_high_i32x4_u(tail));
        total = i64x2.add(total, i64x2.add(a0, a1));
      } else {
        // i32 lanes: a run of ≤ 32768 values puts at most 8192 values of ≤ 65535 in a lane, < 2^31.
        let a = pairsToI32<T>(tail);
        for (; q < vecEnd; q += 16) a = i32x4.add(a, pairsToI32<T>(v128.load(q)));
        total = i64x2.add(total, isSigned<T>()
          ? i64x2.add(i64x2.extend_low_i32x4_s(a), i64x2.extend_high_i32x4_s(a))
          : i64x2.add(i64x2.extend_low_i32x4_u(a), i64x2.extend_high_i32x4_u(a)));
      }
    }
    return <f64>laneSumI64(total);
  }
  // Two sums, so that consecutive f64 adds do not wait on each other.
  let t0 = f64x2.splat(0), t1 = t0;
  for (let r = 0; r < n; r++) {
    const first = pattern + <usize>load<u32>(runs + <usize>r * 8) * sizeof<T>();
    const length = load<i32>(runs + <usize>r * 8, 4);
    const whole = length & ~(lanes - 1);
    const vecEnd = first + <usize>whole * sizeof<T>();
    let q = first;
    for (; q + 32 <= vecEnd; q += 32) {
      t0 = f64x2.add(t0, finiteAsF64<T>(v128.load(q)));
      t1 = f64x2.add(t1, finiteAsF64<T>(v128.load(q, 16)));
    }
    if (q < vecEnd) t0 = f64x2.add(t0, finiteAsF64<T>(v128.load(q)));
    t1 = f64x2.add(t1, finiteAsF64<T>(v128.and(v128.load(vecEnd), leadingLanes<T>(length - whole))));
  }
  return laneSumF64(f64x2.add(t0, t1));
}

/** The finite values of one float vector, non-finite ones as 0, summed into two f64 lanes. */
// @ts-ignore: decorator
@inline function finiteAsF64<T extends number>(v: v128): v128 {
  if (sizeof<T>() == 4) {
    const clean = v128.and(v, finiteMaskF32(v));
    return f64x2.add(f64x2.promote_low_f32x4(clean), f64x2.promote_low_f32x4(highHalf(clean)));
  }
  return v128.and(v, finiteMaskF64(v));
}

/** All-ones in the lanes of T below `count`. */
// @ts-ignore: decorator
@inline function leadingLanes<T extends number>(count: i32): v128 {
  if (sizeof<T>() == 1) return i8x16.lt_u(i8x16(0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15), i8x16.splat(<i8>count));
  if (sizeof<T>() == 2) return i16x8.lt_u(i16x8(0, 1, 2, 3, 4, 5, 6, 7), i16x8.splat(<i16>count));
  if (sizeof<T>() == 4) return i32x4.lt_u(i32x4(0, 1, 2, 3), i32x4.splat(count));
  return i64x2.gt_s(i64x2.splat(<i64>count), i64x2(0, 1));
}

/** Sums of each group of 16 / (4 · sizeof T) consecutive 8/16-bit values as i32 lanes. */
// @ts-ignore: decorator
@inline function pairsToI32<T extends number>(v: v128): v128 {
  if (sizeof<T>() == 2) return isSigned<T>() ? i32x4.extadd_pairwise_i16x8_s(v) : i32x4.extadd_pairwise_i16x8_u(v);
  return isSigned<T>()
    ? i32x4.extadd_pairwise_i16x8_s(i16x8.extadd_pairwise_i8x16_s(v))
    : i32x4.extadd_pairwise_i16x8_u(i16x8.extadd_pairwise_i8x16_u(v));
}

/** Σ w·I over runs of consecutive pixels with their weights packed run after run: two pixels per f64 vector. */
// @ts-ignore: decorator
@inline function weightedRunsSum<T extends number>(pattern: usize, runs: usize, weights: usize, n: i32): f64 {
  let s0 = f64x2.splat(0), s1 = s0;
  let rest: f64 = 0;
  let w = weights;
  for (let r = 0; r < n; r++) {
    const first = pattern + <usize>load<u32>(runs + <usize>r * 8) * sizeof<T>();
    const length = load<i32>(runs + <usize>r * 8, 4);
    let k = 0;
    for (; k + 4 <= length; k += 4) {
      const q = first + <usize>k * sizeof<T>();
      s0 = f64x2.add(s0, f64x2.mul(cleanF64x2<T>(q), v128.load(w + <usize>k * 8)));
      s1 = f64x2.add(s1, f64x2.mul(cleanF64x2<T>(q + 2 * sizeof<T>()), v128.load(w + <usize>k * 8, 16)));
    }
    for (; k < length; k++) rest += load<f64>(w + <usize>k * 8) * cleanValue<T>(first + <usize>k * sizeof<T>());
    w += <usize>length * 8;
  }
  return laneSumF64(f64x2.add(s0, s1)) + rest;
}

/** Two values as f64 lanes, non-finite ones (float data) as 0. */
// @ts-ignore: decorator
@inline function cleanF64x2<T extends number>(q: usize): v128 {
  const v = loadF64x2<T>(q);
  return isFloat<T>() ? v128.and(v, finiteMaskF64(v)) : v;
}

// @ts-ignore: decorator
@inline function cleanValue<T extends number>(p: usize): f64 {
  const v = <f64>load<T>(p);
  return isFloat<T>() ? finiteOrZero(v) : v;
}

/** Non-finite values in runs of consecutive pixels (the union of the supports, as runs). */
// @ts-ignore: decorator
@inline function countNonFiniteRuns<T extends number>(pattern: usize, runs: usize, n: i32): i64 {
  const lanes = 16 / <i32>sizeof<T>();
  let misses = i64x2.splat(0);
  for (let r = 0; r < n; r++) {
    const first = pattern + <usize>load<u32>(runs + <usize>r * 8) * sizeof<T>();
    const length = load<i32>(runs + <usize>r * 8, 4);
    const whole = length & ~(lanes - 1);
    const vecEnd = first + <usize>whole * sizeof<T>();
    const lead = leadingLanes<T>(length - whole);
    if (sizeof<T>() == 4) {
      let m = v128.andnot(lead, finiteMaskF32(v128.load(vecEnd))); // −1 per miss
      for (let q = first; q < vecEnd; q += 16) m = i32x4.add(m, v128.not(finiteMaskF32(v128.load(q))));
      misses = i64x2.add(misses, i64x2.add(i64x2.extend_low_i32x4_s(m), i64x2.extend_high_i32x4_s(m)));
    } else {
      let m = v128.andnot(lead, finiteMaskF64(v128.load(vecEnd)));
      for (let q = first; q < vecEnd; q += 16) m = i64x2.add(m, v128.not(finiteMaskF64(v128.load(q))));
      misses = i64x2.add(misses, m);
    }
  }
  return -laneSumI64(misses);
}

// ---------------------------------------------------------------------------------------------
// Dense detectors over one block of lenV pixels (a multiple of 32).

/** Σ of the masked values of one block, exact. */
// @ts-ignore: decorator
@inline function binaryBlock<T extends number>(src: usize, mask: usize, lenV: i32): i64 {
  const bytes = <usize>lenV * sizeof<T>();
  if (sizeof<T>() == 2) {
    // dot_i16x8_s takes signed 16-bit lanes: unsigned values are biased into range by flipping
    // the top bit (v − 32768), and the caller adds 32768 per masked pixel back.
    const bias = i16x8.splat(isSigned<T>() ? 0 : -32768);
    let a0 = i32x4.splat(0), a1 = a0;
    for (let o: usize = 0; o < bytes; o += 32) {
      let v0 = v128.load(src + o);
      let v1 = v128.load(src + o, 16);
      if (!isSigned<T>()) { v0 = v128.xor(v0, bias); v1 = v128.xor(v1, bias); }
      a0 = i32x4.add(a0, i32x4.dot_i16x8_s(v0, v128.load(mask + o)));
      a1 = i32x4.add(a1, i32x4.dot_i16x8_s(v1, v128.load(mask + o, 16)));
    }
    return <i64>laneSumI32(i32x4.add(a0, a1));
  }
  if (sizeof<T>() == 1) {
    let a0 = i32x4.splat(0), a1 = a0;
    for (let o: usize = 0; o < bytes; o += 32) {
      const v0 = v128.and(v128.load(src + o), v128.load(mask + o));
      const v1 = v128.and(v128.load(src + o, 16), v128.load(mask + o, 16));
      if (isSigned<T>()) {
        a0 = i32x4.add(a0, i32x4.extadd_pairwise_i16x8_s(i16x8.extadd_pairwise_i8x16_s(v0)));
        a1 = i32x4.add(a1, i32x4.extadd_pairwise_i16x8_s(i16x8.extadd_pairwise_i8x16_s(v1)));
      } else {
        a0 = i32x4.add(a0, i32x4.extadd_pairwise_i16x8_u(i16x8.extadd_pairwise_i8x16_u(v0)));
        a1 = i32x4.add(a1, i32x4.extadd_pairwise_i16x8_u(i16x8.extadd_pairwise_i8x16_u(v1)));
      }
    }
    return <i64>laneSumI32(i32x4.add(a0, a1));
  }
  // 32-bit integers go straight into i64 lanes.
  let a0 = i64x2.splat(0), a1 = a0;
  for (let o: usize = 0; o < bytes; o += 16) {
    const v = v128.and(v128.load(src + o), v128.load(mask + o));
    if (isSigned<T>()) {
      a0 = i64x2.add(a0, i64x2.extend_low_i32x4_s(v));
      a1 = i64x2.add(a1, i64x2.extend_high_i32x4_s(v));
    } else {
      a0 = i64x2.add(a0, i64x2.extend_low_i32x4_u(v));
      a1 = i64x2.add(a1, i64x2.extend_high_i32x4_u(v));
    }
  }
  return laneSumI64(i64x2.add(a0, a1));
}

/**
 * binaryBlock for four detectors at once (8/16-bit data): each data vector is loaded (and
 * biased) once and multiplied into four masks; the four sums are added to acc[0..3] (i64).
 */
// @ts-ignore: decorator
@inline function binaryBlock4<T extends number>(src: usize, lenV: i32, acc: usize, m0: usize, m1: usize, m2: usize, m3: usize): void {
  const bytes = <usize>lenV * sizeof<T>();
  let a0 = i32x4.splat(0), a1 = a0, a2 = a0, a3 = a0;
  if (sizeof<T>() == 2) {
    const bias = i16x8.splat(isSigned<T>() ? 0 : -32768);
    for (let o: usize = 0; o < bytes; o += 16) {
      let v = v128.load(src + o);
      if (!isSigned<T>()) v = v128.xor(v, bias);
      a0 = i32x4.add(a0, i32x4.dot_i16x8_s(v, v128.load(m0 + o)));
      a1 = i32x4.add(a1, i32x4.dot_i16x8_s(v, v128.load(m1 + o)));
      a2 = i32x4.add(a2, i32x4.dot_i16x8_s(v, v128.load(m2 + o)));
      a3 = i32x4.add(a3, i32x4.dot_i16x8_s(v, v128.load(m3 + o)));
    }
  } else {
    for (let o: usize = 0; o < bytes; o += 16) {
      const v = v128.load(src + o);
      a0 = i32x4.add(a0, pairsToI32<T>(v128.and(v, v128.load(m0 + o))));
      a1 = i32x4.add(a1, pairsToI32<T>(v128.and(v, v128.load(m1 + o))));
      a2 = i32x4.add(a2, pairsToI32<T>(v128.and(v, v128.load(m2 + o))));
      a3 = i32x4.add(a3, pairsToI32<T>(v128.and(v, v128.load(m3 + o))));
    }
  }
  store<i64>(acc, load<i64>(acc) + <i64>laneSumI32(a0));
  store<i64>(acc, load<i64>(acc, 8) + <i64>laneSumI32(a1), 8);
  store<i64>(acc, load<i64>(acc, 16) + <i64>laneSumI32(a2), 16);
  store<i64>(acc, load<i64>(acc, 24) + <i64>laneSumI32(a3), 24);
}

/** binaryBlock4 for two detectors. */
// @ts-ignore: decorator
@inline function binaryBlock2<T extends number>(src: usize, lenV: i32, acc: usize, m0: usize, m1: usize): void {
  const bytes = <usize>lenV * sizeof<T>();
  let a0 = i32x4.splat(0), a1 = a0, a2 = a0, a3 = a0;
  if (sizeof<T>() == 2) {
    const bias = i16x8.splat(isSigned<T>() ? 0 : -32768);
    for (let o: usize = 0; o < bytes; o += 32) {
      let v = v128.load(src + o);
      let w = v128.load(src + o, 16);
      if (!isSigned<T>()) { v = v128.xor(v, bias); w = v128.xor(w, bias); }
      a0 = i32x4.add(a0, i32x4.dot_i16x8_s(v, v128.load(m0 + o)));
      a1 = i32x4.add(a1, i32x4.dot_i16x8_s(v, v128.load(m1 + o)));
      a2 = i32x4.add(a2, i32x4.dot_i16x8_s(w, v128.load(m0 + o, 16)));
      a3 = i32x4.add(a3, i32x4.dot_i16x8_s(w, v128.load(m1 + o, 16)));
    }
  } else {
    for (let o: usize = 0; o < bytes; o += 32) {
      const v = v128.load(src + o);
      const w = v128.load(src + o, 16);
      a0 = i32x4.add(a0, pairsToI32<T>(v128.and(v, v128.load(m0 + o))));
      a1 = i32x4.add(a1, pairsToI32<T>(v128.and(v, v128.load(m1 + o))));
      a2 = i32x4.add(a2, pairsToI32<T>(v128.and(w, v128.load(m0 + o, 16))));
      a3 = i32x4.add(a3, pairsToI32<T>(v128.and(w, v128.load(m1 + o, 16))));
    }
  }
  store<i64>(acc, load<i64>(acc) + <i64>laneSumI32(i32x4.add(a0, a2)));
  store<i64>(acc, load<i64>(acc, 8) + <i64>laneSumI32(i32x4.add(a1, a3)), 8);
}

/** Σ of the finite float32 values under an all-ones u32 lane mask, in f64. */
// @ts-ignore: decorator
@inline function binaryBlockF32(src: usize, mask: usize, lenV: i32): f64 {
  const bytes = <usize>lenV * 4;
  let a0 = f64x2.splat(0), a1 = a0, a2 = a0, a3 = a0;
  for (let o: usize = 0; o < bytes; o += 32) {
    const v0 = v128.load(src + o);
    const v1 = v128.load(src + o, 16);
    const c0 = v128.and(v0, v128.and(finiteMaskF32(v0), v128.load(mask + o)));
    const c1 = v128.and(v1, v128.and(finiteMaskF32(v1), v128.load(mask + o, 16)));
    a0 = f64x2.add(a0, f64x2.promote_low_f32x4(c0));
    a1 = f64x2.add(a1, f64x2.promote_low_f32x4(highHalf(c0)));
    a2 = f64x2.add(a2, f64x2.promote_low_f32x4(c1));
    a3 = f64x2.add(a3, f64x2.promote_low_f32x4(highHalf(c1)));
  }
  return laneSumF64(f64x2.add(f64x2.add(a0, a1), f64x2.add(a2, a3)));
}

/** Non-finite float values of one block inside the union lane mask. */
// @ts-ignore: decorator
@inline function countNonFiniteBlock<T extends number>(src: usize, lenV: i32, union: usize): i64 {
  const bytes = <usize>lenV * sizeof<T>();
  if (sizeof<T>() == 4) {
    let misses = i32x4.splat(0);
    for (let o: usize = 0; o < bytes; o += 16) {
      misses = i32x4.add(misses, v128.andnot(v128.load(union + o), finiteMaskF32(v128.load(src + o))));
    }
    return -<i64>laneSumI32(misses);
  }
  let misses = i64x2.splat(0);
  for (let o: usize = 0; o < bytes; o += 16) {
    misses = i64x2.add(misses, v128.andnot(v128.load(union + o), finiteMaskF64(v128.load(src + o))));
  }
  return -laneSumI64(misses);
}

/** Σ x[i]·w[i] over lenV f64 values (lenV a multiple of 32). */
// @ts-ignore: decorator
@inline function dotF64(x: usize, w: usize, lenV: i32): f64 {
  let a0 = f64x2.splat(0), a1 = a0, a2 = a0, a3 = a0;
  const bytes = <usize>lenV * 8;
  for (let o: usize = 0; o < bytes; o += 64) {
    a0 = f64x2.add(a0, f64x2.mul(v128.load(x + o), v128.load(w + o)));
    a1 = f64x2.add(a1, f64x2.mul(v128.load(x + o, 16), v128.load(w + o, 16)));
    a2 = f64x2.add(a2, f64x2.mul(v128.load(x + o, 32), v128.load(w + o, 32)));
    a3 = f64x2.add(a3, f64x2.mul(v128.load(x + o, 48), v128.load(w + o, 48)));
  }
  return laneSumF64(f64x2.add(f64x2.add(a0, a1), f64x2.add(a2, a3)));
}

/**
 * One block as f64 into dst, shared by every weighted detector. Float data: non-finite values
 * become 0, and when `count` those inside the union lane mask are counted (returned).
 */
// @ts-ignore: decorator
@inline function toF64Block<T extends number>(src: usize, dst: usize, lenV: i32, union: usize, count: bool): i64 {
  const n = <usize>lenV;
  if (isFloat<T>() && sizeof<T>() == 4) {
    let misses = i32x4.splat(0);
    for (let i: usize = 0; i < n; i += 4) {
      const v = v128.load(src + i * 4);
      const finite = finiteMaskF32(v);
      if (count) misses = i32x4.add(misses, v128.andnot(v128.load(union + i * 4), finite)); // −1 per miss
      const clean = v128.and(v, finite);
      v128.store(dst + i * 8, f64x2.promote_low_f32x4(clean));
      v128.store(dst + i * 8, f64x2.promote_low_f32x4(highHalf(clean)), 16);
    }
    return -<i64>laneSumI32(misses);
  }
  if (isFloat<T>()) {
    let misses = i64x2.splat(0);
    for (let i: usize = 0; i < n; i += 2) {
      const v = v128.load(src + i * 8);
      const finite = finiteMaskF64(v);
      if (count) misses = i64x2.add(misses, v128.andnot(v128.load(union + i * 8), finite));
      v128.store(dst + i * 8, v128.and(v, finite));
    }
    return -laneSumI64(misses);
  }
  if (sizeof<T>() == 4) {
    for (let i: usize = 0; i < n; i += 4) {
      const v = v128.load(src + i * 4);
      if (isSigned<T>()) {
        v128.store(dst + i * 8, f64x2.convert_low_i32x4_s(v));
        v128.store(dst + i * 8, f64x2.convert_low_i32x4_s(highHalf(v)), 16);
      } else {
        v128.store(dst + i * 8, f64x2.convert_low_i32x4_u(v));
        v128.store(dst + i * 8, f64x2.convert_low_i32x4_u(highHalf(v)), 16);
      }
    }
    return 0;
  }
  if (sizeof<T>() == 2) {
    for (let i: usize = 0; i < n; i += 8) {
      store8AsF64<T>(dst + i * 8, v128.load(src + i * 2));
    }
    return 0;
  }
  for (let i: usize = 0; i < n; i += 16) {
    const v = v128.load(src + i);
    if (isSigned<T>()) {
      store8AsF64<i16>(dst + i * 8, i16x8.extend_low_i8x16_s(v));
      store8AsF64<i16>(dst + i * 8 + 64, i16x8.extend_high_i8x16_s(v));
    } else {
      store8AsF64<u16>(dst + i * 8, i16x8.extend_low_i8x16_u(v));
      store8AsF64<u16>(dst + i * 8 + 64, i16x8.extend_high_i8x16_u(v));
    }
  }
  return 0;
}

/** Eight 16-bit lanes (signed or unsigned by T) as eight f64 at dst. */
// @ts-ignore: decorator
@inline function store8AsF64<T extends number>(dst: usize, v: v128): void {
  const lo = isSigned<T>() ? i32x4.extend_low_i16x8_s(v) : i32x4.extend_low_i16x8_u(v);
  const hi = isSigned<T>() ? i32x4.extend_high_i16x8_s(v) : i32x4.extend_high_i16x8_u(v);
  // Values below 2^16 convert the same as signed or unsigned i32.
  v128.store(dst, f64x2.convert_low_i32x4_s(lo));
  v128.store(dst, f64x2.convert_low_i32x4_s(highHalf(lo)), 16);
  v128.store(dst, f64x2.convert_low_i32x4_s(hi), 32);
  v128.store(dst, f64x2.convert_low_i32x4_s(highHalf(hi)), 48);
}
