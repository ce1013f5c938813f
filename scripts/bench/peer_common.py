"""Shared by the benchmark peers (mnist-peer.py, scale-peer.py): snapping centroids to distinct real
items, the BLAS in use, and the result file the benchmark scripts read."""
import json
import sys

import numpy as np

CHUNK = 32768


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
    # Ties by row index, as a stable sort over all rows would order them.
    o = np.lexsort((best_i, best_d), axis=1)
    return np.take_along_axis(best_i, o, axis=1), np.take_along_axis(best_d, o, axis=1)


def snap_distinct(X, centroids, m=64):
    """Greedy by distance: repeatedly the (centroid, item) pair with the smallest distance among
    centroids still unsnapped and items not yet taken is fixed, i.e. each centroid takes its
    nearest item not yet taken, the closest centroids choosing first. Distinctness matters: two
    centroids snapped to the same item would silently give fewer than k representatives.
    The k × N distance matrix is never materialised (at 10⁶ rows it would be GBs and charge the
    peer for the bench's convenience): each centroid keeps its m nearest items, found in row
    chunks, in float64 so that near-ties are ordered by the true distance; should a centroid run
    out of candidates (more than m nearer items taken by others, or only items tied with the last
    kept one left) the search is redone with more. Ties go to the lower row index, so the result is
    the same as the greedy pass over the full matrix with a stable sort."""
    k = centroids.shape[0]
    n = X.shape[0]
    while True:
        idx, dist = nearest_candidates(X, centroids, min(m, n))
        # A candidate tied with the last kept one may stand for a dropped item of lower index.
        complete = idx.shape[1] >= n
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
                if ptr[j] >= idx.shape[1] or (not complete and dist[j, ptr[j]] >= dist[j, -1]):
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


def write_result(out, X, indices, weights, seconds, **extra):
    """The peer's answer for the benchmark script: the chosen rows, their weights, timings, versions."""
    import sklearn

    result = {
        'indices': [int(i) for i in indices],
        'weights': [float(w) for w in weights],
        **extra,
        'dtype': str(X.dtype),
        'seconds': seconds,
        'versions': {'numpy': np.__version__, 'sklearn': sklearn.__version__, 'python': sys.version.split()[0]},
        'blas': blas_info(),
    }
    with open(out, 'w') as f:
        json.dump(result, f)
