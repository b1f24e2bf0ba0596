"""The script a user would write for k-means of a 4D-STEM dataset with h5py and scikit-learn
(Debian python3-h5py, python3-sklearn): read and bin 2 × 2 row by row, PCA(10, randomized),
KMeans(K). Prints the seconds and the inertia as JSON, for bench/pca.bench.ts.
usage: sklearn_kmeans.py FILE.h5 DATASET K"""
import json, os, sys, time
from sklearn.cluster import KMeans
from sklearn.decomposition import PCA
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from read_binned import read_binned

t0 = time.time()
X = read_binned(sys.argv[1], sys.argv[2]); k = int(sys.argv[3])
scores = PCA(10, svd_solver='randomized', random_state=0).fit_transform(X)
km = KMeans(n_clusters=k, n_init=10, random_state=0).fit(scores)
print(json.dumps({'seconds': time.time() - t0, 'inertia': float(km.inertia_)}))
