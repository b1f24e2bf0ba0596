// AssemblyScript: the products of a randomized-SVD pass over one block of feature rows, compiled
// to WebAssembly SIMD. The plain TypeScript twin is rangeBlock in ../randomized-svd.ts, the
// reference these results are tested against.
//
// The feature rows arrive in float32, as the caller made them (a user's matrix in float32 holds
// the same values); centreRows sums the columns and the squares in float64 (exact enough for the
// mean and the total variance) and takes the centre out in place. The products run on those
// rows in float32 lanes (four to a vector, twice the float64 rate): each Y entry sums d
// products, each W entry the block's m rows, and the caller adds the blocks' W in float64. That
// is the precision a float32 matrix gets in any library's products; the range finder needs far
// less.
//
// The JS side (../sketch-wasm.ts) lays out every buffer in the imported memory and passes
// pointers; nothing here allocates. All matrices are row-major; `l` (the sketch width) is a
// multiple of 8, padded with zero columns by the caller.

/**
 * For the n rows of `a` (n × d float32), in place: add each row as it is to colSum (d float64
 * values), take `centre` (d float64 values, or 0 for none) out of it, and write it back in
 * float32; return Σ of the squared centred entries (in float64, before the rounding to float32).
 */
export function centreRows(a: usize, n: i32, d: i32, centre: usize, colSum: usize): f64 {
  let sumSq: f64 = 0;
  let acc = f64x2.splat(0);
  for (let i = 0; i < n; i++) {
    const row = a + <usize>i * <usize>d * 4;
    let j = 0;
    for (; j + 4 <= d; j += 4) {
      const off = <usize>j * 8;
      const v = v128.load(row + <usize>j * 4);
      const v0 = f64x2.promote_low_f32x4(v), v1 = f64x2.promote_low_f32x4(v128.shuffle<f32>(v, v, 2, 3, 2, 3));
      v128.store(colSum + off, f64x2.add(v128.load(colSum + off), v0));
      v128.store(colSum + off, f64x2.add(v128.load(colSum + off, 16), v1), 16);
      if (centre != 0) {
        const c0 = f64x2.sub(v0, v128.load(centre + off));
        const c1 = f64x2.sub(v1, v128.load(centre + off, 16));
        acc = f64x2.add(acc, f64x2.add(f64x2.mul(c0, c0), f64x2.mul(c1, c1)));
        const h0 = f32x4.demote_f64x2_zero(c0), h1 = f32x4.demote_f64x2_zero(c1);
        v128.store(row + <usize>j * 4, v128.shuffle<f32>(h0, h1, 0, 1, 4, 5));
      } else {
        acc = f64x2.add(acc, f64x2.add(f64x2.mul(v0, v0), f64x2.mul(v1, v1)));
      }
    }
    for (; j < d; j++) {
      const off = <usize>j * 8;
      const v = <f64>load<f32>(row + <usize>j * 4);
      store<f64>(colSum + off, load<f64>(colSum + off) + v);
      const c = centre != 0 ? v - load<f64>(centre + off) : v;
      store<f32>(row + <usize>j * 4, <f32>c);
      sumSq += c * c;
    }
  }
  return sumSq + f64x2.extract_lane(acc, 0) + f64x2.extract_lane(acc, 1);
}

/**
 * out (m × l) = a (m × k) · b (k × l), all float32; l a multiple of 8. Register tiles of 4 rows
 * × 8 columns (eight four-lane accumulators) walk the inner dimension, so each vector of b
 * loaded serves four rows and each value of a (loaded straight into all four lanes) eight columns.
 */
export function matmul(a: usize, m: i32, k: i32, b: usize, l: i32, out: usize): void {
  const rowA = <usize>k * 4;
  const rowB = <usize>l * 4;
  let r = 0;
  for (; r + 4 <= m; r += 4) {
    const a0 = a + <usize>r * rowA, a1 = a0 + rowA, a2 = a1 + rowA, a3 = a2 + rowA;
    for (let c = 0; c < l; c += 8) {
      let s00 = f32x4.splat(0), s01 = s00, s10 = s00, s11 = s00, s20 = s00, s21 = s00, s30 = s00, s31 = s00;
      let bp = b + <usize>c * 4;
      for (let off: usize = 0; off < rowA; off += 4) {
        const b0 = v128.load(bp), b1 = v128.load(bp, 16);
        const x0 = v128.load32_splat(a0 + off);
        s00 = madd(x0, b0, s00); s01 = madd(x0, b1, s01);
        const x1 = v128.load32_splat(a1 + off);
        s10 = madd(x1, b0, s10); s11 = madd(x1, b1, s11);
        const x2 = v128.load32_splat(a2 + off);
        s20 = madd(x2, b0, s20); s21 = madd(x2, b1, s21);
        const x3 = v128.load32_splat(a3 + off);
        s30 = madd(x3, b0, s30); s31 = madd(x3, b1, s31);
        bp += rowB;
      }
      const o = out + (<usize>r * <usize>l + <usize>c) * 4;
      v128.store(o, s00); v128.store(o, s01, 16);
      v128.store(o + rowB, s10); v128.store(o + rowB, s11, 16);
      v128.store(o + 2 * rowB, s20); v128.store(o + 2 * rowB, s21, 16);
      v128.store(o + 3 * rowB, s30); v128.store(o + 3 * rowB, s31, 16);
    }
  }
  for (; r < m; r++) {
    const a0 = a + <usize>r * rowA;
    for (let c = 0; c < l; c += 8) {
      let s0 = f32x4.splat(0), s1 = s0;
      let bp = b + <usize>c * 4;
      for (let off: usize = 0; off < rowA; off += 4) {
        const x0 = v128.load32_splat(a0 + off);
        s0 = madd(x0, v128.load(bp), s0);
        s1 = madd(x0, v128.load(bp, 16), s1);
        bp += rowB;
      }
      const o = out + (<usize>r * <usize>l + <usize>c) * 4;
      v128.store(o, s0); v128.store(o, s1, 16);
    }
  }
}

/**
 * out (k × l) = aᵀ · b, with a (m × k) and b (m × l) row-major float32, l a multiple of 8: the
 * products Cᵀ·Y without transposing C. Register tiles of 4 columns of a × 8 columns of b walk
 * the rows; the strip of a they read (m rows × 4 values) stays in cache while the tiles of b
 * pass over it.
 */
export function matmulTransA(a: usize, m: i32, k: i32, b: usize, l: i32, out: usize): void {
  const rowA = <usize>k * 4;
  const rowB = <usize>l * 4;
  let j = 0;
  for (; j + 4 <= k; j += 4) {
    for (let c = 0; c < l; c += 8) {
      let s00 = f32x4.splat(0), s01 = s00, s10 = s00, s11 = s00, s20 = s00, s21 = s00, s30 = s00, s31 = s00;
      let ap = a + <usize>j * 4;
      let bp = b + <usize>c * 4;
      for (let r = 0; r < m; r++) {
        const b0 = v128.load(bp), b1 = v128.load(bp, 16);
        const xa = v128.load(ap);
        const x0 = v128.shuffle<f32>(xa, xa, 0, 0, 0, 0), x1 = v128.shuffle<f32>(xa, xa, 1, 1, 1, 1);
        const x2 = v128.shuffle<f32>(xa, xa, 2, 2, 2, 2), x3 = v128.shuffle<f32>(xa, xa, 3, 3, 3, 3);
        s00 = madd(x0, b0, s00); s01 = madd(x0, b1, s01);
        s10 = madd(x1, b0, s10); s11 = madd(x1, b1, s11);
        s20 = madd(x2, b0, s20); s21 = madd(x2, b1, s21);
        s30 = madd(x3, b0, s30); s31 = madd(x3, b1, s31);
        ap += rowA;
        bp += rowB;
      }
      const o = out + (<usize>j * <usize>l + <usize>c) * 4;
      v128.store(o, s00); v128.store(o, s01, 16);
      v128.store(o + rowB, s10); v128.store(o + rowB, s11, 16);
      v128.store(o + 2 * rowB, s20); v128.store(o + 2 * rowB, s21, 16);
      v128.store(o + 3 * rowB, s30); v128.store(o + 3 * rowB, s31, 16);
    }
  }
  for (; j < k; j++) {
    for (let c = 0; c < l; c += 8) {
      let s0 = f32x4.splat(0), s1 = s0;
      let ap = a + <usize>j * 4;
      let bp = b + <usize>c * 4;
      for (let r = 0; r < m; r++) {
        const x = v128.load32_splat(ap);
        s0 = madd(x, v128.load(bp), s0);
        s1 = madd(x, v128.load(bp, 16), s1);
        ap += rowA;
        bp += rowB;
      }
      const o = out + (<usize>j * <usize>l + <usize>c) * 4;
      v128.store(o, s0); v128.store(o, s1, 16);
    }
  }
}

/**
 * c + a·b in four float32 lanes: one fused multiply-add where the build enables relaxed SIMD
 * (sketch-relaxed.wasm; rounded once, or twice where the machine has no FMA: either is within
 * the float32 bound the twin test checks), a multiply and an add otherwise (sketch.wasm).
 */
// @ts-ignore: decorator
@inline function madd(a: v128, b: v128, c: v128): v128 {
  if (ASC_FEATURE_RELAXED_SIMD) return f32x4.relaxed_madd(a, b, c);
  return f32x4.add(c, f32x4.mul(a, b));
}

/**
 * Per-cluster sums of uint16 patterns: sums (k × nPix, float64) gain each of the n patterns of
 * `tile` (n × nPix) under its label (labels: n int32, each 0 … k − 1; the caller checks them).
 * Eight pixels at a time: widened to 32-bit lanes, converted to float64 and added.
 */
export function clusterSumsU16(tile: usize, n: i32, nPix: i32, labels: usize, sums: usize): void {
  for (let p = 0; p < n; p++) {
    const c = load<i32>(labels + <usize>p * 4);
    const src = tile + <usize>p * <usize>nPix * 2;
    const dst = sums + <usize>c * <usize>nPix * 8;
    let i = 0;
    for (; i + 8 <= nPix; i += 8) {
      const v = v128.load(src + <usize>i * 2);
      const lo = i32x4.extend_low_i16x8_u(v), hi = i32x4.extend_high_i16x8_u(v);
      const d = dst + <usize>i * 8;
      v128.store(d, f64x2.add(v128.load(d), f64x2.convert_low_i32x4_u(lo)));
      v128.store(d, f64x2.add(v128.load(d, 16), f64x2.convert_low_i32x4_u(v128.shuffle<i32>(lo, lo, 2, 3, 2, 3))), 16);
      v128.store(d, f64x2.add(v128.load(d, 32), f64x2.convert_low_i32x4_u(hi)), 32);
      v128.store(d, f64x2.add(v128.load(d, 48), f64x2.convert_low_i32x4_u(v128.shuffle<i32>(hi, hi, 2, 3, 2, 3))), 48);
    }
    for (; i < nPix; i++) {
      const d = dst + <usize>i * 8;
      store<f64>(d, load<f64>(d) + <f64>load<u16>(src + <usize>i * 2));
    }
  }
}
