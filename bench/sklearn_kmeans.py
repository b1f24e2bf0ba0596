"""The script a user would write for k-means of a 4D-STEM dataset with h5py and scikit-learn
(Debian python3-h5py, python3-sklearn): read and bin 2 × 2 row by row, PCA(10, randomized),
KMeans(K). Prints the seconds and the inertia as JSON, for bench/pca.bench.ts.
usage: sklearn_kmeans.py FILE.h5 DATASET K"""
import json, sys, time
import h5py, numpy as np
from sklearn.cluster import KMeans
from sklearn.decomposition import PCA

t0 = time.time()
f = h5py.File(sys.argv[1]); d = f[sys.argv[2]]; k = int(sys.argv[3])
sy, sx, ky, kx = d.shape
X = np.empty((sy * sx, (ky // 2) * (kx // 2)), np.float32)
for r in range(sy):
    a = d[r].astype(np.float32).reshape(sx, ky // 2, 2, kx // 2, 2).sum(axis=(2, 4))
    X[r * sx:(r + 1) * sx] = a.reshape(sx, -1)
scores = PCA(10, svd_solver='randomized', random_state=0).fit_transform(X)
km = KMeans(n_clusters=k, n_init=10, random_state=0).fit(scores)
print(json.dumps({'seconds': time.time() - t0, 'inertia': float(km.inertia_)}))
