// AssemblyScript: the products of a randomized-SVD pass over one block of feature rows, compiled
// to WebAssembly SIMD (float64 lanes). The plain TypeScript twin is rangeBlock in
// ../randomized-svd.ts, the reference these results are tested against.
//
// The JS side (../sketch-wasm.ts) lays out every buffer in the imported memory and passes
// pointers; nothing here allocates. All matrices are row-major float64; `l` (the sketch width)
// is a multiple of 4, padded with zero columns by the caller.

/**
 * Take `centre` (d values, or 0 for none) out of each of the n rows of `a` (n × d) in place;
 * add the rows as they were to colSum (d values); return Σ of the squared centred entries.
 */
export function centreRows(a: usize, n: i32, d: i32, centre: usize, colSum: usize): f64 {
  let sumSq: f64 = 0;
  let acc = f64x2.splat(0);
  for (let i = 0; i < n; i++) {
    const row = a + <usize>i * <usize>d * 8;
    let j = 0;
    for (; j + 2 <= d; j += 2) {
      const off = <usize>j * 8;
      const v = v128.load(row + off);
      v128.store(colSum + off, f64x2.add(v128.load(colSum + off), v));
      const c = centre != 0 ? f64x2.sub(v, v128.load(centre + off)) : v;
      v128.store(row + off, c);
      acc = f64x2.add(acc, f64x2.mul(c, c));
    }
    for (; j < d; j++) {
      const off = <usize>j * 8;
      const v = load<f64>(row + off);
      store<f64>(colSum + off, load<f64>(colSum + off) + v);
      const c = centre != 0 ? v - load<f64>(centre + off) : v;
      store<f64>(row + off, c);
      sumSq += c * c;
    }
  }
  return sumSq + f64x2.extract_lane(acc, 0) + f64x2.extract_lane(acc, 1);
}

/**
 * out (m × l) = a (m × k) · b (k × l), or out += a·b when `accumulate` is nonzero. l must be a
 * multiple of 4. Register tiles of 4 rows × 4 columns (eight two-lane accumulators) walk the
 * inner dimension, so each value of b loaded serves four rows and each of a four columns.
 */
export function matmul(a: usize, m: i32, k: i32, b: usize, l: i32, out: usize, accumulate: i32): void {
  const rowA = <usize>k * 8;
  const rowB = <usize>l * 8;
  let r = 0;
  for (; r + 4 <= m; r += 4) {
    const a0 = a + <usize>r * rowA, a1 = a0 + rowA, a2 = a1 + rowA, a3 = a2 + rowA;
    for (let c = 0; c < l; c += 4) {
      let s00 = f64x2.splat(0), s01 = s00, s10 = s00, s11 = s00, s20 = s00, s21 = s00, s30 = s00, s31 = s00;
      let bp = b + <usize>c * 8;
      for (let j = 0; j < k; j++) {
        const off = <usize>j * 8;
        const b0 = v128.load(bp), b1 = v128.load(bp, 16);
        const x0 = f64x2.splat(load<f64>(a0 + off));
        const x1 = f64x2.splat(load<f64>(a1 + off));
        const x2 = f64x2.splat(load<f64>(a2 + off));
        const x3 = f64x2.splat(load<f64>(a3 + off));
        s00 = f64x2.add(s00, f64x2.mul(x0, b0)); s01 = f64x2.add(s01, f64x2.mul(x0, b1));
        s10 = f64x2.add(s10, f64x2.mul(x1, b0)); s11 = f64x2.add(s11, f64x2.mul(x1, b1));
        s20 = f64x2.add(s20, f64x2.mul(x2, b0)); s21 = f64x2.add(s21, f64x2.mul(x2, b1));
        s30 = f64x2.add(s30, f64x2.mul(x3, b0)); s31 = f64x2.add(s31, f64x2.mul(x3, b1));
        bp += rowB;
      }
      const o = out + (<usize>r * <usize>l + <usize>c) * 8;
      storeTile(o, s00, s01, accumulate);
      storeTile(o + rowB, s10, s11, accumulate);
      storeTile(o + 2 * rowB, s20, s21, accumulate);
      storeTile(o + 3 * rowB, s30, s31, accumulate);
    }
  }
  for (; r < m; r++) {
    const a0 = a + <usize>r * rowA;
    for (let c = 0; c < l; c += 4) {
      let s0 = f64x2.splat(0), s1 = s0;
      let bp = b + <usize>c * 8;
      for (let j = 0; j < k; j++) {
        const x0 = f64x2.splat(load<f64>(a0 + <usize>j * 8));
        s0 = f64x2.add(s0, f64x2.mul(x0, v128.load(bp)));
        s1 = f64x2.add(s1, f64x2.mul(x0, v128.load(bp, 16)));
        bp += rowB;
      }
      storeTile(out + (<usize>r * <usize>l + <usize>c) * 8, s0, s1, accumulate);
    }
  }
}

/**
 * out (k × l) = aᵀ · b, with a (m × k) and b (m × l) row-major, l a multiple of 4: the products
 * Cᵀ·Y without transposing C. Register tiles of 4 columns of a × 4 columns of b walk the rows;
 * the strip of a they read (m rows × 4 values) stays in cache while the tiles of b pass over it.
 */
export function matmulTransA(a: usize, m: i32, k: i32, b: usize, l: i32, out: usize, accumulate: i32): void {
  const rowA = <usize>k * 8;
  const rowB = <usize>l * 8;
  let j = 0;
  for (; j + 4 <= k; j += 4) {
    for (let c = 0; c < l; c += 4) {
      let s00 = f64x2.splat(0), s01 = s00, s10 = s00, s11 = s00, s20 = s00, s21 = s00, s30 = s00, s31 = s00;
      let ap = a + <usize>j * 8;
      let bp = b + <usize>c * 8;
      for (let r = 0; r < m; r++) {
        const b0 = v128.load(bp), b1 = v128.load(bp, 16);
        const xa = v128.load(ap), xb = v128.load(ap, 16);
        const x0 = v128.shuffle<f64>(xa, xa, 0, 0), x1 = v128.shuffle<f64>(xa, xa, 1, 1);
        const x2 = v128.shuffle<f64>(xb, xb, 0, 0), x3 = v128.shuffle<f64>(xb, xb, 1, 1);
        s00 = f64x2.add(s00, f64x2.mul(x0, b0)); s01 = f64x2.add(s01, f64x2.mul(x0, b1));
        s10 = f64x2.add(s10, f64x2.mul(x1, b0)); s11 = f64x2.add(s11, f64x2.mul(x1, b1));
        s20 = f64x2.add(s20, f64x2.mul(x2, b0)); s21 = f64x2.add(s21, f64x2.mul(x2, b1));
        s30 = f64x2.add(s30, f64x2.mul(x3, b0)); s31 = f64x2.add(s31, f64x2.mul(x3, b1));
        ap += rowA;
        bp += rowB;
      }
      const o = out + (<usize>j * <usize>l + <usize>c) * 8;
      storeTile(o, s00, s01, accumulate);
      storeTile(o + rowB, s10, s11, accumulate);
      storeTile(o + 2 * rowB, s20, s21, accumulate);
      storeTile(o + 3 * rowB, s30, s31, accumulate);
    }
  }
  for (; j < k; j++) {
    for (let c = 0; c < l; c += 4) {
      let s0 = f64x2.splat(0), s1 = s0;
      let ap = a + <usize>j * 8;
      let bp = b + <usize>c * 8;
      for (let r = 0; r < m; r++) {
        const x = f64x2.splat(load<f64>(ap));
        s0 = f64x2.add(s0, f64x2.mul(x, v128.load(bp)));
        s1 = f64x2.add(s1, f64x2.mul(x, v128.load(bp, 16)));
        ap += rowA;
        bp += rowB;
      }
      storeTile(out + (<usize>j * <usize>l + <usize>c) * 8, s0, s1, accumulate);
    }
  }
}

// @ts-ignore: decorator
@inline function storeTile(p: usize, lo: v128, hi: v128, accumulate: i32): void {
  if (accumulate != 0) {
    lo = f64x2.add(lo, v128.load(p));
    hi = f64x2.add(hi, v128.load(p, 16));
  }
  v128.store(p, lo);
  v128.store(p, hi, 16);
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
