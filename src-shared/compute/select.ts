/**
 * The k-th smallest value of `a` (0-based), reordering `a`: Hoare's selection with
 * median-of-three pivots, which keep sorted or constant runs from going quadratic. Expected
 * O(n), for percentiles and quantiles where a sort would be wasted.
 */
export function selectKth(a: Float64Array, k: number): number {
  let lo = 0, hi = a.length - 1;
  while (lo < hi) {
    const mid = (lo + hi) >> 1;
    const p = median3(a[lo], a[mid], a[hi]);
    let i = lo, j = hi;
    while (i <= j) {
      while (a[i] < p) i++;
      while (a[j] > p) j--;
      if (i <= j) { const t = a[i]; a[i] = a[j]; a[j] = t; i++; j--; }
    }
    if (k <= j) hi = j;
    else if (k >= i) lo = i;
    else return a[k];
  }
  return a[k];
}

/** The middle one of three numbers. */
export function median3(a: number, b: number, c: number): number {
  return a < b ? (b < c ? b : a < c ? c : a) : (a < c ? a : b < c ? c : b);
}
