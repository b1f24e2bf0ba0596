"""NumPy side of the detector/COM benchmark, over a memory-mapped raw uint16 file in blocks of
scan rows, as a user would script it: virtual images as `block @ masks` (float64 result) and the
centre of mass as intensity-weighted sums over the pattern axes. Prints one JSON line."""
import json, sys, time
import numpy as np

path, sy, sx, ky, kx = sys.argv[1], *map(int, sys.argv[2:6])
rows = 8
a = np.memmap(path, dtype='<u2', mode='r', shape=(sy, sx, ky, kx))
yy, xx = np.mgrid[0:ky, 0:kx].astype(np.float64)
cy, cx = (ky - 1) / 2, (kx - 1) / 2
d2 = (xx - cx) ** 2 + (yy - cy) ** 2
annulus = ((d2 > (ky * 0.15) ** 2) & (d2 <= (ky * 0.45) ** 2)).astype(np.float64).reshape(-1)
four = np.stack([annulus, (d2 <= (ky * 0.1) ** 2).reshape(-1), (xx < kx / 2).reshape(-1), (yy < ky / 2).reshape(-1)], axis=1).astype(np.float64)

def images(m):
    out = np.empty((sy * sx,) + m.shape[1:])
    for r in range(0, sy, rows):
        blk = a[r:r + rows].reshape(-1, ky * kx)
        out[r * sx:(r + rows) * sx] = blk @ m
    return out

def com():
    t = np.empty(sy * sx); gx = np.empty(sy * sx); gy = np.empty(sy * sx)
    xr, yr = xx.reshape(-1), yy.reshape(-1)
    for r in range(0, sy, rows):
        blk = a[r:r + rows].reshape(-1, ky * kx)
        s = slice(r * sx, (r + rows) * sx)
        t[s] = blk.sum(axis=1, dtype=np.float64); gx[s] = blk @ xr; gy[s] = blk @ yr
    return t, gx / t, gy / t

tasks = (('one_detector', lambda: images(annulus)), ('four_detectors', lambda: images(four)), ('com', com))
if len(sys.argv) > 6:
    # A whole script as a user runs it once: one task, no warm-up (the caller times the process).
    dict(tasks)[sys.argv[6]]()
    sys.exit(0)
out = {'numpy': np.__version__}
for name, fn in tasks:
    fn()  # warm (page cache, BLAS threads)
    t = time.perf_counter(); fn(); out[name] = time.perf_counter() - t
print(json.dumps(out))
