"""NumPy side of the first-pass benchmark: the same outputs as Scanfold's first pass
(sum and max pattern, total intensity per pattern) over a memory-mapped raw uint16 file,
in blocks of scan rows; and, for comparison, a plain block-wise sum of the same bytes.
Prints one JSON line with seconds per variant."""
import json, sys, time
import numpy as np

path, sy, sx, ky, kx = sys.argv[1], *map(int, sys.argv[2:6])
rows = int(sys.argv[6]) if len(sys.argv) > 6 else 8
a = np.memmap(path, dtype='<u2', mode='r', shape=(sy, sx, ky, kx))

def plain_sum():
    s = 0
    for r in range(0, sy, rows):
        s += int(a[r:r + rows].sum(dtype=np.uint64))
    return s

def first_pass():
    total_sum = np.zeros((ky, kx), np.float64)
    mx = np.zeros((ky, kx), np.uint16)
    tot = np.zeros((sy, sx), np.float64)
    for r in range(0, sy, rows):
        blk = a[r:r + rows]
        total_sum += blk.sum(axis=(0, 1), dtype=np.float64)
        np.maximum(mx, blk.max(axis=(0, 1)), out=mx)
        tot[r:r + rows] = blk.sum(axis=(2, 3), dtype=np.float64)
    return total_sum, mx, tot

out = {'numpy': np.__version__}
for name, fn in (('plain_sum', plain_sum), ('first_pass', first_pass)):
    t = time.perf_counter(); fn(); out[name] = time.perf_counter() - t
print(json.dumps(out))
