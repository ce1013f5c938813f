#!/usr/bin/python3
"""Peer for scripts/bench/scale-select.mjs: MiniBatchKMeans (scikit-learn) snapped to real items.

Usage: scale-peer.py FILE.npy K SEED OUT.json

MiniBatchKMeans(n_clusters=k, batch_size=4096, n_init=1, random_state=seed).fit(X), predict on all
rows, then each centroid is replaced by a distinct real item, greedy by distance as in
mnist-peer.py (the closest (centroid, item) pair among unsnapped centroids and untaken items is
fixed first). Unlike mnist-peer.py the k × N distance matrix is never materialised (at 10⁶ rows it
would be GBs and charge the peer for the bench's convenience): each centroid keeps its nearest
CANDIDATES items, found in row chunks, and the greedy pass runs over those; should a centroid run
out of candidates (more than CANDIDATES nearer items taken by others) the search is redone with
more. The result is the same as the full-matrix greedy. Weights are the shares of the rows
predicted into each cluster. Writes {indices, weights, ...} to OUT.json.
"""
import json
import sys
import time

t0 = time.perf_counter()
import numpy as np  # noqa: E402
from sklearn.cluster import MiniBatchKMeans  # noqa: E402

t_import = time.perf_counter()

CHUNK = 32768


def nearest_candidates(X, C, m):
    """For each centroid, the m nearest rows of X (indices, squared distances, sorted), float64."""
    k = C.shape[0]
    Cd = C.astype(np.float64)
    cn = (Cd * Cd).sum(1)[:, None]
    best_i = np.empty((k, 0), dtype=np.int64)
    best_d = np.empty((k, 0), dtype=np.float64)
    for start in range(0, X.shape[0], CHUNK):
        Xd = X[start:start + CHUNK].astype(np.float64)
        sq = cn + (Xd * Xd).sum(1)[None, :] - 2.0 * (Cd @ Xd.T)
        take = min(m, sq.shape[1])
        part = np.argpartition(sq, take - 1, axis=1)[:, :take] if take < sq.shape[1] else np.tile(np.arange(sq.shape[1]), (k, 1))
        cand_i = np.concatenate([best_i, part + start], axis=1)
        cand_d = np.concatenate([best_d, np.take_along_axis(sq, part, axis=1)], axis=1)
        keep = min(m, cand_i.shape[1])
        sel = np.argpartition(cand_d, keep - 1, axis=1)[:, :keep] if keep < cand_i.shape[1] else np.tile(np.arange(keep), (k, 1))
        best_i = np.take_along_axis(cand_i, sel, axis=1)
        best_d = np.take_along_axis(cand_d, sel, axis=1)
    o = np.argsort(best_d, axis=1, kind='stable')
    return np.take_along_axis(best_i, o, axis=1), np.take_along_axis(best_d, o, axis=1)


def snap_distinct(X, centroids, m=64):
    k = centroids.shape[0]
    while True:
        idx, dist = nearest_candidates(X, centroids, min(m, X.shape[0]))
        ptr = np.zeros(k, dtype=np.int64)
        taken = set()
        chosen = np.full(k, -1, dtype=np.int64)
        pending = set(range(k))
        exhausted = False
        while pending:
            best_j, best_d = -1, np.inf
            for j in pending:
                while ptr[j] < idx.shape[1] and int(idx[j, ptr[j]]) in taken:
                    ptr[j] += 1
                if ptr[j] >= idx.shape[1]:
                    exhausted = True
                    break
                d = dist[j, ptr[j]]
                if d < best_d:
                    best_j, best_d = j, d
            if exhausted:
                break
            item = int(idx[best_j, ptr[best_j]])
            chosen[best_j] = item
            taken.add(item)
            pending.remove(best_j)
        if not exhausted:
            return chosen
        m *= 4


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
    result = {
        'indices': [int(i) for i in indices],
        'weights': [float(w) for w in weights],
        'n_iter': int(km.n_iter_),
        'n_steps': int(km.n_steps_),
        'dtype': str(X.dtype),
        'seconds': {
            'import': t_import - t0,
            'load': t_load - t_import,
            'fit': t_fit - t_load,
            'predict': t_predict - t_fit,
            'snap': t_snap - t_predict,
        },
        'versions': {'numpy': np.__version__, 'sklearn': __import__('sklearn').__version__, 'python': sys.version.split()[0]},
    }
    with open(out, 'w') as f:
        json.dump(result, f)


if __name__ == '__main__':
    main()
