// AssemblyScript helpers shared by the detector kernels (virtual-image.ts, com.ts). Not an entry
// of its own: the build compiles only wasm-src files whose names do not start with "_".

/** All-ones lanes where a float32 lane is finite (NaN and ±Infinity fail the comparison). */
// @ts-ignore: decorator
@inline export function finiteMaskF32(v: v128): v128 {
  return f32x4.lt(f32x4.abs(v), f32x4.splat(Infinity));
}

/** All-ones lanes where a float64 lane is finite. */
// @ts-ignore: decorator
@inline export function finiteMaskF64(v: v128): v128 {
  return f64x2.lt(f64x2.abs(v), f64x2.splat(Infinity));
}

/** Lanes 2, 3 of a 32-bit-lane vector moved to lanes 0, 1 (for promote_low / convert_low). */
// @ts-ignore: decorator
@inline export function highHalf(v: v128): v128 {
  return v128.shuffle<i32>(v, v, 2, 3, 2, 3);
}

// @ts-ignore: decorator
@inline export function laneSumI32(v: v128): i32 {
  const h = i32x4.add(v, highHalf(v));
  return i32x4.extract_lane(h, 0) + i32x4.extract_lane(h, 1);
}

/** Σ of four 32-bit lanes taken as unsigned (or signed), without wrapping. */
// @ts-ignore: decorator
@inline export function laneSumWide<T extends number>(v: v128): i64 {
  const w = isSigned<T>()
    ? i64x2.add(i64x2.extend_low_i32x4_s(v), i64x2.extend_high_i32x4_s(v))
    : i64x2.add(i64x2.extend_low_i32x4_u(v), i64x2.extend_high_i32x4_u(v));
  return i64x2.extract_lane(w, 0) + i64x2.extract_lane(w, 1);
}

// @ts-ignore: decorator
@inline export function laneSumI64(v: v128): i64 {
  return i64x2.extract_lane(v, 0) + i64x2.extract_lane(v, 1);
}

// @ts-ignore: decorator
@inline export function laneSumF64(v: v128): f64 {
  return f64x2.extract_lane(v, 0) + f64x2.extract_lane(v, 1);
}

/** Two consecutive elements of T at p as f64 lanes (exact for every T). */
// @ts-ignore: decorator
@inline export function loadF64x2<T extends number>(p: usize): v128 {
  if (isFloat<T>()) {
    if (sizeof<T>() == 8) return v128.load(p);
    return f64x2.promote_low_f32x4(v128.load64_zero(p));
  }
  if (sizeof<T>() == 4) {
    return isSigned<T>() ? f64x2.convert_low_i32x4_s(v128.load64_zero(p)) : f64x2.convert_low_i32x4_u(v128.load64_zero(p));
  }
  if (sizeof<T>() == 2) {
    const v = v128.load32_zero(p);
    return isSigned<T>()
      ? f64x2.convert_low_i32x4_s(i32x4.extend_low_i16x8_s(v))
      : f64x2.convert_low_i32x4_u(i32x4.extend_low_i16x8_u(v));
  }
  const b = v128.load16_splat(p);
  return isSigned<T>()
    ? f64x2.convert_low_i32x4_s(i32x4.extend_low_i16x8_s(i16x8.extend_low_i8x16_s(b)))
    : f64x2.convert_low_i32x4_u(i32x4.extend_low_i16x8_u(i16x8.extend_low_i8x16_u(b)));
}
