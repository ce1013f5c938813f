#!/usr/bin/python3
"""Peer for scripts/bench/scale-select.mjs: MiniBatchKMeans (scikit-learn) snapped to real items.

Usage: scale-peer.py FILE.npy K SEED OUT.json

MiniBatchKMeans(n_clusters=k, batch_size=4096, n_init=1, random_state=seed).fit(X), predict on all
rows, then each centroid is replaced by a distinct real item (peer_common.snap_distinct, greedy by
distance without a k × N matrix). Weights are the shares of the rows predicted into each cluster.
Writes {indices, weights, ...} to OUT.json.
"""
import sys
import time

t0 = time.perf_counter()
import numpy as np  # noqa: E402
from sklearn.cluster import MiniBatchKMeans  # noqa: E402

from peer_common import snap_distinct, write_result  # noqa: E402

t_import = time.perf_counter()


def main():
    path, k, seed, out = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), sys.argv[4]
    X = np.load(path)
    t_load = time.perf_counter()
    km = MiniBatchKMeans(n_clusters=k, batch_size=4096, n_init=1, random_state=seed).fit(X)
    t_fit = time.perf_counter()
    labels = km.predict(X)
    t_predict = time.perf_counter()
    indices = snap_distinct(X, km.cluster_centers_)
    counts = np.bincount(labels, minlength=k)
    weights = counts / X.shape[0]
    t_snap = time.perf_counter()
    write_result(
        out, X, indices, weights,
        {'import': t_import - t0, 'load': t_load - t_import, 'fit': t_fit - t_load, 'predict': t_predict - t_fit, 'snap': t_snap - t_predict},
        n_iter=int(km.n_iter_), n_steps=int(km.n_steps_),
    )


if __name__ == '__main__':
    main()
