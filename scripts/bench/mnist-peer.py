#!/usr/bin/python3
"""Peer for scripts/bench/mnist-select.mjs: k-means++ / Lloyd (scikit-learn) snapped to real items.

Usage: mnist-peer.py FILE.npy K SEED OUT.json

Picks k real items the way a practitioner would without cairn: KMeans(n_clusters=k,
init='k-means++', n_init=1, random_state=seed), then each centroid is replaced by a distinct real
item, weighted by its cluster's share of the rows. Writes {indices, weights, ...} to OUT.json.
The bench measures this whole process (interpreter start and imports included), as it does cairn's.
"""
import json
import sys
import time

t0 = time.perf_counter()
import numpy as np  # noqa: E402
from sklearn.cluster import KMeans  # noqa: E402

t_import = time.perf_counter()


def blas_info():
    # Which BLAS numpy/scipy/sklearn actually loaded matters for the timing: the environment may
    # pin OpenBLAS to an older core type, which the bench removes for this process.
    try:
        from threadpoolctl import threadpool_info

        keep = ('user_api', 'internal_api', 'version', 'num_threads', 'architecture', 'filepath')
        return [{k: v for k, v in d.items() if k in keep} for d in threadpool_info()]
    except Exception:  # threadpoolctl missing: fall back to numpy's build configuration
        import contextlib
        import io

        buf = io.StringIO()
        with contextlib.redirect_stdout(buf):
            np.show_config()
        return [{'show_config': buf.getvalue()}]


def snap_distinct(X, centroids):
    """Greedy by distance: repeatedly the (centroid, item) pair with the smallest distance among
    centroids still unsnapped and items not yet taken is fixed, i.e. each centroid takes its
    nearest item not yet taken, the closest centroids choosing first. Distinctness matters: two
    centroids snapped to the same item would silently give fewer than k representatives."""
    Xd = X.astype(np.float64)
    Cd = centroids.astype(np.float64)
    # float64 so that near-ties between items are ordered by the true distance.
    sq = (Cd * Cd).sum(1)[:, None] + (Xd * Xd).sum(1)[None, :] - 2.0 * (Cd @ Xd.T)
    k = Cd.shape[0]
    order = np.argsort(sq, axis=1, kind='stable')
    ptr = np.zeros(k, dtype=np.int64)
    taken = set()
    chosen = np.full(k, -1, dtype=np.int64)
    pending = set(range(k))
    while pending:
        best_j, best_d = -1, np.inf
        for j in pending:
            while int(order[j, ptr[j]]) in taken:
                ptr[j] += 1
            dist = sq[j, order[j, ptr[j]]]
            if dist < best_d:
                best_j, best_d = j, dist
        item = int(order[best_j, ptr[best_j]])
        chosen[best_j] = item
        taken.add(item)
        pending.remove(best_j)
    return chosen


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
    result = {
        'indices': [int(i) for i in indices],
        'weights': [float(w) for w in weights],
        'n_iter': int(km.n_iter_),
        'inertia': float(km.inertia_),
        'dtype': str(X.dtype),
        'seconds': {
            'import': t_import - t0,
            'load': t_load - t_import,
            'fit': t_fit - t_load,
            'snap': t_snap - t_fit,
        },
        'versions': {'numpy': np.__version__, 'sklearn': __import__('sklearn').__version__, 'python': sys.version.split()[0]},
        'blas': blas_info(),
    }
    with open(out, 'w') as f:
        json.dump(result, f)


if __name__ == '__main__':
    main()
