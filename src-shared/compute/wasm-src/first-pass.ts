// AssemblyScript: the hot loop of the first streaming pass, compiled to WebAssembly SIMD.
// The plain TypeScript twin (../first-pass.ts) is the reference these results are tested against.
//
// The JS side (../first-pass-wasm.ts) lays out every buffer in the imported memory and passes
// pointers; nothing here allocates. One call processes one tile of whole scan rows, C-order
// (nRows, scanX, detY, detX), and fills:
//   sumOut  f64[detY·detX]     Σ over the tile's patterns of the finite values
//   maxOut  f64[detY·detX]     max of the finite values (-Infinity if none)
//   totalOut f64[nRows·scanX]  Σ of each pattern
//   previewOut f32[ceil(nRows/scanBin)·qX·pY·pX]  detector-bin sums averaged over the scan bin
// and returns how many values were NaN or ±Infinity (left out of everything above).
//
// Scratch the JS side provides (contents need not survive between calls):
//   sumAcc  per-pixel sum lanes: 2 × the element width for 8/16-bit data, i64 for 32-bit
//           integers, unused for floats (which add straight into sumOut's f64)
//   maxAcc  per-pixel running max in the data's own type
//   binAcc  one row of detector bins: i32 lanes for 8/16-bit data, f64 otherwise (+64 bytes slack)
//   binF64  one row of detector bins in f64, used only when i32 bin lanes must be emptied mid-bin
//   columnAcc  one detector row of column sums (detX lanes of i32 or f64) for odd bin widths
//   previewAcc  f64 bins of one preview row (qX·pY·pX), used only when scanBin > 1
//
// Work is ordered so each pattern is read from main memory once and the per-pixel accumulators
// (which outgrow L1 for big detectors) are swept as rarely as possible: the same band of detBin
// detector rows of four consecutive patterns is folded into the per-pixel sum and max in one
// sweep, then each pattern's band (a few KiB) is binned while it is still in L1.
//
// Integer data are summed exactly in integer lanes, emptied into f64 before any lane could
// overflow. The caller keeps min(detBin, detX) ≤ 65536 and detBin, scanBin no larger than the
// extents they bin, so no 32-bit index or bin lane overflows within one detector row.

// ---------------------------------------------------------------------------------------------
// Exported entry points, one per dtype.

export function firstPassUint8(tile: usize, nRows: i32, scanX: i32, detY: i32, detX: i32, detBin: i32, scanBin: i32,
  sumOut: usize, maxOut: usize, totalOut: usize, previewOut: usize,
  sumAcc: usize, maxAcc: usize, binAcc: usize, binF64: usize, columnAcc: usize, previewAcc: usize): f64 {
  return firstPass<u8>(tile, nRows, scanX, detY, detX, detBin, scanBin, sumOut, maxOut, totalOut, previewOut, sumAcc, maxAcc, binAcc, binF64, columnAcc, previewAcc);
}
export function firstPassUint16(tile: usize, nRows: i32, scanX: i32, detY: i32, detX: i32, detBin: i32, scanBin: i32,
  sumOut: usize, maxOut: usize, totalOut: usize, previewOut: usize,
  sumAcc: usize, maxAcc: usize, binAcc: usize, binF64: usize, columnAcc: usize, previewAcc: usize): f64 {
  return firstPass<u16>(tile, nRows, scanX, detY, detX, detBin, scanBin, sumOut, maxOut, totalOut, previewOut, sumAcc, maxAcc, binAcc, binF64, columnAcc, previewAcc);
}
export function firstPassUint32(tile: usize, nRows: i32, scanX: i32, detY: i32, detX: i32, detBin: i32, scanBin: i32,
  sumOut: usize, maxOut: usize, totalOut: usize, previewOut: usize,
  sumAcc: usize, maxAcc: usize, binAcc: usize, binF64: usize, columnAcc: usize, previewAcc: usize): f64 {
  return firstPass<u32>(tile, nRows, scanX, detY, detX, detBin, scanBin, sumOut, maxOut, totalOut, previewOut, sumAcc, maxAcc, binAcc, binF64, columnAcc, previewAcc);
}
export function firstPassInt8(tile: usize, nRows: i32, scanX: i32, detY: i32, detX: i32, detBin: i32, scanBin: i32,
  sumOut: usize, maxOut: usize, totalOut: usize, previewOut: usize,
  sumAcc: usize, maxAcc: usize, binAcc: usize, binF64: usize, columnAcc: usize, previewAcc: usize): f64 {
  return firstPass<i8>(tile, nRows, scanX, detY, detX, detBin, scanBin, sumOut, maxOut, totalOut, previewOut, sumAcc, maxAcc, binAcc, binF64, columnAcc, previewAcc);
}
export function firstPassInt16(tile: usize, nRows: i32, scanX: i32, detY: i32, detX: i32, detBin: i32, scanBin: i32,
  sumOut: usize, maxOut: usize, totalOut: usize, previewOut: usize,
  sumAcc: usize, maxAcc: usize, binAcc: usize, binF64: usize, columnAcc: usize, previewAcc: usize): f64 {
  return firstPass<i16>(tile, nRows, scanX, detY, detX, detBin, scanBin, sumOut, maxOut, totalOut, previewOut, sumAcc, maxAcc, binAcc, binF64, columnAcc, previewAcc);
}
export function firstPassInt32(tile: usize, nRows: i32, scanX: i32, detY: i32, detX: i32, detBin: i32, scanBin: i32,
  sumOut: usize, maxOut: usize, totalOut: usize, previewOut: usize,
  sumAcc: usize, maxAcc: usize, binAcc: usize, binF64: usize, columnAcc: usize, previewAcc: usize): f64 {
  return firstPass<i32>(tile, nRows, scanX, detY, detX, detBin, scanBin, sumOut, maxOut, totalOut, previewOut, sumAcc, maxAcc, binAcc, binF64, columnAcc, previewAcc);
}
export function firstPassFloat32(tile: usize, nRows: i32, scanX: i32, detY: i32, detX: i32, detBin: i32, scanBin: i32,
  sumOut: usize, maxOut: usize, totalOut: usize, previewOut: usize,
  sumAcc: usize, maxAcc: usize, binAcc: usize, binF64: usize, columnAcc: usize, previewAcc: usize): f64 {
  return firstPass<f32>(tile, nRows, scanX, detY, detX, detBin, scanBin, sumOut, maxOut, totalOut, previewOut, sumAcc, maxAcc, binAcc, binF64, columnAcc, previewAcc);
}
export function firstPassFloat64(tile: usize, nRows: i32, scanX: i32, detY: i32, detX: i32, detBin: i32, scanBin: i32,
  sumOut: usize, maxOut: usize, totalOut: usize, previewOut: usize,
  sumAcc: usize, maxAcc: usize, binAcc: usize, binF64: usize, columnAcc: usize, previewAcc: usize): f64 {
  return firstPass<f64>(tile, nRows, scanX, detY, detX, detBin, scanBin, sumOut, maxOut, totalOut, previewOut, sumAcc, maxAcc, binAcc, binF64, columnAcc, previewAcc);
}

// ---------------------------------------------------------------------------------------------
// Lane widths and overflow limits.

/** Bytes of one per-pixel sum lane in sumAcc (0: floats add into sumOut directly). */
// @ts-ignore: decorator
@inline function sumLaneBytes<T extends number>(): usize {
  if (isFloat<T>()) return 0;
  if (sizeof<T>() == 4) return 8;
  return sizeof<T>() * 2;
}

/**
 * Patterns that fit into the per-pixel sum lanes before one could overflow; the lanes are then
 * emptied into sumOut's f64. u16 into u32: 65535 · 65537 = 2³² − 1; i16 into i32:
 * −32768 · 65536 = −2³¹; u8 into u16: 255 · 257 = 2¹⁶ − 1; i8 into i16: −128 · 256 = −2¹⁵.
 */
// @ts-ignore: decorator
@inline function patternsPerSumFlush<T extends number>(): i32 {
  if (isInteger<T>() && sizeof<T>() == 1) return isSigned<T>() ? 256 : 257;
  if (isInteger<T>() && sizeof<T>() == 2) return isSigned<T>() ? 65536 : 65537;
  return i32.MAX_VALUE; // i64 lanes hold 2³¹ patterns of 32-bit values; floats are f64 already
}

/** Whether detector bins are summed in 32-bit integer lanes (exact, fast) rather than f64. */
// @ts-ignore: decorator
@inline function binsInI32<T extends number>(): bool {
  return isInteger<T>() && sizeof<T>() <= 2;
}

/** Values one 32-bit bin lane can take before it could overflow. */
// @ts-ignore: decorator
@inline function valuesPerBinLane<T extends number>(): i32 {
  if (sizeof<T>() == 1) return isSigned<T>() ? 16777216 : 16843009; // 2³¹/128, (2³²−1)/255
  return isSigned<T>() ? 65536 : 65537;
}

// @ts-ignore: decorator
@inline function lowestValue<T extends number>(): T {
  if (isFloat<T>()) return <T>-Infinity;
  if (!isSigned<T>()) return <T>0;
  if (sizeof<T>() == 1) return <T>-128;
  if (sizeof<T>() == 2) return <T>-32768;
  return <T>i32.MIN_VALUE;
}

// ---------------------------------------------------------------------------------------------
// The tile driver.

/**
 * Patterns folded into the per-pixel sum and max together: each pass over those accumulators
 * (which outgrow L1 for big detectors) then serves four patterns instead of one.
 */
const GROUP: usize = 4;

// @ts-ignore: decorator
@inline function firstPass<T extends number>(tile: usize, nRows: i32, scanX: i32, detY: i32, detX: i32, detBin: i32, scanBin: i32,
  sumOut: usize, maxOut: usize, totalOut: usize, previewOut: usize,
  sumAcc: usize, maxAcc: usize, binAcc: usize, binF64: usize, columnAcc: usize, previewAcc: usize): f64 {
  const nPix = <usize>detY * <usize>detX;
  const patternBytes = nPix * sizeof<T>();
  const pY = (detY + detBin - 1) / detBin;
  const pX = (detX + detBin - 1) / detBin;
  const qX = (scanX + scanBin - 1) / scanBin;
  const binsPerPattern = <usize>pY * <usize>pX;
  const binLaneBytes: usize = binsInI32<T>() ? 4 : 8;

  memory.fill(sumOut, 0, nPix * 8);
  memory.fill(totalOut, 0, <usize>nRows * <usize>scanX * 8);
  if (sumLaneBytes<T>() != 0) memory.fill(sumAcc, 0, nPix * sumLaneBytes<T>());
  fillMax<T>(maxAcc, nPix);
  memory.fill(binAcc, 0, <usize>pX * binLaneBytes);

  // How many detector rows the i32 bin lanes may take before being emptied into binF64:
  // each row adds at most min(detBin, detX) values to a lane.
  let rowsPerBinFlush = i32.MAX_VALUE;
  if (binsInI32<T>()) rowsPerBinFlush = max(1, valuesPerBinLane<T>() / min(detBin, detX));

  let nonFinite: f64 = 0;
  let patternsInSumLanes = 0;
  const nPreviewRows = (nRows + scanBin - 1) / scanBin;
  for (let qr = 0; qr < nPreviewRows; qr++) {
    const r0 = qr * scanBin;
    const r1 = min(nRows, r0 + scanBin);
    if (scanBin > 1) memory.fill(previewAcc, 0, <usize>qX * binsPerPattern * 8);
    const end = <usize>r1 * <usize>scanX;
    let p = <usize>r0 * <usize>scanX;
    while (p < end) {
      const group: usize = end - p >= GROUP ? GROUP : 1;
      if (patternsInSumLanes + <i32>group > patternsPerSumFlush<T>()) {
        flushSumLanes<T>(sumAcc, sumOut, nPix);
        patternsInSumLanes = 0;
      }
      const first = tile + p * patternBytes;
      for (let by = 0; by < pY; by++) {
        const y0 = by * detBin;
        const y1 = min(detY, y0 + detBin);
        const bandStart = <usize>y0 * <usize>detX;
        const bandLength = <usize>(y1 - y0) * <usize>detX;
        const band = first + bandStart * sizeof<T>();
        const bandSum = sumAcc + bandStart * sumLaneBytes<T>();
        const bandMax = maxAcc + bandStart * sizeof<T>();
        const bandSumOut = sumOut + bandStart * 8;
        if (group == GROUP) nonFinite += <f64>accumulateBand4<T>(band, patternBytes, bandSum, bandMax, bandSumOut, bandLength);
        else nonFinite += <f64>accumulateBand<T>(band, bandSum, bandMax, bandSumOut, 0, bandLength);
        for (let j: usize = 0; j < group; j++) {
          const pattern = p + j;
          const c = <i32>(pattern % <usize>scanX);
          const binRowIndex = <usize>by * <usize>pX;
          const dest = scanBin == 1
            ? previewOut + ((<usize>qr * <usize>qX + <usize>c) * binsPerPattern + binRowIndex) * 4
            : previewAcc + (<usize>(c / scanBin) * binsPerPattern + binRowIndex) * 8;
          const bandTotal = binBand<T>(band + j * patternBytes, detX, y1 - y0, detBin, pX, binAcc, binF64, columnAcc, rowsPerBinFlush, dest, scanBin == 1);
          const totalAt = totalOut + pattern * 8;
          store<f64>(totalAt, load<f64>(totalAt) + bandTotal);
        }
      }
      patternsInSumLanes += <i32>group;
      p += group;
    }
    if (scanBin > 1) {
      writePreviewRow(previewAcc, previewOut + <usize>qr * <usize>qX * binsPerPattern * 4, scanX, scanBin, qX, binsPerPattern, r1 - r0);
    }
  }
  if (patternsInSumLanes > 0) flushSumLanes<T>(sumAcc, sumOut, nPix);
  for (let i: usize = 0; i < nPix; i++) store<f64>(maxOut + i * 8, <f64>load<T>(maxAcc + i * sizeof<T>()));
  return nonFinite;
}

/**
 * Bins one band (h ≤ detBin detector rows) of one pattern, emits the bin row and returns its total.
 * Common small bins of 8/16-bit and float32 data take the column-by-column SIMD path; other
 * widths sum the band down each column first; only bins too wide for that (8/16-bit data,
 * detBin > 256) go row by row, emptying the i32 bin lanes into f64 before they could overflow.
 */
// @ts-ignore: decorator
@inline function binBand<T extends number>(band: usize, detX: i32, h: i32, detBin: i32, pX: i32, binAcc: usize, binF64: usize,
  columnAcc: usize, rowsPerBinFlush: i32, dest: usize, destIsF32: bool): f64 {
  const rowBytes = <usize>detX * sizeof<T>();
  const x = binBandColumns<T>(band, rowBytes, detX, h, detBin, binAcc);
  let binF64Used = false;
  if (x >= 0) {
    if (x < detX) for (let y = 0; y < h; y++) binRowScalar<T>(band + <usize>y * rowBytes, x, detX, detBin, binAcc);
  } else if (!binsInI32<T>() || detBin <= MAX_COLUMN_SUM_ROWS) {
    binBandByColumnSums<T>(band, rowBytes, detX, h, detBin, binAcc, columnAcc);
  } else {
    let rowsInBinLanes = 0;
    for (let y = 0; y < h; y++) {
      binRowScalar<T>(band + <usize>y * rowBytes, 0, detX, detBin, binAcc);
      if (binsInI32<T>() && ++rowsInBinLanes == rowsPerBinFlush && y + 1 < h) {
        moveI32BinsToF64<T>(binAcc, binF64, pX, binF64Used);
        binF64Used = true;
        rowsInBinLanes = 0;
      }
    }
  }
  return emitBinRow<T>(binAcc, binF64, binF64Used, pX, dest, destIsF32);
}

/**
 * Widest bins whose sums binBandByColumnSums keeps in 32-bit lanes: 8-bit column sums of 256
 * rows fit 16-bit lanes, and a bin of 256 · 256 values of 16-bit data fits 32 bits
 * (65536 · 65535 < 2³², 65536 · −32768 = −2³¹).
 */
const MAX_COLUMN_SUM_ROWS = 256;

/**
 * Any bin width: the band's rows are summed down each column in registers (SIMD), then each
 * bin adds its columns. Stores every bin of the row (including the partial edge bin).
 */
// @ts-ignore: decorator
@inline function binBandByColumnSums<T extends number>(band: usize, rowBytes: usize, detX: i32, h: i32, detBin: i32, binAcc: usize, columnAcc: usize): void {
  let x = 0;
  if (isInteger<T>() && sizeof<T>() == 2) {
    for (; x + 8 <= detX; x += 8) {
      let s = band + <usize>x * 2;
      let lo = i32x4.splat(0), hi = lo;
      for (let y = 0; y < h; y++) {
        const v = v128.load(s);
        lo = i32x4.add(lo, v128.extend_low<T>(v));
        hi = i32x4.add(hi, v128.extend_high<T>(v));
        s += rowBytes;
      }
      const p = columnAcc + <usize>x * 4;
      v128.store(p, lo);
      v128.store(p, hi, 16);
    }
  } else if (isInteger<T>() && sizeof<T>() == 1) {
    for (; x + 16 <= detX; x += 16) {
      let s = band + <usize>x;
      let lo = i16x8.splat(0), hi = lo;
      for (let y = 0; y < h; y++) {
        const v = v128.load(s);
        lo = i16x8.add(lo, v128.extend_low<T>(v));
        hi = i16x8.add(hi, v128.extend_high<T>(v));
        s += rowBytes;
      }
      const p = columnAcc + <usize>x * 4;
      if (isSigned<T>()) {
        v128.store(p, i32x4.extend_low_i16x8_s(lo));
        v128.store(p, i32x4.extend_high_i16x8_s(lo), 16);
        v128.store(p, i32x4.extend_low_i16x8_s(hi), 32);
        v128.store(p, i32x4.extend_high_i16x8_s(hi), 48);
      } else {
        v128.store(p, i32x4.extend_low_i16x8_u(lo));
        v128.store(p, i32x4.extend_high_i16x8_u(lo), 16);
        v128.store(p, i32x4.extend_low_i16x8_u(hi), 32);
        v128.store(p, i32x4.extend_high_i16x8_u(hi), 48);
      }
    }
  } else if (isFloat<T>() && sizeof<T>() == 4) {
    for (; x + 4 <= detX; x += 4) {
      let s = band + <usize>x * 4;
      let lo = f64x2.splat(0), hi = lo;
      for (let y = 0; y < h; y++) {
        const v = finiteOrZeroF32(v128.load(s));
        lo = f64x2.add(lo, f64x2.promote_low_f32x4(v));
        hi = f64x2.add(hi, f64x2.promote_low_f32x4(highHalf(v)));
        s += rowBytes;
      }
      storeF64Lanes(columnAcc + <usize>x * 8, lo, hi);
    }
  } else if (isFloat<T>()) {
    for (; x + 2 <= detX; x += 2) {
      let s = band + <usize>x * 8;
      let acc = f64x2.splat(0);
      for (let y = 0; y < h; y++) {
        const v = v128.load(s);
        acc = f64x2.add(acc, v128.and(v, finiteMaskF64(v)));
        s += rowBytes;
      }
      v128.store(columnAcc + <usize>x * 8, acc);
    }
  } else {
    // 32-bit integers: exact in f64 for any band a tile can hold (h · 2³² < 2⁵³).
    for (; x + 4 <= detX; x += 4) {
      let s = band + <usize>x * 4;
      let lo = f64x2.splat(0), hi = lo;
      for (let y = 0; y < h; y++) {
        const v = v128.load(s);
        if (isSigned<T>()) {
          lo = f64x2.add(lo, f64x2.convert_low_i32x4_s(v));
          hi = f64x2.add(hi, f64x2.convert_low_i32x4_s(highHalf(v)));
        } else {
          lo = f64x2.add(lo, f64x2.convert_low_i32x4_u(v));
          hi = f64x2.add(hi, f64x2.convert_low_i32x4_u(highHalf(v)));
        }
        s += rowBytes;
      }
      storeF64Lanes(columnAcc + <usize>x * 8, lo, hi);
    }
  }
  // Columns past the last whole vector.
  for (; x < detX; x++) {
    let s = band + <usize>x * sizeof<T>();
    if (binsInI32<T>()) {
      let sum: i32 = 0;
      for (let y = 0; y < h; y++) { sum += <i32>load<T>(s); s += rowBytes; }
      store<i32>(columnAcc + <usize>x * 4, sum);
    } else {
      let sum: f64 = 0;
      for (let y = 0; y < h; y++) {
        const v = <f64>load<T>(s);
        if (isFloat<T>()) { if (Math.abs(v) < Infinity) sum += v; } else sum += v;
        s += rowBytes;
      }
      store<f64>(columnAcc + <usize>x * 8, sum);
    }
  }
  // Each bin adds its columns; i32 lanes wrap like the unsigned sums they stand for.
  let b = 0;
  for (let x0 = 0; x0 < detX; x0 += detBin) {
    const x1 = min(detX, x0 + detBin);
    if (binsInI32<T>()) {
      let sum: i32 = 0;
      for (let c = x0; c < x1; c++) sum += load<i32>(columnAcc + <usize>c * 4);
      store<i32>(binAcc + <usize>b * 4, sum);
    } else {
      let sum: f64 = 0;
      for (let c = x0; c < x1; c++) sum += load<f64>(columnAcc + <usize>c * 8);
      store<f64>(binAcc + <usize>b * 8, sum);
    }
    b++;
  }
}

// @ts-ignore: decorator
@inline function storeF64Lanes(p: usize, lo: v128, hi: v128): void {
  v128.store(p, lo);
  v128.store(p, hi, 16);
}

// @ts-ignore: decorator
@inline function fillMax<T extends number>(maxAcc: usize, nPix: usize): void {
  const v = v128.splat<T>(lowestValue<T>());
  const bytes = nPix * sizeof<T>();
  const vecBytes = bytes & ~15;
  let i: usize = 0;
  for (; i < vecBytes; i += 16) v128.store(maxAcc + i, v);
  for (; i < bytes; i += sizeof<T>()) store<T>(maxAcc + i, lowestValue<T>());
}

// @ts-ignore: decorator
@inline function flushSumLanes<T extends number>(sumAcc: usize, sumOut: usize, nPix: usize): void {
  if (isFloat<T>()) return;
  for (let i: usize = 0; i < nPix; i++) {
    const out = sumOut + i * 8;
    let lane: f64;
    if (sizeof<T>() == 1) {
      const p = sumAcc + i * 2;
      lane = isSigned<T>() ? <f64>load<i16>(p) : <f64>load<u16>(p);
      store<u16>(p, 0);
    } else if (sizeof<T>() == 2) {
      const p = sumAcc + i * 4;
      lane = isSigned<T>() ? <f64>load<i32>(p) : <f64>load<u32>(p);
      store<u32>(p, 0);
    } else {
      const p = sumAcc + i * 8;
      lane = <f64>load<i64>(p); // u32 sums stay below 2⁶³ for any tile that fits in memory
      store<i64>(p, 0);
    }
    store<f64>(out, load<f64>(out) + lane);
  }
}

/** The bin row is complete: total it, store it (scanBin 1) or add it to the preview row, and clear the lanes. */
// @ts-ignore: decorator
@inline function emitBinRow<T extends number>(binAcc: usize, binF64: usize, binF64Used: bool, pX: i32, dest: usize, destIsF32: bool): f64 {
  let j: usize = 0;
  let total: f64 = 0;
  if (binsInI32<T>() && !binF64Used) {
    // Exact: i32 bins convert to f32 with one rounding, and their total is kept in i64 lanes.
    let totalLanes = i64x2.splat(0);
    for (; j + 4 <= <usize>pX; j += 4) {
      const p = binAcc + j * 4;
      const v = v128.load(p);
      v128.store(p, i32x4.splat(0));
      if (isSigned<T>()) {
        totalLanes = i64x2.add(totalLanes, i64x2.add(i64x2.extend_low_i32x4_s(v), i64x2.extend_high_i32x4_s(v)));
        if (destIsF32) v128.store(dest + j * 4, f32x4.convert_i32x4_s(v));
        else addF64Lanes(dest + j * 8, f64x2.convert_low_i32x4_s(v), f64x2.convert_low_i32x4_s(highHalf(v)));
      } else {
        totalLanes = i64x2.add(totalLanes, i64x2.add(i64x2.extend_low_i32x4_u(v), i64x2.extend_high_i32x4_u(v)));
        if (destIsF32) v128.store(dest + j * 4, f32x4.convert_i32x4_u(v));
        else addF64Lanes(dest + j * 8, f64x2.convert_low_i32x4_u(v), f64x2.convert_low_i32x4_u(highHalf(v)));
      }
    }
    total = <f64>(i64x2.extract_lane(totalLanes, 0) + i64x2.extract_lane(totalLanes, 1));
  } else if (!binsInI32<T>()) {
    let totalLanes = f64x2.splat(0);
    for (; j + 2 <= <usize>pX; j += 2) {
      const p = binAcc + j * 8;
      const v = v128.load(p);
      v128.store(p, f64x2.splat(0));
      totalLanes = f64x2.add(totalLanes, v);
      if (destIsF32) v128.store64_lane(dest + j * 4, f32x4.demote_f64x2_zero(v), 0);
      else v128.store(dest + j * 8, f64x2.add(v128.load(dest + j * 8), v));
    }
    total = f64x2.extract_lane(totalLanes, 0) + f64x2.extract_lane(totalLanes, 1);
  }
  for (; j < <usize>pX; j++) {
    let v: f64;
    if (binsInI32<T>()) {
      v = isSigned<T>() ? <f64>load<i32>(binAcc + j * 4) : <f64>load<u32>(binAcc + j * 4);
      store<i32>(binAcc + j * 4, 0);
      if (binF64Used) { v += load<f64>(binF64 + j * 8); store<f64>(binF64 + j * 8, 0); }
    } else {
      v = load<f64>(binAcc + j * 8);
      store<f64>(binAcc + j * 8, 0);
    }
    total += v;
    if (destIsF32) store<f32>(dest + j * 4, <f32>v);
    else store<f64>(dest + j * 8, load<f64>(dest + j * 8) + v);
  }
  return total;
}

// @ts-ignore: decorator
@inline function moveI32BinsToF64<T extends number>(binAcc: usize, binF64: usize, pX: i32, binF64Used: bool): void {
  for (let j: usize = 0; j < <usize>pX; j++) {
    const before = binF64Used ? load<f64>(binF64 + j * 8) : 0;
    const lane = isSigned<T>() ? <f64>load<i32>(binAcc + j * 4) : <f64>load<u32>(binAcc + j * 4);
    store<f64>(binF64 + j * 8, before + lane);
    store<i32>(binAcc + j * 4, 0);
  }
}

function writePreviewRow(previewAcc: usize, dest: usize, scanX: i32, scanBin: i32, qX: i32, binsPerPattern: usize, rowsInBin: i32): void {
  for (let qc = 0; qc < qX; qc++) {
    const c0 = qc * scanBin;
    const positions = <f64>(rowsInBin * (min(scanX, c0 + scanBin) - c0));
    const src = previewAcc + <usize>qc * binsPerPattern * 8;
    const out = dest + <usize>qc * binsPerPattern * 4;
    for (let j: usize = 0; j < binsPerPattern; j++) {
      store<f32>(out + j * 4, <f32>(load<f64>(src + j * 8) / positions));
    }
  }
}

// ---------------------------------------------------------------------------------------------
// Per-pixel sum and max over a band of contiguous pixels.

/**
 * Adds pixels [from, n) of one pattern's band into the per-pixel sums and max (`from` is a
 * multiple of the vector width); returns how many values were non-finite.
 */
// @ts-ignore: decorator
@inline function accumulateBand<T extends number>(src: usize, sumAcc: usize, maxAcc: usize, sumOut: usize, from: usize, n: usize): i32 {
  const lanes: usize = 16 / sizeof<T>();
  const nVec = n & ~(lanes - 1);
  let i = from;
  let nonFinite = 0;
  if (isInteger<T>()) {
    for (; i < nVec; i += lanes) {
      const v = v128.load(src + i * sizeof<T>());
      const mp = maxAcc + i * sizeof<T>();
      v128.store(mp, v128.max<T>(v128.load(mp), v));
      addWideLanes<T>(sumAcc + i * sumLaneBytes<T>(), v128.extend_low<T>(v), v128.extend_high<T>(v));
    }
    for (; i < n; i++) {
      const v = load<T>(src + i * sizeof<T>());
      const mp = maxAcc + i * sizeof<T>();
      if (v > load<T>(mp)) store<T>(mp, v);
      const sp = sumAcc + i * sumLaneBytes<T>();
      // Two's-complement adds give the same bits for signed and unsigned lanes.
      if (sizeof<T>() == 1) store<u16>(sp, <u16>(<i32>load<u16>(sp) + <i32>v));
      else if (sizeof<T>() == 2) store<u32>(sp, <u32>(<i32>load<u32>(sp) + <i32>v));
      else store<i64>(sp, load<i64>(sp) + <i64>v);
    }
  } else if (sizeof<T>() == 4) {
    let finiteMasks = i32x4.splat(0);
    for (; i < nVec; i += 4) {
      const v = v128.load(src + i * 4);
      const finite = finiteMaskF32(v);
      finiteMasks = i32x4.add(finiteMasks, finite); // each finite lane adds −1
      const mp = maxAcc + i * 4;
      v128.store(mp, f32x4.max(v128.load(mp), v128.bitselect(v, f32x4.splat(-Infinity), finite)));
      const clean = v128.and(v, finite);
      addF64Lanes(sumOut + i * 8, f64x2.promote_low_f32x4(clean), f64x2.promote_low_f32x4(highHalf(clean)));
    }
    nonFinite = <i32>(nVec - from) + laneSumI32(finiteMasks);
    for (; i < n; i++) {
      const v = load<f32>(src + i * 4);
      if (!(Mathf.abs(v) < Infinity)) { nonFinite++; continue; }
      const mp = maxAcc + i * 4;
      if (v > load<f32>(mp)) store<f32>(mp, v);
      const sp = sumOut + i * 8;
      store<f64>(sp, load<f64>(sp) + <f64>v);
    }
  } else {
    let finiteMasks = i64x2.splat(0);
    for (; i < nVec; i += 2) {
      const v = v128.load(src + i * 8);
      const finite = finiteMaskF64(v);
      finiteMasks = i64x2.add(finiteMasks, finite);
      const mp = maxAcc + i * 8;
      v128.store(mp, f64x2.max(v128.load(mp), v128.bitselect(v, f64x2.splat(-Infinity), finite)));
      const sp = sumOut + i * 8;
      v128.store(sp, f64x2.add(v128.load(sp), v128.and(v, finite)));
    }
    nonFinite = <i32>(<i64>(nVec - from) + i64x2.extract_lane(finiteMasks, 0) + i64x2.extract_lane(finiteMasks, 1));
    for (; i < n; i++) {
      const v = load<f64>(src + i * 8);
      if (!(Math.abs(v) < Infinity)) { nonFinite++; continue; }
      const mp = maxAcc + i * 8;
      if (v > load<f64>(mp)) store<f64>(mp, v);
      const sp = sumOut + i * 8;
      store<f64>(sp, load<f64>(sp) + v);
    }
  }
  return nonFinite;
}

/** The same band of four consecutive patterns at once: one read-modify-write of the accumulators for four loads. */
// @ts-ignore: decorator
@inline function accumulateBand4<T extends number>(src: usize, patternBytes: usize, sumAcc: usize, maxAcc: usize, sumOut: usize, n: usize): i32 {
  const lanes: usize = 16 / sizeof<T>();
  const nVec = n & ~(lanes - 1);
  const s1 = src + patternBytes;
  const s2 = s1 + patternBytes;
  const s3 = s2 + patternBytes;
  let nonFinite = 0;
  if (isInteger<T>()) {
    for (let i: usize = 0; i < nVec; i += lanes) {
      const o = i * sizeof<T>();
      const a = v128.load(src + o);
      const b = v128.load(s1 + o);
      const c = v128.load(s2 + o);
      const d = v128.load(s3 + o);
      const mp = maxAcc + o;
      v128.store(mp, v128.max<T>(v128.load(mp), v128.max<T>(v128.max<T>(a, b), v128.max<T>(c, d))));
      const lo = addWide<T>(addWide<T>(v128.extend_low<T>(a), v128.extend_low<T>(b)), addWide<T>(v128.extend_low<T>(c), v128.extend_low<T>(d)));
      const hi = addWide<T>(addWide<T>(v128.extend_high<T>(a), v128.extend_high<T>(b)), addWide<T>(v128.extend_high<T>(c), v128.extend_high<T>(d)));
      addWideLanes<T>(sumAcc + i * sumLaneBytes<T>(), lo, hi);
    }
  } else if (sizeof<T>() == 4) {
    let finiteMasks = i32x4.splat(0);
    const negInf = f32x4.splat(-Infinity);
    for (let i: usize = 0; i < nVec; i += 4) {
      const o = i * 4;
      const a = v128.load(src + o);
      const b = v128.load(s1 + o);
      const c = v128.load(s2 + o);
      const d = v128.load(s3 + o);
      const fa = finiteMaskF32(a);
      const fb = finiteMaskF32(b);
      const fc = finiteMaskF32(c);
      const fd = finiteMaskF32(d);
      finiteMasks = i32x4.add(finiteMasks, i32x4.add(i32x4.add(fa, fb), i32x4.add(fc, fd)));
      const mp = maxAcc + o;
      const m = f32x4.max(f32x4.max(v128.bitselect(a, negInf, fa), v128.bitselect(b, negInf, fb)),
        f32x4.max(v128.bitselect(c, negInf, fc), v128.bitselect(d, negInf, fd)));
      v128.store(mp, f32x4.max(v128.load(mp), m));
      const ca = v128.and(a, fa);
      const cb = v128.and(b, fb);
      const cc = v128.and(c, fc);
      const cd = v128.and(d, fd);
      const lo = f64x2.add(f64x2.add(f64x2.promote_low_f32x4(ca), f64x2.promote_low_f32x4(cb)),
        f64x2.add(f64x2.promote_low_f32x4(cc), f64x2.promote_low_f32x4(cd)));
      const hi = f64x2.add(f64x2.add(f64x2.promote_low_f32x4(highHalf(ca)), f64x2.promote_low_f32x4(highHalf(cb))),
        f64x2.add(f64x2.promote_low_f32x4(highHalf(cc)), f64x2.promote_low_f32x4(highHalf(cd))));
      addF64Lanes(sumOut + i * 8, lo, hi);
    }
    nonFinite = <i32>(nVec * 4) + laneSumI32(finiteMasks);
  } else {
    let finiteMasks = i64x2.splat(0);
    const negInf = f64x2.splat(-Infinity);
    for (let i: usize = 0; i < nVec; i += 2) {
      const o = i * 8;
      const a = v128.load(src + o);
      const b = v128.load(s1 + o);
      const c = v128.load(s2 + o);
      const d = v128.load(s3 + o);
      const fa = finiteMaskF64(a);
      const fb = finiteMaskF64(b);
      const fc = finiteMaskF64(c);
      const fd = finiteMaskF64(d);
      finiteMasks = i64x2.add(finiteMasks, i64x2.add(i64x2.add(fa, fb), i64x2.add(fc, fd)));
      const mp = maxAcc + o;
      const m = f64x2.max(f64x2.max(v128.bitselect(a, negInf, fa), v128.bitselect(b, negInf, fb)),
        f64x2.max(v128.bitselect(c, negInf, fc), v128.bitselect(d, negInf, fd)));
      v128.store(mp, f64x2.max(v128.load(mp), m));
      const sum = f64x2.add(f64x2.add(v128.and(a, fa), v128.and(b, fb)), f64x2.add(v128.and(c, fc), v128.and(d, fd)));
      const sp = sumOut + o;
      v128.store(sp, f64x2.add(v128.load(sp), sum));
    }
    nonFinite = <i32>(<i64>(nVec * 4) + i64x2.extract_lane(finiteMasks, 0) + i64x2.extract_lane(finiteMasks, 1));
  }
  if (nVec < n) {
    nonFinite += accumulateBand<T>(src, sumAcc, maxAcc, sumOut, nVec, n);
    nonFinite += accumulateBand<T>(s1, sumAcc, maxAcc, sumOut, nVec, n);
    nonFinite += accumulateBand<T>(s2, sumAcc, maxAcc, sumOut, nVec, n);
    nonFinite += accumulateBand<T>(s3, sumAcc, maxAcc, sumOut, nVec, n);
  }
  return nonFinite;
}

/** Lane-wise add in the widened sum lanes of T (16-bit lanes for 8-bit data, 32 for 16, 64 for 32). */
// @ts-ignore: decorator
@inline function addWide<T extends number>(a: v128, b: v128): v128 {
  if (sizeof<T>() == 1) return i16x8.add(a, b);
  if (sizeof<T>() == 2) return i32x4.add(a, b);
  return i64x2.add(a, b);
}

// @ts-ignore: decorator
@inline function addWideLanes<T extends number>(p: usize, lo: v128, hi: v128): void {
  v128.store(p, addWide<T>(v128.load(p), lo));
  v128.store(p, addWide<T>(v128.load(p, 16), hi), 16);
}

// @ts-ignore: decorator
@inline function addF64Lanes(p: usize, lo: v128, hi: v128): void {
  v128.store(p, f64x2.add(v128.load(p), lo));
  v128.store(p, f64x2.add(v128.load(p, 16), hi), 16);
}

/** All ones in lanes holding a finite value; NaN compares false, so it counts as non-finite too. */
// @ts-ignore: decorator
@inline function finiteMaskF32(v: v128): v128 {
  return f32x4.lt(f32x4.abs(v), f32x4.splat(Infinity));
}

// @ts-ignore: decorator
@inline function finiteMaskF64(v: v128): v128 {
  return f64x2.lt(f64x2.abs(v), f64x2.splat(Infinity));
}

/** Lanes 2, 3 of a 32-bit-lane vector moved to lanes 0, 1 (for promote_low / convert_low). */
// @ts-ignore: decorator
@inline function highHalf(v: v128): v128 {
  return v128.shuffle<i32>(v, v, 2, 3, 2, 3);
}

// ---------------------------------------------------------------------------------------------
// Horizontal binning of one detector row into the bin lanes.

/** [a0+a1, a2+a3, b0+b1, b2+b3] of i32 lanes: one level of pairwise adds across two vectors. */
// @ts-ignore: decorator
@inline function addPairsI32(a: v128, b: v128): v128 {
  return i32x4.add(v128.shuffle<i32>(a, b, 0, 2, 4, 6), v128.shuffle<i32>(a, b, 1, 3, 5, 7));
}

// @ts-ignore: decorator
@inline function addPairsF64(a: v128, b: v128): v128 {
  return f64x2.add(v128.shuffle<f64>(a, b, 0, 2), v128.shuffle<f64>(a, b, 1, 3));
}

// @ts-ignore: decorator
@inline function laneSumI32(v: v128): i32 {
  const h = i32x4.add(v, v128.shuffle<i32>(v, v, 2, 3, 2, 3));
  return i32x4.extract_lane(h, 0) + i32x4.extract_lane(h, 1);
}

/** Pairs of 16-bit values as i32 lanes. */
// @ts-ignore: decorator
@inline function pairs16<T extends number>(v: v128): v128 {
  return v128.extadd_pairwise<T>(v);
}

/** Groups of four 8-bit values as i32 lanes. */
// @ts-ignore: decorator
@inline function quads8<T extends number>(v: v128): v128 {
  const pairs = v128.extadd_pairwise<T>(v);
  return isSigned<T>() ? i32x4.extadd_pairwise_i16x8_s(pairs) : i32x4.extadd_pairwise_i16x8_u(pairs);
}

/** f32 lanes with NaN/±Inf replaced by 0, so they drop out of the bin sums. */
// @ts-ignore: decorator
@inline function finiteOrZeroF32(v: v128): v128 {
  return v128.and(v, finiteMaskF32(v));
}

/**
 * Whole bins of a band for the common small bins of 8/16-bit and float32 data, column by column: every
 * row of the band is added in registers and each bin is stored once, with no read-modify-write
 * of the bin lanes per row. Stores bins [0, x / detBin) and returns x, where the scalar loop
 * takes over; returns −1 where this path does not apply (then binRow bins row by row).
 * A bin lane here takes at most 16 · 16 values, far from overflow.
 */
// @ts-ignore: decorator
@inline function binBandColumns<T extends number>(band: usize, rowBytes: usize, detX: i32, h: i32, detBin: i32, binAcc: usize): i32 {
  let x = 0;
  if (isInteger<T>() && sizeof<T>() == 2) {
    if (detBin == 1) {
      for (; x + 8 <= detX; x += 8) {
        const v = v128.load(band + <usize>x * 2);
        const p = binAcc + <usize>x * 4;
        v128.store(p, v128.extend_low<T>(v));
        v128.store(p, v128.extend_high<T>(v), 16);
      }
    } else if (detBin == 2) {
      for (; x + 8 <= detX; x += 8) {
        let s = band + <usize>x * 2;
        let acc = pairs16<T>(v128.load(s));
        if (h > 1) acc = i32x4.add(acc, pairs16<T>(v128.load(s + rowBytes)));
        v128.store(binAcc + <usize>(x >> 1) * 4, acc);
      }
    } else if (detBin == 4) {
      for (; x + 16 <= detX; x += 16) {
        let s = band + <usize>x * 2;
        let lo = pairs16<T>(v128.load(s));
        let hi = pairs16<T>(v128.load(s, 16));
        for (let y = 1; y < h; y++) {
          s += rowBytes;
          lo = i32x4.add(lo, pairs16<T>(v128.load(s)));
          hi = i32x4.add(hi, pairs16<T>(v128.load(s, 16)));
        }
        v128.store(binAcc + <usize>(x >> 2) * 4, addPairsI32(lo, hi));
      }
    } else if (detBin == 8) {
      for (; x + 32 <= detX; x += 32) {
        let s = band + <usize>x * 2;
        let a = i32x4.splat(0), b = a, c = a, d = a;
        for (let y = 0; y < h; y++) {
          a = i32x4.add(a, pairs16<T>(v128.load(s)));
          b = i32x4.add(b, pairs16<T>(v128.load(s, 16)));
          c = i32x4.add(c, pairs16<T>(v128.load(s, 32)));
          d = i32x4.add(d, pairs16<T>(v128.load(s, 48)));
          s += rowBytes;
        }
        v128.store(binAcc + <usize>(x >> 3) * 4, addPairsI32(addPairsI32(a, b), addPairsI32(c, d)));
      }
    } else {
      return -1;
    }
  } else if (isInteger<T>() && sizeof<T>() == 1) {
    if (detBin == 1) {
      for (; x + 16 <= detX; x += 16) {
        const v = v128.load(band + <usize>x);
        const p = binAcc + <usize>x * 4;
        const lo = v128.extend_low<T>(v);
        const hi = v128.extend_high<T>(v);
        if (isSigned<T>()) {
          v128.store(p, i32x4.extend_low_i16x8_s(lo));
          v128.store(p, i32x4.extend_high_i16x8_s(lo), 16);
          v128.store(p, i32x4.extend_low_i16x8_s(hi), 32);
          v128.store(p, i32x4.extend_high_i16x8_s(hi), 48);
        } else {
          v128.store(p, i32x4.extend_low_i16x8_u(lo));
          v128.store(p, i32x4.extend_high_i16x8_u(lo), 16);
          v128.store(p, i32x4.extend_low_i16x8_u(hi), 32);
          v128.store(p, i32x4.extend_high_i16x8_u(hi), 48);
        }
      }
    } else if (detBin == 2) {
      for (; x + 16 <= detX; x += 16) {
        const s = band + <usize>x;
        let pairs = v128.extadd_pairwise<T>(v128.load(s));
        if (h > 1) pairs = i16x8.add(pairs, v128.extadd_pairwise<T>(v128.load(s + rowBytes))); // ≤ 4 · 255
        const p = binAcc + <usize>(x >> 1) * 4;
        if (isSigned<T>()) {
          v128.store(p, i32x4.extend_low_i16x8_s(pairs));
          v128.store(p, i32x4.extend_high_i16x8_s(pairs), 16);
        } else {
          v128.store(p, i32x4.extend_low_i16x8_u(pairs));
          v128.store(p, i32x4.extend_high_i16x8_u(pairs), 16);
        }
      }
    } else if (detBin == 4) {
      for (; x + 16 <= detX; x += 16) {
        let s = band + <usize>x;
        let acc = quads8<T>(v128.load(s));
        for (let y = 1; y < h; y++) {
          s += rowBytes;
          acc = i32x4.add(acc, quads8<T>(v128.load(s)));
        }
        v128.store(binAcc + <usize>(x >> 2) * 4, acc);
      }
    } else if (detBin == 8) {
      for (; x + 32 <= detX; x += 32) {
        let s = band + <usize>x;
        let a = i32x4.splat(0), b = a;
        for (let y = 0; y < h; y++) {
          a = i32x4.add(a, quads8<T>(v128.load(s)));
          b = i32x4.add(b, quads8<T>(v128.load(s, 16)));
          s += rowBytes;
        }
        v128.store(binAcc + <usize>(x >> 3) * 4, addPairsI32(a, b));
      }
    } else if (detBin == 16) {
      for (; x + 64 <= detX; x += 64) {
        let s = band + <usize>x;
        let a = i32x4.splat(0), b = a, c = a, d = a;
        for (let y = 0; y < h; y++) {
          a = i32x4.add(a, quads8<T>(v128.load(s)));
          b = i32x4.add(b, quads8<T>(v128.load(s, 16)));
          c = i32x4.add(c, quads8<T>(v128.load(s, 32)));
          d = i32x4.add(d, quads8<T>(v128.load(s, 48)));
          s += rowBytes;
        }
        v128.store(binAcc + <usize>(x >> 4) * 4, addPairsI32(addPairsI32(a, b), addPairsI32(c, d)));
      }
    } else {
      return -1;
    }
  } else if (isFloat<T>() && sizeof<T>() == 4) {
    // Bins are summed in f64 (as the reference does), two bins per vector.
    if (detBin == 1) {
      for (; x + 4 <= detX; x += 4) {
        const v = finiteOrZeroF32(v128.load(band + <usize>x * 4));
        const p = binAcc + <usize>x * 8;
        v128.store(p, f64x2.promote_low_f32x4(v));
        v128.store(p, f64x2.promote_low_f32x4(highHalf(v)), 16);
      }
    } else if (detBin == 2) {
      for (; x + 4 <= detX; x += 4) {
        let s = band + <usize>x * 4;
        let lo = f64x2.splat(0), hi = lo;
        for (let y = 0; y < h; y++) {
          const v = finiteOrZeroF32(v128.load(s));
          lo = f64x2.add(lo, f64x2.promote_low_f32x4(v));
          hi = f64x2.add(hi, f64x2.promote_low_f32x4(highHalf(v)));
          s += rowBytes;
        }
        v128.store(binAcc + <usize>(x >> 1) * 8, addPairsF64(lo, hi));
      }
    } else if (detBin == 4) {
      for (; x + 8 <= detX; x += 8) {
        let s = band + <usize>x * 4;
        let a = f64x2.splat(0), b = a;
        for (let y = 0; y < h; y++) {
          const v = finiteOrZeroF32(v128.load(s));
          const w = finiteOrZeroF32(v128.load(s, 16));
          a = f64x2.add(a, f64x2.add(f64x2.promote_low_f32x4(v), f64x2.promote_low_f32x4(highHalf(v))));
          b = f64x2.add(b, f64x2.add(f64x2.promote_low_f32x4(w), f64x2.promote_low_f32x4(highHalf(w))));
          s += rowBytes;
        }
        v128.store(binAcc + <usize>(x >> 2) * 8, addPairsF64(a, b));
      }
    } else if (detBin == 8) {
      for (; x + 16 <= detX; x += 16) {
        let s = band + <usize>x * 4;
        let a = f64x2.splat(0), b = a;
        for (let y = 0; y < h; y++) {
          const v0 = finiteOrZeroF32(v128.load(s));
          const v1 = finiteOrZeroF32(v128.load(s, 16));
          const w0 = finiteOrZeroF32(v128.load(s, 32));
          const w1 = finiteOrZeroF32(v128.load(s, 48));
          a = f64x2.add(a, f64x2.add(f64x2.add(f64x2.promote_low_f32x4(v0), f64x2.promote_low_f32x4(highHalf(v0))),
            f64x2.add(f64x2.promote_low_f32x4(v1), f64x2.promote_low_f32x4(highHalf(v1)))));
          b = f64x2.add(b, f64x2.add(f64x2.add(f64x2.promote_low_f32x4(w0), f64x2.promote_low_f32x4(highHalf(w0))),
            f64x2.add(f64x2.promote_low_f32x4(w1), f64x2.promote_low_f32x4(highHalf(w1)))));
          s += rowBytes;
        }
        v128.store(binAcc + <usize>(x >> 3) * 8, addPairsF64(a, b));
      }
    } else {
      return -1;
    }
  } else {
    return -1;
  }
  return x;
}

/** Bins from x (a bin boundary) to the end of the row, including a partial edge bin. */
// @ts-ignore: decorator
@inline function binRowScalar<T extends number>(row: usize, x: i32, detX: i32, detBin: i32, binAcc: usize): void {
  let b = x / detBin;
  while (x < detX) {
    const x1 = min(detX, x + detBin);
    if (binsInI32<T>()) {
      let s: i32 = 0;
      for (; x < x1; x++) s += <i32>load<T>(row + <usize>x * sizeof<T>());
      const p = binAcc + <usize>b * 4;
      store<i32>(p, load<i32>(p) + s);
    } else {
      let s: f64 = 0;
      for (; x < x1; x++) {
        const v = <f64>load<T>(row + <usize>x * sizeof<T>());
        if (isFloat<T>()) { if (Math.abs(v) < Infinity) s += v; } else s += v;
      }
      const p = binAcc + <usize>b * 8;
      store<f64>(p, load<f64>(p) + s);
    }
    b++;
  }
}

// ---------------------------------------------------------------------------------------------
// Non-finite values per pixel (float data only), for means over each pixel's finite values.

/**
 * counts (nPix i32, zeroed by the caller) gain one for every NaN or ±Infinity at their pixel in
 * the nPatterns patterns of nPix float32 values at `tile`.
 */
export function nonFiniteCountsFloat32(tile: usize, nPatterns: i32, nPix: i32, counts: usize): void {
  const inf = f32x4.splat(Infinity);
  for (let p = 0; p < nPatterns; p++) {
    const src = tile + <usize>p * <usize>nPix * 4;
    let i = 0;
    for (; i + 4 <= nPix; i += 4) {
      const o = <usize>i * 4;
      // |v| < ∞ is false for NaN and ±∞: the lanes that are not finite are all ones (−1), subtracted.
      const notFinite = v128.not(f32x4.lt(f32x4.abs(v128.load(src + o)), inf));
      v128.store(counts + o, i32x4.sub(v128.load(counts + o), notFinite));
    }
    for (; i < nPix; i++) {
      const o = <usize>i * 4;
      if (!(abs<f32>(load<f32>(src + o)) < Infinity)) store<i32>(counts + o, load<i32>(counts + o) + 1);
    }
  }
}

/** The same for float64 values: two compares of two lanes each, narrowed to four i32 lanes. */
export function nonFiniteCountsFloat64(tile: usize, nPatterns: i32, nPix: i32, counts: usize): void {
  const inf = f64x2.splat(Infinity);
  for (let p = 0; p < nPatterns; p++) {
    const src = tile + <usize>p * <usize>nPix * 8;
    let i = 0;
    for (; i + 4 <= nPix; i += 4) {
      const s = src + <usize>i * 8;
      const f0 = f64x2.lt(f64x2.abs(v128.load(s)), inf), f1 = f64x2.lt(f64x2.abs(v128.load(s, 16)), inf);
      const notFinite = v128.not(v128.shuffle<i32>(f0, f1, 0, 2, 4, 6));
      const o = counts + <usize>i * 4;
      v128.store(o, i32x4.sub(v128.load(o), notFinite));
    }
    for (; i < nPix; i++) {
      if (!(abs<f64>(load<f64>(src + <usize>i * 8)) < Infinity)) { const o = counts + <usize>i * 4; store<i32>(o, load<i32>(o) + 1); }
    }
  }
}
