#!/usr/bin/python3
"""Peer for scripts/bench/mnist-select.mjs: k-means++ / Lloyd (scikit-learn) snapped to real items.

Usage: mnist-peer.py FILE.npy K SEED OUT.json

Picks k real items the way a practitioner would without cairn: KMeans(n_clusters=k,
init='k-means++', n_init=1, random_state=seed), then each centroid is replaced by a distinct real
item (peer_common.snap_distinct), weighted by its cluster's share of the rows. Writes
{indices, weights, ...} to OUT.json.
The bench measures this whole process (interpreter start and imports included), as it does cairn's.
"""
import sys
import time

t0 = time.perf_counter()
import numpy as np  # noqa: E402
from sklearn.cluster import KMeans  # noqa: E402

from peer_common import snap_distinct, write_result  # noqa: E402

t_import = time.perf_counter()


def main():
    path, k, seed, out = sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), sys.argv[4]
    X = np.load(path)
    t_load = time.perf_counter()
    km = KMeans(n_clusters=k, init='k-means++', n_init=1, random_state=seed).fit(X)
    t_fit = time.perf_counter()
    indices = snap_distinct(X, km.cluster_centers_)
    counts = np.bincount(km.labels_, minlength=k)
    weights = counts / X.shape[0]
    t_snap = time.perf_counter()
    write_result(
        out, X, indices, weights,
        {'import': t_import - t0, 'load': t_load - t_import, 'fit': t_fit - t_load, 'snap': t_snap - t_fit},
        n_iter=int(km.n_iter_), inertia=float(km.inertia_),
    )


if __name__ == '__main__':
    main()
