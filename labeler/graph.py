"""The window graph: who looks like whom, and who follows whom in time.

Pure numerics (numpy/scipy/scikit-learn), no storage, no display.

The graph has one node per window and two kinds of edges:

- similarity edges between each window and its ``n_neighbors`` nearest neighbours in the
  standardized (optionally PCA-reduced) feature space, weighted by local scaling
  (Zelnik-Manor & Perona, "Self-tuning spectral clustering", 2004):
  ``w_ij = exp(-d_ij**2 / (sigma_i * sigma_j))`` with ``sigma_i`` the distance from window ``i``
  to its ``K``-th nearest neighbour (``K = 7`` in that paper). Local scaling adapts the kernel
  width to the density around each window, so a dense cluster of sitting windows and a sparse
  cloud of rare transitions both get weights spread over (0, 1].
- temporal edges of weight ``temporal_weight`` between windows of one recording whose sequence
  numbers differ by exactly 1 (a gap in the recording breaks the sequence, so no edge is drawn
  across it). Consecutive windows usually belong to the same activity bout.

The result is a symmetric ``scipy.sparse.csr_matrix`` with a zero diagonal and non-negative
entries; where both kinds of edge join two windows their weights add.
"""

from __future__ import annotations

import json
import os
import time
from pathlib import Path

import numpy as np
from scipy import sparse

from labeler.errors import InputError
from labeler.reduction import check_features, fit_reduction
from labeler.reduction import standardize as _standardize

#: Up to this many windows the exact search is used without asking what it would cost.
#: Measured on a 2-core machine (benchmarks/bench_neighbours.py repeats it): exact search
#: (scikit-learn, kd-tree) took 2.3 s at 20k windows and 43-47 s at 100k-112k in 20-30 dimensions;
#: pynndescent took 1.2-10.5 s at 100k once compiled, with a recall of 0.87-0.97 of the true 10
#: neighbours, but compiling it costs 30-80 s of CPU in every new process.
APPROXIMATE_ABOVE = 100_000

#: CPU seconds assumed for compiling the approximate index in a new process until one compilation
#: has been measured on this machine (then the measurement, kept in the user's cache folder, is
#: used). Measured here: 96 s of CPU in a first process, 60 s once numba's cache holds what it can
#: keep (pynndescent's main search functions cannot be cached: they use dynamic globals).
DEFAULT_COMPILE_S = 60.0
#: CPU seconds per window assumed for the approximate search itself until measured (10.5 s per
#: 100k windows, the slower of the measurements above).
DEFAULT_APPROX_S_PER_ROW = 10.5e-5
#: Rows whose exact neighbours are searched to project the cost of the whole exact search.
COST_SAMPLE = 2000

#: K of local scaling: sigma_i is the distance to the K-th neighbour (Zelnik-Manor & Perona 2004).
LOCAL_SCALE_K = 7

#: Default weight of an edge between consecutive windows. Measured with the review queue and an
#: oracle (benchmarks/bench_proposals.py --part confirmations --quick, confirmations to 95 % on
#: 2 h of the demo simulator): one run gave 70 with weight 0.5 and 45 with weight 2, a later run
#: (same data, the graph's PCA computed anew) 45 with 0.5 and 85 with 2; on the crew of six 70
#: with either. The first crossing of 95 % swings by tens of confirmations with small changes of
#: the graph, so neither weight is shown to be better and 0.5 stays (weight 2 helped on real
#: recordings of ten people; measure with several seeds before changing it).
DEFAULT_TEMPORAL_WEIGHT = 0.5


class GraphInputError(InputError, ValueError):
    """Bad input to the graph builder (also a ValueError, as scikit-learn conventions expect)."""


def standardize(X) -> np.ndarray:
    """Columns scaled to mean 0 and standard deviation 1 (float64); constant columns become 0."""
    return _standardize(check_features(X, task="build a graph", min_windows=2, dtype=np.float64,
                                       error=GraphInputError))


def reduce(Z: np.ndarray, n_components: int | None) -> np.ndarray:
    """Standardized features projected onto their first ``n_components`` principal axes (the PCA
    of :mod:`labeler.reduction`); unchanged when None or not fewer than the columns."""
    if n_components is None or n_components >= Z.shape[1]:
        return Z
    if n_components < 1:
        raise GraphInputError(f"pca_components must be >= 1 or None, got {n_components}")
    mean, scale, comps, _ = fit_reduction(Z, min(n_components, Z.shape[0]))
    return ((Z - mean) / scale) @ comps.T


def nearest_neighbors(Z: np.ndarray, n_neighbors: int, *, method: str = "auto",
                      random_state: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Indices and distances of each row's ``n_neighbors`` nearest other rows, nearest first.

    ``method`` is "exact" (scikit-learn), "approximate" (pynndescent) or "auto": exact up to
    :data:`APPROXIMATE_ABOVE` rows; above, whichever is expected to cost less CPU time, the exact
    search projected from searching :data:`COST_SAMPLE` sampled rows, the approximate one from
    its measured cost per row plus, in a process that has not compiled it yet, its measured
    compilation (see :func:`choose_method`). Both arrays have shape (n, k) with
    k = min(n_neighbors, n - 1); a row is never its own neighbour. Ties are broken by index, so
    the result is deterministic.
    """
    n = Z.shape[0]
    k = min(int(n_neighbors), n - 1)
    if k < 1:
        raise GraphInputError(f"n_neighbors must be >= 1, got {n_neighbors}")
    if method not in ("auto", "exact", "approximate"):
        raise GraphInputError(f"unknown neighbour method {method!r}; use 'auto', 'exact' or 'approximate'")
    from sklearn.neighbors import NearestNeighbors  # here: importing scikit-learn takes a while

    exact = None
    if method == "auto":
        method, exact = choose_method(Z, k, random_state=random_state)
    if method == "exact":
        if exact is None:
            dist, ind = NearestNeighbors(n_neighbors=k + 1, n_jobs=None).fit(Z).kneighbors(Z)
        else:  # the rows searched while measuring are not searched again
            index, sample, (dist_s, ind_s) = exact
            rest = np.ones(n, dtype=bool)
            rest[sample] = False
            dist = np.empty((n, k + 1))
            ind = np.empty((n, k + 1), dtype=np.int64)
            dist[sample], ind[sample] = dist_s, ind_s
            dist[rest], ind[rest] = index.kneighbors(Z[rest])
    else:
        ind, dist = _approximate(Z, k + 1, random_state)
    return _drop_self(ind, dist, k)


def choose_method(Z: np.ndarray, k: int, *, random_state: int = 0):
    """("exact" or "approximate", what was measured or None) for k neighbours of each row.

    Above :data:`APPROXIMATE_ABOVE` rows the exact index is built (a fraction of the exact
    search's cost), :data:`COST_SAMPLE` random rows are searched and the CPU time projected to all
    rows; it is compared with the approximate search's expected CPU time, compilation included
    when this process has not compiled it yet. When exact wins, the index, the sampled rows and
    their neighbours (distances, indices) come back so that nothing is searched twice.
    """
    from sklearn.neighbors import NearestNeighbors

    n = Z.shape[0]
    if n <= APPROXIMATE_ABOVE:
        return "exact", None
    t0 = time.process_time()
    index = NearestNeighbors(n_neighbors=k + 1, n_jobs=None).fit(Z)
    build = time.process_time() - t0
    sample = np.random.default_rng(random_state).choice(n, size=min(COST_SAMPLE, n), replace=False)
    t0 = time.process_time()
    found = index.kneighbors(Z[sample])
    exact_cost = build + (time.process_time() - t0) * n / sample.size
    costs = _approximate_costs()
    approx_cost = costs["s_per_row"] * n + (0.0 if _APPROX["compiled"] else costs["compile_s"])
    if exact_cost <= approx_cost:
        return "exact", (index, sample, found)
    return "approximate", None


# the approximate index in this process: compiled yet? Costs measured here and kept in the user's
# cache folder (a small JSON file: CPU seconds of one compilation and per row), so that a new
# process knows them before paying them
_APPROX = {"compiled": False}


def _cost_file() -> Path:
    base = os.environ.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    return Path(base) / "labeler" / "neighbour-costs.json"


def _approximate_costs() -> dict:
    costs = {"compile_s": DEFAULT_COMPILE_S, "s_per_row": DEFAULT_APPROX_S_PER_ROW}
    try:
        stored = json.loads(_cost_file().read_text())
        for key in costs:
            if isinstance(stored.get(key), (int, float)) and stored[key] >= 0:
                costs[key] = float(stored[key])
    except (OSError, ValueError, AttributeError):
        pass
    return costs


def _remember_costs(**measured: float) -> None:
    costs = _approximate_costs()
    costs.update(measured)
    path = _cost_file()
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_name(f"{path.name}.{os.getpid()}.tmp")
        tmp.write_text(json.dumps(costs))
        os.replace(tmp, path)
    except OSError:
        pass  # a read-only home only costs the measurement next time


def _approximate(Z: np.ndarray, n_neighbors: int, random_state: int) -> tuple[np.ndarray, np.ndarray]:
    """pynndescent's neighbour graph (self included), compiling it first in a new process."""
    if not _APPROX["compiled"]:
        t0 = time.process_time()
        import pynndescent  # compiled here, on first use: 30-80 s of CPU

        tiny = np.random.default_rng(0).normal(size=(300, 4)).astype(np.float32)
        pynndescent.NNDescent(tiny, n_neighbors=5, random_state=0).neighbor_graph
        _APPROX["compiled"] = True
        _remember_costs(compile_s=time.process_time() - t0)
    import pynndescent

    t0 = time.process_time()
    index = pynndescent.NNDescent(Z, n_neighbors=n_neighbors, random_state=random_state)
    ind, dist = index.neighbor_graph
    _remember_costs(s_per_row=(time.process_time() - t0) / max(1, Z.shape[0]))
    return ind.astype(np.int64), dist.astype(np.float64)


def _drop_self(ind: np.ndarray, dist: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
    """Remove each row's own index (it need not come first when duplicates exist); keep k."""
    n = ind.shape[0]
    rows = np.arange(n)[:, None]
    not_self = ind != rows
    # rows where self was not returned at all (possible with many duplicates): drop the last column
    missing = not_self.all(axis=1)
    not_self[missing, -1] = False
    ind = ind[not_self].reshape(n, -1)[:, :k]
    dist = dist[not_self].reshape(n, -1)[:, :k]
    # deterministic order: by distance, then by index
    order = np.lexsort((ind, dist), axis=1)
    return np.take_along_axis(ind, order, 1), np.take_along_axis(dist, order, 1)


def local_scaling_weights(ind: np.ndarray, dist: np.ndarray, *, k_scale: int = LOCAL_SCALE_K,
                          n: int | None = None) -> sparse.csr_matrix:
    """Symmetric kNN weight matrix with local scaling (Zelnik-Manor & Perona 2004).

    ``ind``/``dist`` are the (n, k) neighbour arrays from :func:`nearest_neighbors`.
    ``sigma_i`` is the distance to the ``min(k_scale, k)``-th neighbour of ``i``; an edge exists
    where either end lists the other as a neighbour (the union), with weight
    ``exp(-d_ij**2 / (sigma_i * sigma_j))``, the same from both ends.
    A window whose K neighbours are all exact duplicates (sigma 0) gets the smallest positive
    sigma of the data set instead, so its weights stay defined.
    """
    ind = np.asarray(ind, dtype=np.int64)
    dist = np.asarray(dist, dtype=np.float64)
    n_rows, k = ind.shape
    n = n_rows if n is None else n
    kk = min(int(k_scale), k)
    if kk < 1:
        raise GraphInputError(f"k_scale must be >= 1, got {k_scale}")
    sigma = dist[:, kk - 1].copy()
    positive = sigma[sigma > 0]
    floor = positive.min() if positive.size else 1.0
    sigma[sigma <= 0] = floor
    rows = np.repeat(np.arange(n_rows), k)
    cols = ind.ravel()
    d2 = dist.ravel() ** 2
    w = np.exp(-d2 / (sigma[rows] * sigma[cols]))
    W = sparse.csr_matrix((w, (rows, cols)), shape=(n, n))
    W.sum_duplicates()
    W = W.maximum(W.T).tocsr()
    W.setdiag(0)
    W.eliminate_zeros()
    return W


def temporal_edges(recording, seq, n: int | None = None) -> sparse.csr_matrix:
    """0/1 symmetric matrix joining windows of one recording whose ``seq`` differ by exactly 1.

    ``recording`` and ``seq`` give, per window, its recording id and its sequence number within
    that recording; windows may come in any order.
    """
    recording = np.asarray(recording)
    seq = np.asarray(seq)
    if recording.shape != seq.shape or recording.ndim != 1:
        raise GraphInputError(f"recording and seq must be 1-D of equal length, got shapes "
                              f"{recording.shape} and {seq.shape}")
    m = recording.size
    n = m if n is None else n
    if m != n:
        raise GraphInputError(f"recording/seq describe {m} windows but the features have {n} rows")
    if m < 2:
        return sparse.csr_matrix((n, n))
    if not np.issubdtype(seq.dtype, np.integer):
        if not np.all(np.isfinite(seq)) or np.any(seq != np.round(seq)):
            bad = int(np.flatnonzero(~np.isfinite(seq) | (seq != np.round(seq)))[0])
            raise GraphInputError(f"window sequence numbers must be integers; window {bad} has {seq[bad]}")
        seq = seq.astype(np.int64)
    _, rec_code = np.unique(recording, return_inverse=True)
    order = np.lexsort((seq, rec_code))
    a, b = order[:-1], order[1:]
    same = (rec_code[a] == rec_code[b]) & (seq[b] - seq[a] == 1)
    a, b = a[same], b[same]
    data = np.ones(2 * a.size)
    T = sparse.csr_matrix((data, (np.concatenate([a, b]), np.concatenate([b, a]))), shape=(n, n))
    T.sum_duplicates()
    T.data[:] = 1.0  # duplicate sequence numbers must not create double edges
    return T


def build_graph(X, *, recording=None, seq=None, n_neighbors: int = 10,
                temporal_weight: float = DEFAULT_TEMPORAL_WEIGHT, pca_components: int | None = None,
                k_scale: int = LOCAL_SCALE_K, method: str = "auto",
                random_state: int = 0) -> sparse.csr_matrix:
    """Window graph from features ``X`` (n_windows x n_features), see the module docstring.

    Temporal edges are added only when both ``recording`` and ``seq`` are given and
    ``temporal_weight`` > 0. Deterministic for given inputs.
    """
    if not (np.isfinite(temporal_weight) and temporal_weight >= 0):
        raise GraphInputError(f"temporal_weight must be a finite number >= 0, got {temporal_weight}")
    if int(n_neighbors) != n_neighbors or n_neighbors < 1:
        raise GraphInputError(f"n_neighbors must be a whole number >= 1, got {n_neighbors}")
    Z = reduce(standardize(X), pca_components)
    ind, dist = nearest_neighbors(Z, int(n_neighbors), method=method, random_state=random_state)
    W = local_scaling_weights(ind, dist, k_scale=k_scale, n=Z.shape[0])
    if temporal_weight > 0 and recording is not None and seq is not None:
        W = (W + temporal_weight * temporal_edges(recording, seq, Z.shape[0])).tocsr()
    elif (recording is None) != (seq is None):
        raise GraphInputError("give both recording and seq for temporal edges, or neither")
    W.sort_indices()
    return W
