/** Element types a dataset may have. Names follow NumPy's spelling. */
export const DTYPES = ['uint8', 'uint16', 'uint32', 'int8', 'int16', 'int32', 'float32', 'float64'] as const;
export type DType = (typeof DTYPES)[number];
export type ByteOrder = 'little' | 'big';

export type TypedArrayOf = {
  uint8: Uint8Array;
  uint16: Uint16Array;
  uint32: Uint32Array;
  int8: Int8Array;
  int16: Int16Array;
  int32: Int32Array;
  float32: Float32Array;
  float64: Float64Array;
};
export type NumericArray = TypedArrayOf[DType];

export const DTYPE_BYTES: Record<DType, number> = {
  uint8: 1, uint16: 2, uint32: 4, int8: 1, int16: 2, int32: 4, float32: 4, float64: 8,
};

export function isDType(s: string): s is DType {
  return (DTYPES as readonly string[]).includes(s);
}

export function isFloatDType(d: DType): boolean {
  return d === 'float32' || d === 'float64';
}

/** A typed-array view of `dtype` over `length` elements of `buffer` starting at `byteOffset`. */
export function typedView(dtype: DType, buffer: ArrayBufferLike, byteOffset: number, length: number): NumericArray {
  switch (dtype) {
    case 'uint8': return new Uint8Array(buffer, byteOffset, length);
    case 'uint16': return new Uint16Array(buffer, byteOffset, length);
    case 'uint32': return new Uint32Array(buffer, byteOffset, length);
    case 'int8': return new Int8Array(buffer, byteOffset, length);
    case 'int16': return new Int16Array(buffer, byteOffset, length);
    case 'int32': return new Int32Array(buffer, byteOffset, length);
    case 'float32': return new Float32Array(buffer, byteOffset, length);
    case 'float64': return new Float64Array(buffer, byteOffset, length);
  }
}

export function allocTyped(dtype: DType, length: number): NumericArray {
  return typedView(dtype, new ArrayBuffer(length * DTYPE_BYTES[dtype]), 0, length);
}

/** Swap the bytes of every element in place (big-endian storage → native little-endian). */
export function byteSwapInPlace(bytes: Uint8Array, elementBytes: number): void {
  if (elementBytes === 1) return;
  if (bytes.byteLength % elementBytes !== 0) throw new Error('byteSwapInPlace: length is not a whole number of elements');
  if (elementBytes === 2) {
    for (let i = 0; i < bytes.length; i += 2) { const a = bytes[i]; bytes[i] = bytes[i + 1]; bytes[i + 1] = a; }
  } else if (elementBytes === 4) {
    for (let i = 0; i < bytes.length; i += 4) {
      const a = bytes[i], b = bytes[i + 1];
      bytes[i] = bytes[i + 3]; bytes[i + 1] = bytes[i + 2]; bytes[i + 2] = b; bytes[i + 3] = a;
    }
  } else if (elementBytes === 8) {
    for (let i = 0; i < bytes.length; i += 8) {
      for (let k = 0; k < 4; k++) { const a = bytes[i + k]; bytes[i + k] = bytes[i + 7 - k]; bytes[i + 7 - k] = a; }
    }
  } else {
    throw new Error(`byteSwapInPlace: unsupported element size ${elementBytes}`);
  }
}
