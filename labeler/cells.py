"""Nearest neighbours among many windows: exact up to :data:`EXACT_NEIGHBORS_UP_TO` reference
rows, above that an inverted-file search over k-means cells (Jégou, Douze & Schmid, "Product
quantization for nearest neighbor search", 2011): each query looks among the rows of the
:data:`N_PROBE` cells nearest to its own; distances to those candidates are exact. Used by the map
(:mod:`labeler.embedding`) for t-SNE's affinities and for placing new windows.
"""

from __future__ import annotations

import math
from typing import Callable

import numpy as np

#: Called with (fraction done in [0, 1], message).
Progress = Callable[[float, str], None]

#: Exact neighbour search up to this many reference windows; k-means cells above.
EXACT_NEIGHBORS_UP_TO = 10_000
#: Cells searched per query in the cell search (the query's own cell and the nearest others).
N_PROBE = 10
_BLOCK = 4_000_000  # distance-matrix entries computed at once in the neighbour search



def _kmeans(Z: np.ndarray, n_cells: int, random_state: int) -> np.ndarray:
    from sklearn.cluster import KMeans

    rng = np.random.RandomState(random_state)
    m = min(Z.shape[0], 40 * n_cells)
    sample = Z[np.sort(rng.choice(Z.shape[0], m, replace=False))] if m < Z.shape[0] else Z
    km = KMeans(n_clusters=n_cells, n_init=1, max_iter=20, random_state=random_state,
                algorithm="lloyd").fit(sample.astype(np.float32))
    return km.cluster_centers_.astype(np.float32)


def _nearest_centroid(Z: np.ndarray, centroids: np.ndarray) -> np.ndarray:
    cc = np.einsum("ij,ij->i", centroids, centroids)
    out = np.empty(Z.shape[0], dtype=np.int64)
    step = max(1, _BLOCK // max(1, centroids.shape[0]))
    for a in range(0, Z.shape[0], step):
        d = cc[None, :] - 2.0 * (Z[a:a + step] @ centroids.T)
        out[a:a + step] = np.argmin(d, axis=1)
    return out


class CellIndex:
    """Nearest neighbours among reference rows: exact up to ``exact_up_to`` rows, k-means cells above.

    ``build()`` returns each reference row's neighbours among the others, ``query(Q, k)`` those of
    new rows; both give (indices int64 (m, k), distances float64 (m, k)), nearest first, ties by
    index. Duck-types ``openTSNE.nearest_neighbors.KNNIndex``.
    """

    def __init__(self, data: np.ndarray, k: int, *, random_state: int = 0,
                 exact_up_to: int = EXACT_NEIGHBORS_UP_TO, n_probe: int = N_PROBE,
                 progress: Progress | None = None):
        self.data = np.ascontiguousarray(data, dtype=np.float32)
        self.n_samples = self.data.shape[0]
        self.k = int(k)
        self.random_state = random_state
        n = self.n_samples
        if n <= exact_up_to:
            self.n_cells = 1
            labels = np.zeros(n, dtype=np.int64)
            self.centroids = self.data.mean(axis=0, keepdims=True)
        else:
            self.n_cells = int(min(4096, max(2, round(math.sqrt(n)))))
            self.centroids = _kmeans(self.data, self.n_cells, random_state)
            labels = _nearest_centroid(self.data, self.centroids)
        self.labels = labels
        self.order = np.argsort(labels, kind="stable")
        self.sorted = self.data[self.order]
        self.sorted_sq = np.einsum("ij,ij->i", self.sorted, self.sorted)
        counts = np.bincount(labels, minlength=self.n_cells)
        self.starts = np.concatenate([[0], np.cumsum(counts)])
        self.n_probe = int(min(n_probe, self.n_cells))
        self._progress = progress

    def _probes(self, cell: int, need: int) -> np.ndarray:
        """Cells to search for queries of ``cell``: nearest centroids until enough candidates."""
        c = self.centroids
        d = np.einsum("ij,ij->i", c - c[cell], c - c[cell])
        order = np.lexsort((np.arange(self.n_cells), d))
        counts = self.starts[1:] - self.starts[:-1]
        total = np.cumsum(counts[order])
        m = max(self.n_probe, int(np.searchsorted(total, need)) + 1)
        return np.sort(order[:m])

    def _search(self, Q: np.ndarray, q_labels: np.ndarray, k: int, self_ids: np.ndarray | None
                ) -> tuple[np.ndarray, np.ndarray]:
        m = Q.shape[0]
        kk = k + (1 if self_ids is not None else 0)
        ind = np.empty((m, k), dtype=np.int64)
        dist = np.empty((m, k), dtype=np.float64)
        q_order = np.argsort(q_labels, kind="stable")
        q_counts = np.bincount(q_labels, minlength=self.n_cells)
        q_starts = np.concatenate([[0], np.cumsum(q_counts)])
        done = 0
        for cell in range(self.n_cells):
            rows = q_order[q_starts[cell]:q_starts[cell + 1]]
            if rows.size == 0:
                continue
            probes = self._probes(cell, kk)
            cand = np.concatenate([np.arange(self.starts[p], self.starts[p + 1]) for p in probes])
            C = self.sorted[cand]
            csq = self.sorted_sq[cand]
            step = max(1, _BLOCK // max(1, cand.size))
            for a in range(0, rows.size, step):
                r = rows[a:a + step]
                q = Q[r]
                d2 = csq[None, :] - 2.0 * (q @ C.T)
                top = np.argpartition(d2, kk - 1, axis=1)[:, :kk] if kk < cand.size else \
                    np.broadcast_to(np.arange(cand.size), (r.size, cand.size))
                ids = self.order[cand[top]]  # reference row ids
                diff = self.data[ids].astype(np.float64) - q[:, None, :].astype(np.float64)
                dd = np.sqrt(np.einsum("ijk,ijk->ij", diff, diff))
                if self_ids is not None:
                    own = ids == self_ids[r][:, None]
                    missing = ~own.any(axis=1)
                    # a row is its own neighbour at distance 0; where duplicates pushed it out,
                    # drop the farthest candidate instead
                    far = np.argmax(np.where(own, -np.inf, dd), axis=1)
                    own[missing, far[missing]] = True
                    ids = ids[~own].reshape(r.size, kk - 1)
                    dd = dd[~own].reshape(r.size, kk - 1)
                o = np.lexsort((ids, dd), axis=1)[:, :k]
                ind[r] = np.take_along_axis(ids, o, 1)
                dist[r] = np.take_along_axis(dd, o, 1)
            done += rows.size
            if self._progress is not None:
                self._progress(done / m, "finding neighbours")
        return ind, dist

    def build(self) -> tuple[np.ndarray, np.ndarray]:
        k = min(self.k, self.n_samples - 1)
        return self._search(self.data, self.labels, k, np.arange(self.n_samples))

    def query(self, query: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
        Q = np.ascontiguousarray(query, dtype=np.float32)
        k = min(int(k), self.n_samples)
        labels = np.zeros(Q.shape[0], dtype=np.int64) if self.n_cells == 1 else \
            _nearest_centroid(Q, self.centroids)
        return self._search(Q, labels, k, None)
