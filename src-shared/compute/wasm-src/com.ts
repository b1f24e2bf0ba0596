// AssemblyScript: the per-pattern sums of the centre of mass, Σ I, Σ I·x, Σ I·y (x the column,
// y the row), compiled to WebAssembly SIMD. The plain TypeScript twin (../com.ts) is the
// reference these results are tested against.
//
// The JS side (../com-wasm.ts) lays out every buffer in the imported memory and passes
// pointers; nothing here allocates. The tile is C-order (nPatterns, detY, detX). Masks:
//   NONE           every pixel
//   RUNS           n runs of consecutive pixels within one row at a, four u32 each: first pixel,
//                  length, column and row of the first pixel; with weights (f64, packed run
//                  after run) at d, or d = 0 for a binary mask
//   DENSE_LANES    (integer data) a lane mask of the data's width at a (all-ones inside), one per pixel
//   DENSE_WEIGHTS  f64 weights at a, one per pixel
// With useThreshold, values below the threshold count as zero: integer data compare with the
// integer thrInt = ceil(threshold), float data with thrF. Non-finite values (float data) in the
// mask's support are left out and counted (returned).
//
// Every mode comes down to segments of consecutive pixels of one row. 8/16-bit data without
// weights are summed exactly in i32 lanes with no multiplications: lanes keep A = Σ v and
// B = Σ of the running A over the segment's 8-pixel steps, so that Σ_i i·v_i = J·A − B after
// J steps; a chunk of at most 256 steps keeps B below 2^32 (u16: 65535 · 256·257/2). Segment
// sums go to i64 and Σ I·y = Σ_y y · rowSum. 32-bit integers use i64 lanes the same way; float
// data and weights use f64 lanes. The last partial vector of a segment is loaded whole with
// the lanes past the segment's end masked off, so loads may reach a vector past the last
// pattern, into slack the JS side keeps after the tile.

import { finiteMaskF64, laneSumI32, laneSumWide, laneSumI64, laneSumF64, loadF64x2 } from './_simd-helpers';

const NONE: i32 = 0;
const RUNS: i32 = 1;
const DENSE_LANES: i32 = 2;
const DENSE_WEIGHTS: i32 = 3;

/** 8-pixel steps per chunk of an 8/16-bit segment (see the B bound above). */
const CHUNK_STEPS: i32 = 256;
/** 4-pixel steps per chunk of a 32-bit segment: keeps J·S and x0·S of a chunk far below 2^63. */
const CHUNK_STEPS_WIDE: i32 = 4096;

// Sums of the last segment (module globals: a segment returns two numbers).
let segmentSumI: i64 = 0;
let segmentXI: i64 = 0;
let segmentSumF: f64 = 0;
let segmentXF: f64 = 0;
let segmentMisses: i64 = 0;

export function comUint8(tile: usize, nPatterns: i32, detY: i32, detX: i32, mode: i32, a: usize, d: usize, n: i32,
  useThreshold: i32, thrInt: i32, thrF: f64, totalOut: usize, sumXOut: usize, sumYOut: usize): f64 {
  return com<u8>(tile, nPatterns, detY, detX, mode, a, d, n, useThreshold, thrInt, thrF, totalOut, sumXOut, sumYOut);
}
export function comUint16(tile: usize, nPatterns: i32, detY: i32, detX: i32, mode: i32, a: usize, d: usize, n: i32,
  useThreshold: i32, thrInt: i32, thrF: f64, totalOut: usize, sumXOut: usize, sumYOut: usize): f64 {
  return com<u16>(tile, nPatterns, detY, detX, mode, a, d, n, useThreshold, thrInt, thrF, totalOut, sumXOut, sumYOut);
}
export function comUint32(tile: usize, nPatterns: i32, detY: i32, detX: i32, mode: i32, a: usize, d: usize, n: i32,
  useThreshold: i32, thrInt: i32, thrF: f64, totalOut: usize, sumXOut: usize, sumYOut: usize): f64 {
  return com<u32>(tile, nPatterns, detY, detX, mode, a, d, n, useThreshold, thrInt, thrF, totalOut, sumXOut, sumYOut);
}
export function comInt8(tile: usize, nPatterns: i32, detY: i32, detX: i32, mode: i32, a: usize, d: usize, n: i32,
  useThreshold: i32, thrInt: i32, thrF: f64, totalOut: usize, sumXOut: usize, sumYOut: usize): f64 {
  return com<i8>(tile, nPatterns, detY, detX, mode, a, d, n, useThreshold, thrInt, thrF, totalOut, sumXOut, sumYOut);
}
export function comInt16(tile: usize, nPatterns: i32, detY: i32, detX: i32, mode: i32, a: usize, d: usize, n: i32,
  useThreshold: i32, thrInt: i32, thrF: f64, totalOut: usize, sumXOut: usize, sumYOut: usize): f64 {
  return com<i16>(tile, nPatterns, detY, detX, mode, a, d, n, useThreshold, thrInt, thrF, totalOut, sumXOut, sumYOut);
}
export function comInt32(tile: usize, nPatterns: i32, detY: i32, detX: i32, mode: i32, a: usize, d: usize, n: i32,
  useThreshold: i32, thrInt: i32, thrF: f64, totalOut: usize, sumXOut: usize, sumYOut: usize): f64 {
  return com<i32>(tile, nPatterns, detY, detX, mode, a, d, n, useThreshold, thrInt, thrF, totalOut, sumXOut, sumYOut);
}
export function comFloat32(tile: usize, nPatterns: i32, detY: i32, detX: i32, mode: i32, a: usize, d: usize, n: i32,
  useThreshold: i32, thrInt: i32, thrF: f64, totalOut: usize, sumXOut: usize, sumYOut: usize): f64 {
  return com<f32>(tile, nPatterns, detY, detX, mode, a, d, n, useThreshold, thrInt, thrF, totalOut, sumXOut, sumYOut);
}
export function comFloat64(tile: usize, nPatterns: i32, detY: i32, detX: i32, mode: i32, a: usize, d: usize, n: i32,
  useThreshold: i32, thrInt: i32, thrF: f64, totalOut: usize, sumXOut: usize, sumYOut: usize): f64 {
  return com<f64>(tile, nPatterns, detY, detX, mode, a, d, n, useThreshold, thrInt, thrF, totalOut, sumXOut, sumYOut);
}

/** Whether segments of T (and this mask) are summed in integer lanes, exactly. */
// @ts-ignore: decorator
@inline function integerPath<T extends number>(weighted: bool): bool {
  return isInteger<T>() && !weighted;
}

// @ts-ignore: decorator
@inline function com<T extends number>(tile: usize, nPatterns: i32, detY: i32, detX: i32, mode: i32, a: usize, d: usize, n: i32,
  useThreshold: i32, thrInt: i32, thrF: f64, totalOut: usize, sumXOut: usize, sumYOut: usize): f64 {
  const patternBytes = <usize>detY * <usize>detX * sizeof<T>();
  const rowBytes = <usize>detX * sizeof<T>();
  const thr = useThreshold != 0;
  const weighted = mode == DENSE_WEIGHTS || (mode == RUNS && d != 0);
  const lanesMasked = mode == DENSE_LANES;
  segmentMisses = 0;

  for (let p = 0; p < nPatterns; p++) {
    const pattern = tile + <usize>p * patternBytes;
    let totalI: i64 = 0, sumXI: i64 = 0, sumYI: i64 = 0;
    let totalF: f64 = 0, sumXF: f64 = 0, sumYF: f64 = 0;
    if (mode == RUNS) {
      let w = d;
      for (let r = 0; r < n; r++) {
        const run = a + <usize>r * 16;
        const length = load<i32>(run, 4);
        const x0 = load<i32>(run, 8);
        const y = load<i32>(run, 12);
        segment<T>(pattern + <usize>load<u32>(run) * sizeof<T>(), x0, length, 0, false, w, weighted, thr, thrInt, thrF);
        if (weighted) w += <usize>length * 8;
        if (integerPath<T>(weighted) && sizeof<T>() <= 2) {
          totalI += segmentSumI; sumXI += segmentXI; sumYI += <i64>y * segmentSumI;
        } else {
          totalF += segmentSumF; sumXF += segmentXF; sumYF += <f64>y * segmentSumF;
        }
      }
    } else {
      for (let y = 0; y < detY; y++) {
        const rowOffset = <usize>y * <usize>detX;
        const maskRow = lanesMasked ? a + rowOffset * sizeof<T>() : 0;
        const weightRow = mode == DENSE_WEIGHTS ? a + rowOffset * 8 : 0;
        segment<T>(pattern + <usize>y * rowBytes, 0, detX, maskRow, lanesMasked, weightRow, weighted, thr, thrInt, thrF);
        if (integerPath<T>(weighted) && sizeof<T>() <= 2) {
          totalI += segmentSumI; sumXI += segmentXI; sumYI += <i64>y * segmentSumI;
        } else {
          totalF += segmentSumF; sumXF += segmentXF; sumYF += <f64>y * segmentSumF;
        }
      }
    }
    const o = <usize>p * 8;
    if (integerPath<T>(weighted) && sizeof<T>() <= 2) {
      store<f64>(totalOut + o, <f64>totalI);
      store<f64>(sumXOut + o, <f64>sumXI);
      store<f64>(sumYOut + o, <f64>sumYI);
    } else {
      store<f64>(totalOut + o, totalF);
      store<f64>(sumXOut + o, sumXF);
      store<f64>(sumYOut + o, sumYF);
    }
  }
  return <f64>segmentMisses;
}

/**
 * Σ v and Σ v·x over `length` consecutive pixels of one row from p, whose first pixel is in
 * column x0: into segmentSumI/segmentXI (8/16-bit integers, exact) or segmentSumF/segmentXF.
 */
// @ts-ignore: decorator
@inline function segment<T extends number>(p: usize, x0: i32, length: i32, mask: usize, masked: bool, weights: usize, weighted: bool,
  thr: bool, thrInt: i32, thrF: f64): void {
  if (integerPath<T>(weighted)) {
    if (sizeof<T>() <= 2) segmentNarrow<T>(p, x0, length, mask, masked, thr, thrInt);
    else segmentWide<T>(p, x0, length, mask, masked, thr, thrInt);
  } else {
    segmentF64<T>(p, x0, length, weights, weighted, thr, thrF);
  }
}

/** Lanes of T below `count` (the part of a segment's last vector inside the segment). */
// @ts-ignore: decorator
@inline function leadingLanes<T extends number>(count: i32): v128 {
  if (sizeof<T>() == 1) return i8x16.lt_u(i8x16(0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15), i8x16.splat(<i8>count));
  if (sizeof<T>() == 2) return i16x8.lt_u(i16x8(0, 1, 2, 3, 4, 5, 6, 7), i16x8.splat(<i16>count));
  return i32x4.lt_u(i32x4(0, 1, 2, 3), i32x4.splat(count));
}

// ---------------------------------------------------------------------------------------------
// 8- and 16-bit integers: exact, in i32 lanes.

// @ts-ignore: decorator
@inline function segmentNarrow<T extends number>(p: usize, x0: i32, length: i32, mask: usize, masked: bool, thr: bool, thrInt: i32): void {
  const lanes = 16 / <i32>sizeof<T>(); // elements per vector: 8 or 16
  const stepsPerLoad = lanes / 8;
  const nFull = length / lanes;
  const nLoads = (length + lanes - 1) / lanes;
  const chunkLoads = CHUNK_STEPS / stepsPerLoad;
  const thrV = v128.splat<T>(<T>thrInt);
  const k0123 = i32x4(0, 1, 2, 3);
  const k4567 = i32x4(4, 5, 6, 7);
  let sum: i64 = 0, sumX: i64 = 0;
  for (let j0 = 0; j0 < nLoads; j0 += chunkLoads) {
    const j1 = min(j0 + chunkLoads, nLoads);
    const full = min(j1, nFull);
    let a0 = i32x4.splat(0), a1 = a0, b0 = a0, b1 = a0;
    for (let j = j0; j < full; j++) {
      const o = <usize>j * 16;
      let v = v128.load(p + o);
      if (thr) v = v128.and(v, v128.ge<T>(v, thrV));
      if (masked) v = v128.and(v, v128.load(mask + o));
      if (sizeof<T>() == 2) {
        a0 = i32x4.add(a0, v128.extend_low<T>(v));
        a1 = i32x4.add(a1, v128.extend_high<T>(v));
        b0 = i32x4.add(b0, a0);
        b1 = i32x4.add(b1, a1);
      } else {
        const lo = v128.extend_low<T>(v);
        const hi = v128.extend_high<T>(v);
        a0 = i32x4.add(a0, widenLow16<T>(lo));
        a1 = i32x4.add(a1, widenHigh16<T>(lo));
        b0 = i32x4.add(b0, a0);
        b1 = i32x4.add(b1, a1);
        a0 = i32x4.add(a0, widenLow16<T>(hi));
        a1 = i32x4.add(a1, widenHigh16<T>(hi));
        b0 = i32x4.add(b0, a0);
        b1 = i32x4.add(b1, a1);
      }
    }
    if (j1 > nFull) {
      // The segment's last, partial vector.
      const o = <usize>nFull * 16;
      let v = v128.and(v128.load(p + o), leadingLanes<T>(length - nFull * lanes));
      if (thr) v = v128.and(v, v128.ge<T>(v, thrV));
      if (masked) v = v128.and(v, v128.load(mask + o));
      if (sizeof<T>() == 2) {
        a0 = i32x4.add(a0, v128.extend_low<T>(v));
        a1 = i32x4.add(a1, v128.extend_high<T>(v));
        b0 = i32x4.add(b0, a0);
        b1 = i32x4.add(b1, a1);
      } else {
        const lo = v128.extend_low<T>(v);
        const hi = v128.extend_high<T>(v);
        a0 = i32x4.add(a0, widenLow16<T>(lo));
        a1 = i32x4.add(a1, widenHigh16<T>(lo));
        b0 = i32x4.add(b0, a0);
        b1 = i32x4.add(b1, a1);
        a0 = i32x4.add(a0, widenLow16<T>(hi));
        a1 = i32x4.add(a1, widenHigh16<T>(hi));
        b0 = i32x4.add(b0, a0);
        b1 = i32x4.add(b1, a1);
      }
    }
    // Lane k of a0|a1 holds Σ over the chunk's 8-pixel steps i of v[xc + 8i + k].
    const steps = <i64>((j1 - j0) * stepsPerLoad);
    const s = <i64>laneSumI32(i32x4.add(a0, a1));
    const bSum = laneSumWide<T>(b0) + laneSumWide<T>(b1);
    const k = <i64>laneSumI32(i32x4.add(i32x4.mul(a0, k0123), i32x4.mul(a1, k4567)));
    const xc = <i64>x0 + <i64>(j0 * lanes);
    sum += s;
    sumX += xc * s + 8 * (steps * s - bSum) + k;
  }
  segmentSumI = sum;
  segmentXI = sumX;
}

/** Lanes 0–3 of eight 16-bit lanes widened to i32 (unsigned for unsigned T). */
// @ts-ignore: decorator
@inline function widenLow16<T extends number>(v: v128): v128 {
  return isSigned<T>() ? i32x4.extend_low_i16x8_s(v) : i32x4.extend_low_i16x8_u(v);
}

// @ts-ignore: decorator
@inline function widenHigh16<T extends number>(v: v128): v128 {
  return isSigned<T>() ? i32x4.extend_high_i16x8_s(v) : i32x4.extend_high_i16x8_u(v);
}

// ---------------------------------------------------------------------------------------------
// 32-bit integers: exact per chunk in i64 lanes, then f64.

// @ts-ignore: decorator
@inline function segmentWide<T extends number>(p: usize, x0: i32, length: i32, mask: usize, masked: bool, thr: bool, thrInt: i32): void {
  const nFull = length >> 2;
  const nLoads = (length + 3) >> 2;
  const thrV = i32x4.splat(thrInt);
  let sum: f64 = 0, sumX: f64 = 0;
  for (let j0 = 0; j0 < nLoads; j0 += CHUNK_STEPS_WIDE) {
    const j1 = min(j0 + CHUNK_STEPS_WIDE, nLoads);
    let a0 = i64x2.splat(0), a1 = a0, b0 = a0, b1 = a0;
    for (let j = j0; j < j1; j++) {
      const o = <usize>j * 16;
      let v = v128.load(p + o);
      if (j >= nFull) v = v128.and(v, leadingLanes<T>(length - nFull * 4));
      if (thr) v = v128.and(v, v128.ge<T>(v, thrV));
      if (masked) v = v128.and(v, v128.load(mask + o));
      if (isSigned<T>()) {
        a0 = i64x2.add(a0, i64x2.extend_low_i32x4_s(v));
        a1 = i64x2.add(a1, i64x2.extend_high_i32x4_s(v));
      } else {
        a0 = i64x2.add(a0, i64x2.extend_low_i32x4_u(v));
        a1 = i64x2.add(a1, i64x2.extend_high_i32x4_u(v));
      }
      b0 = i64x2.add(b0, a0);
      b1 = i64x2.add(b1, a1);
    }
    const steps = <i64>(j1 - j0);
    const s = laneSumI64(i64x2.add(a0, a1));
    const bSum = laneSumI64(i64x2.add(b0, b1));
    const k = i64x2.extract_lane(a0, 1) + 2 * i64x2.extract_lane(a1, 0) + 3 * i64x2.extract_lane(a1, 1);
    const xc = <i64>x0 + <i64>j0 * 4;
    sum += <f64>s;
    sumX += <f64>(xc * s + 4 * (steps * s - bSum) + k);
  }
  segmentSumF = sum;
  segmentXF = sumX;
}

// ---------------------------------------------------------------------------------------------
// Float data, and weights over any data: f64 lanes, two pixels per vector.

// @ts-ignore: decorator
@inline function segmentF64<T extends number>(p: usize, x0: i32, length: i32, weights: usize, weighted: bool, thr: bool, thrF: f64): void {
  const nPairs = length >> 1;
  const thrV = f64x2.splat(thrF);
  const two = f64x2.splat(2);
  const zero = f64x2.splat(0);
  let s0 = zero, s1 = zero, x0s = zero, x1s = zero;
  let misses = i64x2.splat(0);
  let xs = f64x2(<f64>x0, <f64>(x0 + 1));
  let i = 0;
  // Two pairs per step into separate sums, so consecutive f64 adds do not wait on each other.
  for (; i + 2 <= nPairs; i += 2) {
    const q = p + <usize>i * 2 * sizeof<T>();
    let v = loadF64x2<T>(q);
    let u = loadF64x2<T>(q + 2 * sizeof<T>());
    const w = weighted ? v128.load(weights + <usize>i * 16) : zero;
    const wu = weighted ? v128.load(weights + <usize>i * 16, 16) : zero;
    if (isFloat<T>()) {
      const fv = finiteMaskF64(v);
      const fu = finiteMaskF64(u);
      if (weighted) {
        misses = i64x2.add(misses, i64x2.add(v128.andnot(f64x2.ne(w, zero), fv), v128.andnot(f64x2.ne(wu, zero), fu)));
      } else {
        misses = i64x2.add(misses, i64x2.add(v128.not(fv), v128.not(fu)));
      }
      v = v128.and(v, fv);
      u = v128.and(u, fu);
    }
    if (thr) {
      v = v128.and(v, f64x2.ge(v, thrV));
      u = v128.and(u, f64x2.ge(u, thrV));
    }
    if (weighted) {
      v = f64x2.mul(v, w);
      u = f64x2.mul(u, wu);
    }
    const xu = f64x2.add(xs, two);
    s0 = f64x2.add(s0, v);
    s1 = f64x2.add(s1, u);
    x0s = f64x2.add(x0s, f64x2.mul(v, xs));
    x1s = f64x2.add(x1s, f64x2.mul(u, xu));
    xs = f64x2.add(xu, two);
  }
  // The last pair or two, the second pair possibly half inside the segment.
  for (; i * 2 < length; i++) {
    const inside = i * 2 + 1 < length ? i64x2(-1, -1) : i64x2(-1, 0);
    let v = loadF64x2<T>(p + <usize>i * 2 * sizeof<T>());
    let w = weighted ? v128.and(v128.load(weights + <usize>i * 16), inside) : zero;
    if (isFloat<T>()) {
      const fv = finiteMaskF64(v);
      const support = weighted ? f64x2.ne(w, zero) : inside;
      misses = i64x2.add(misses, v128.andnot(support, fv));
      v = v128.and(v, fv);
    }
    v = v128.and(v, inside);
    if (thr) v = v128.and(v, f64x2.ge(v, thrV));
    if (weighted) v = f64x2.mul(v, w);
    s0 = f64x2.add(s0, v);
    x0s = f64x2.add(x0s, f64x2.mul(v, xs));
    xs = f64x2.add(xs, two);
  }
  segmentSumF = laneSumF64(f64x2.add(s0, s1));
  segmentXF = laneSumF64(f64x2.add(x0s, x1s));
  if (isFloat<T>()) segmentMisses -= laneSumI64(misses);
}
