"""What a user's script would do first: read a 4-D HDF5 dataset row by row with h5py and bin each
pattern 2 × 2 into a float32 matrix (positions × bins). Shared by sklearn_pca.py and sklearn_kmeans.py."""
import h5py, numpy as np


def read_binned(path, dataset):
    d = h5py.File(path)[dataset]
    sy, sx, ky, kx = d.shape
    X = np.empty((sy * sx, (ky // 2) * (kx // 2)), np.float32)
    for r in range(sy):
        a = d[r].astype(np.float32).reshape(sx, ky // 2, 2, kx // 2, 2).sum(axis=(2, 4))
        X[r * sx:(r + 1) * sx] = a.reshape(sx, -1)
    return X
