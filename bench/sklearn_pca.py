"""The script a user would write for PCA of a 4D-STEM dataset with h5py and scikit-learn (Debian
python3-h5py, python3-sklearn): read and bin 2 × 2 row by row, PCA(K, randomized). Prints the
seconds and the top singular values as JSON, for bench/pca.bench.ts.
usage: sklearn_pca.py FILE.h5 DATASET K"""
import json, os, sys, time
from sklearn.decomposition import PCA
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from read_binned import read_binned

t0 = time.time()
X = read_binned(sys.argv[1], sys.argv[2]); k = int(sys.argv[3])
p = PCA(k, svd_solver='randomized', random_state=0).fit(X)
print(json.dumps({'seconds': time.time() - t0, 'singular_values': p.singular_values_.tolist()}))
