"""The map: every window as a point in 2-D, similar windows close together.

Pure numerics (numpy, scipy, scikit-learn, openTSNE); no storage, no display.

Pipeline
--------
1. **Standardize** each feature column to mean 0, standard deviation 1 (constant columns stay 0).
2. **PCA** to ``min(50, n_features, n_windows - 1)`` axes (at least 2), with the one PCA of
   :mod:`labeler.reduction` (exact, from the covariance matrix in float64) that the window graph
   uses too.
3. **2-D**:

   - ``method="pca"``: the first two principal axes. Instant; what the app shows first.
   - ``method="tsne"``: t-SNE (van der Maaten & Hinton, "Visualizing data using t-SNE", 2008) with
     FFT-accelerated interpolation of the repulsive forces (Linderman et al., "Fast
     interpolation-based t-SNE for improved visualization of single-cell RNA-seq data", 2019),
     through openTSNE's split into affinities, initialization and optimization.

t-SNE parameters chosen from the number of windows N
-----------------------------------------------------
- Learning rate ``max(N / 12, 200)`` with early exaggeration 12: Belkina et al., "Automated
  optimized parameters for t-distributed stochastic neighbor embedding improve visualization and
  analysis of large datasets", 2019 (learning rate = N / early exaggeration), also recommended by
  Kobak & Berens, Nature Communications 10:5416, 2019 (journal reference from memory). The floor of 200
  is the classic default for small N (van der Maaten's implementation).
- Perplexity 30 (Kobak & Berens 2019 keep 30 as the default at every N), lowered to ``(N - 1) / 3``
  for tiny N so that each window has the 3 × perplexity neighbours the affinities need.
- PCA initialization, first axis scaled to standard deviation 1e-4 (Kobak & Berens 2019), via
  ``openTSNE.initialization.rescale``, plus openTSNE's tiny jitter.
- 125 iterations of early exaggeration (momentum 0.5), then at most ``n_iter`` (default 500)
  plain iterations (momentum 0.8), stopped once 50 of them lower the KL divergence by less than
  :data:`KL_TOL` (10 %). openTSNE's defaults are 250 and 500; with the learning rate N / 12 the
  exaggerated phase settles sooner (Belkina et al. 2019), and the map's local structure is in
  place long before the plain phase ends (see :data:`KL_TOL` for what was measured).

Neighbours
----------
t-SNE's affinities need the 3 × perplexity nearest neighbours of each window. Up to
:data:`labeler.cells.EXACT_NEIGHBORS_UP_TO` windows they are exact (brute force with BLAS). Above, the windows are
first grouped into about sqrt(N) k-means cells, and each window's neighbours are sought among the
windows of the :data:`labeler.cells.N_PROBE` cells nearest to its own cell (an inverted-file search, as in
Jégou, Douze & Schmid, "Product quantization for nearest neighbor search", 2011); distances to the
candidates are exact. Windows are also reordered by cell during the optimization, so that
neighbours sit close in memory (the attractive-force pass was about 1.5 times faster at 100k windows with 2 threads); the result
is returned in the caller's order.

Placing new windows into an existing map
----------------------------------------
A fitted map keeps a :class:`MapState` made of plain arrays only (no pickled objects): the
standardization mean and scale, the PCA components, the reduced features of the *reference*
windows (the ones the map was fitted on) and their 2-D coordinates, plus a JSON-able dict of
parameters. :meth:`MapState.to_bytes` writes them as an ``.npz`` archive (read back with
``allow_pickle=False``), so a project file can keep it as a blob.

:func:`place` rebuilds the placement from those arrays: the new windows are standardized and
projected with the stored mean, scale and components; their nearest reference windows are found
in the stored reduced features; openTSNE's affinities of new to reference points (perplexity 5,
normalized per new point) are rebuilt from them; each new window starts at the median position of
its 25 nearest reference windows and is then optimized against the fixed reference map only
(``TSNEEmbedding.prepare_partial`` + ``optimize`` with openTSNE's ``transform`` settings: learning
rate 0.1, exaggeration 1.5, momentum 0.8, gradient clipped to 0.25, 250 iterations). New windows do
not move the reference windows or each other. For a PCA map placement is the projection itself.

Large N
-------
Above :data:`FIT_AT_MOST` windows t-SNE is fitted on a stratified subsample of that many windows
(strata from the caller, e.g. the recording id; otherwise k-means cells of the reduced features),
and the other windows are placed into that map as above, in chunks. Every stratum keeps at least
:data:`MIN_PER_STRATUM` windows (or all of its windows), so a short recording or a rare kind of
movement is still part of the reference.

Reproducibility: for a given ``random_state`` and ``n_jobs`` the coordinates are identical from run
to run (k-means, jitter and the optimization are seeded; the tests check it with n_jobs=1).

The map is a picture for finding and selecting windows; distances between far-apart groups on a
t-SNE map carry little meaning, and nothing here is a label.
"""

from __future__ import annotations

import math
import time
from typing import Callable

import numpy as np
import scipy.sparse as sp

from labeler.cells import CellIndex
from labeler.mapstate import METHODS, MapInputError, MapResult, MapState
from labeler.reduction import apply_reduction, check_features, fit_reduction

#: Called with (fraction done in [0, 1], message).
Progress = Callable[[float, str], None]

#: Windows fitted by t-SNE at most; above, a stratified subsample is fitted and the rest placed.
#: benchmarks/bench_map.py on this 2-core machine (other jobs running alongside): a 100k-window
#: fit took 329 s; 1M windows (200k fitted, 800k placed) took 452 s with 2.8 GB peak memory.
FIT_AT_MOST = 200_000

#: Windows kept per stratum at least when subsampling (or all of a smaller stratum).
MIN_PER_STRATUM = 200



EARLY_EXAGGERATION = 12.0
EARLY_EXAGGERATION_ITER = 125
N_ITER = 500
DEFAULT_PERPLEXITY = 30.0

#: Placement settings: openTSNE's ``TSNEEmbedding.transform`` defaults (Poličar, Stražar & Zupan,
#: "openTSNE: a modular Python library for t-SNE dimensionality reduction and embedding", 2019).
PLACE_PERPLEXITY = 5.0
PLACE_K = 25
PLACE_LEARNING_RATE = 0.1
PLACE_EXAGGERATION = 1.5
PLACE_MOMENTUM = 0.8
PLACE_MAX_GRAD_NORM = 0.25
PLACE_N_ITER = 250
#: New windows placed per optimization chunk (bounds memory; chunks are independent).
PLACE_CHUNK = 50_000

_CALLBACK_EVERY = 25

#: Iterations run between two looks at the map's span and its KL divergence.
BLOCK_ITER = 50
#: Interpolation intervals per axis of the FFT-accelerated gradient at most (openTSNE's default
#: grid has one interval per unit of the map's span, at least 50).
MAX_GRID_INTERVALS = 100
#: The plain iterations stop once 50 of them lower the KL divergence by less than this fraction.
#: Measured on 20k simulated windows (trustworthiness k = 10 on 5k of them, KL after each block
#: of 50 plain iterations): after 125 exaggerated iterations 0.9839 / 0.9863 / 0.9872 / 0.9872 /
#: 0.9869 at 50 / 100 / 150 / 200 / 250 plain iterations, KL falling by 19 / 12 / 9 / 7 % per
#: block; after 250 exaggerated ones 0.9834 / 0.9860 / 0.9863 / 0.9863 / 0.9863 and 0.9865 at
#: 450. The KL keeps falling by several % per block while the groups drift apart, long after
#: the neighbourhoods have stopped changing; 10 % stops after about 200.
KL_TOL = 0.10


# --------------------------------------------------------------------------------------------------
# parameter rules


def default_perplexity(n: int) -> float:
    """Perplexity for N windows: 30 (Kobak & Berens 2019), at most (N - 1) / 3."""
    return float(min(DEFAULT_PERPLEXITY, max(1.0, (n - 1) / 3.0)))


def default_learning_rate(n: int) -> float:
    """Learning rate max(N / 12, 200) (Belkina et al. 2019, with early exaggeration 12)."""
    return float(max(n / EARLY_EXAGGERATION, 200.0))


# --------------------------------------------------------------------------------------------------
# checks and progress


def _check_features(X, what: str = "features", min_windows: int = 1) -> np.ndarray:
    return check_features(X, what=what, task="make a map", min_windows=min_windows,
                          error=MapInputError)


class _Stage:
    """Maps a sub-task's fraction [0, 1] onto [start, end] of the caller's progress."""

    def __init__(self, progress: Progress | None, start: float = 0.0, end: float = 1.0):
        self.progress, self.start, self.end = progress, start, end

    def __call__(self, fraction: float, message: str) -> None:
        if self.progress is not None:
            f = self.start + (self.end - self.start) * min(max(fraction, 0.0), 1.0)
            self.progress(float(f), message)

    def sub(self, a: float, b: float) -> "_Stage":
        w = self.end - self.start
        return _Stage(self.progress, self.start + w * a, self.start + w * b)


# --------------------------------------------------------------------------------------------------
# subsampling


def stratified_subsample(n: int, size: int, strata: np.ndarray, *, random_state: int = 0,
                         min_per_stratum: int = MIN_PER_STRATUM) -> np.ndarray:
    """Sorted indices of ``size`` of ``n`` rows, spread over ``strata`` in proportion to their size.

    Every stratum keeps at least ``min(min_per_stratum, its size)`` rows; the remainder is shared in
    proportion to stratum size (largest remainders first), drawn at random within each stratum.
    """
    strata = np.asarray(strata)
    if strata.shape != (n,):
        raise MapInputError(f"strata must have one value per window ({n}), got shape {strata.shape}")
    if size >= n:
        return np.arange(n)
    _, codes = np.unique(strata, return_inverse=True)
    counts = np.bincount(codes)
    floor = np.minimum(counts, min_per_stratum)
    if floor.sum() > size:  # too many strata for the floor: share equally as far as it goes
        floor = np.minimum(counts, max(1, size // counts.size))
    rest = size - floor.sum()
    extra_cap = counts - floor
    share = extra_cap / max(extra_cap.sum(), 1) * max(rest, 0)
    take = floor + np.floor(share).astype(np.int64)
    short = size - take.sum()
    if short > 0:
        frac = share - np.floor(share)
        for s in np.lexsort((np.arange(counts.size), -frac)):
            if short == 0:
                break
            if take[s] < counts[s]:
                take[s] += 1
                short -= 1
    rng = np.random.RandomState(random_state)
    order = np.argsort(codes, kind="stable")
    starts = np.concatenate([[0], np.cumsum(counts)])
    picked = []
    for s in range(counts.size):
        members = order[starts[s]:starts[s + 1]]
        t = int(min(take[s], members.size))
        if t:
            picked.append(rng.choice(members, t, replace=False))
    out = np.sort(np.concatenate(picked)) if picked else np.empty(0, dtype=np.int64)
    return out[:size]


# --------------------------------------------------------------------------------------------------
# t-SNE pieces


def _callback(stage: _Stage, message: str, n_iter: int):
    def cb(iteration, error, embedding):
        stage(iteration / max(n_iter, 1), f"{message} {iteration}/{n_iter}")
        return False
    return cb


def _reference_embedding(state: MapState, n_jobs: int):
    """openTSNE ``TSNEEmbedding`` of the reference windows, able to place new points.

    The embedding is centred (openTSNE centres it in place when it prepares the interpolation grid);
    the returned shift must be added back to placed coordinates.
    """
    from openTSNE import TSNEEmbedding
    from openTSNE.affinity import Affinities, joint_probabilities_nn

    ref = state.reference_coords.astype(np.float64)
    shift = (ref.max(axis=0) + ref.min(axis=0)) / 2.0
    index = CellIndex(state.reference, PLACE_K, random_state=int(state.params.get("random_state", 0)))
    n_ref = ref.shape[0]

    class _ToReference(Affinities):
        """Affinities of new points to the fixed reference windows (openTSNE ``to_new`` contract)."""

        def __init__(self):
            super().__init__()
            self.P = sp.csr_matrix((n_ref, n_ref))
            self.knn_index = index

        def to_new(self, data, perplexity=PLACE_PERPLEXITY, return_distances=False,
                   k_neighbors=PLACE_K):
            k = min(int(k_neighbors), n_ref)
            nb, dist = index.query(data, k)
            P = joint_probabilities_nn(nb, dist, [min(float(perplexity), k / 3.0)], symmetrize=False,
                                       normalization="point-wise", n_reference_samples=n_ref,
                                       n_jobs=n_jobs)
            return (P, nb, dist) if return_distances else P

    emb = TSNEEmbedding(ref - shift, _ToReference(), negative_gradient_method="fft",
                        n_jobs=n_jobs, random_state=int(state.params.get("random_state", 0)))
    return emb, shift


def _place_reduced(state: MapState, Z: np.ndarray, stage: _Stage, n_jobs: int) -> np.ndarray:
    n = Z.shape[0]
    out = np.empty((n, 2), dtype=np.float32)
    if n == 0:
        return out
    if state.method == "pca":
        out[:] = Z[:, :2] if Z.shape[1] >= 2 else np.column_stack([Z[:, 0], np.zeros(n)])
        return out
    emb, shift = _reference_embedding(state, n_jobs)
    n_chunks = -(-n // PLACE_CHUNK)
    for i, a in enumerate(range(0, n, PLACE_CHUNK)):
        part_stage = stage.sub(i / n_chunks, (i + 1) / n_chunks)
        chunk = Z[a:a + PLACE_CHUNK]
        part_stage(0.0, "placing windows: neighbours")
        partial = emb.prepare_partial(chunk, initialization="median", k=PLACE_K,
                                      perplexity=PLACE_PERPLEXITY, k_neighbors=PLACE_K)
        partial.optimize(PLACE_N_ITER, learning_rate=PLACE_LEARNING_RATE,
                         exaggeration=PLACE_EXAGGERATION, momentum=PLACE_MOMENTUM,
                         max_grad_norm=PLACE_MAX_GRAD_NORM, inplace=True,
                         callbacks=_callback(part_stage.sub(0.2, 1.0), "placing windows",
                                             PLACE_N_ITER),
                         callbacks_every_iters=_CALLBACK_EVERY)
        out[a:a + PLACE_CHUNK] = np.asarray(partial) + shift
    stage(1.0, "placed windows")
    return out


def _fit_tsne(Z: np.ndarray, *, perplexity: float, learning_rate: float, n_iter: int,
              early_exaggeration_iter: int, random_state: int, n_jobs: int, stage: _Stage,
              kl_tol: float | None = None) -> tuple[np.ndarray, dict]:
    from openTSNE import TSNEEmbedding, initialization
    from openTSNE.affinity import PerplexityBasedNN
    from openTSNE.nearest_neighbors import PrecomputedNeighbors

    n = Z.shape[0]
    k = min(n - 1, int(3 * perplexity))
    stage(0.0, "finding neighbours")
    index = CellIndex(Z, k, random_state=random_state, progress=stage.sub(0.0, 0.25))
    nb, dist = index.build()
    # work in cell order so that neighbours sit close in memory
    order = index.order
    inv = np.empty(n, dtype=np.int64)
    inv[order] = np.arange(n)
    nb = inv[nb[order]]
    dist = dist[order]
    Zo = Z[order]
    stage(0.25, "computing affinities")
    aff = PerplexityBasedNN(knn_index=PrecomputedNeighbors(nb, dist), perplexity=perplexity,
                            n_jobs=n_jobs)
    init = initialization.rescale(Zo[:, :2].astype(np.float64))
    init = initialization.jitter(init, random_state=random_state)
    emb = TSNEEmbedding(init, aff, negative_gradient_method="fft", n_jobs=n_jobs,
                        random_state=random_state)
    total = early_exaggeration_iter + n_iter
    w_ee = early_exaggeration_iter / max(total, 1)
    run = stage.sub(0.3, 1.0)
    done = 0
    if early_exaggeration_iter:
        emb, _ = _optimize(emb, early_exaggeration_iter, run.sub(0.0, w_ee),
                           "t-SNE (early exaggeration)", tol=0.0,
                           exaggeration=EARLY_EXAGGERATION, momentum=0.5,
                           learning_rate=learning_rate)
    if n_iter:
        emb, done = _optimize(emb, n_iter, run.sub(w_ee, 1.0), "t-SNE",
                              tol=KL_TOL if kl_tol is None else kl_tol,
                              exaggeration=1.0, momentum=0.8, learning_rate=learning_rate)
    Y = np.empty((n, 2), dtype=np.float32)
    Y[order] = np.asarray(emb, dtype=np.float32)
    info = {"neighbors": "exact" if index.n_cells == 1 else "cells", "n_cells": index.n_cells,
            "n_probe": index.n_probe if index.n_cells > 1 else 0, "k_neighbors": k,
            "kl_divergence": None if emb.kl_divergence is None else float(emb.kl_divergence),
            "n_iter_run": int(done), "gradient": "fft"}
    return Y, info


def _optimize(emb, n_iter: int, stage: _Stage, message: str, *, tol: float,
              **params):
    """Run up to ``n_iter`` iterations of ``emb`` (an openTSNE embedding, in place) in blocks of
    :data:`BLOCK_ITER`: (embedding, iterations run).

    Before each block the interpolation grid is set to at most :data:`MAX_GRID_INTERVALS`
    intervals per axis (openTSNE's ``ints_in_interval`` from the embedding's current span); the
    cost of an FFT-accelerated gradient grows with the square of the intervals, and a map that
    spreads out as t-SNE runs would otherwise pay most of its time there. With ``tol`` > 0 the
    run stops once a block lowers the KL divergence by less than ``tol`` of its value.
    """
    done, before = 0, None
    while done < n_iter:
        m = min(BLOCK_ITER, n_iter - done)
        span = float(np.ptp(np.asarray(emb), axis=0).max())
        kl: list[float] = []

        def cb(iteration, error, embedding, _at=done):
            kl.append(float(error))
            stage((_at + iteration) / max(n_iter, 1), f"{message} {_at + iteration}/{n_iter}")
            return False

        emb = emb.optimize(m, inplace=True, callbacks=cb,
                           callbacks_every_iters=min(_CALLBACK_EVERY, m),
                           ints_in_interval=max(1.0, span / MAX_GRID_INTERVALS), **params)
        done += m
        if not kl:
            continue
        if tol > 0 and before is not None and before - kl[-1] < tol * kl[-1]:
            break
        before = kl[-1]
    return emb, done


# --------------------------------------------------------------------------------------------------
# estimator and functions


class MapMaker:
    """Makes a 2-D map of windows (scikit-learn conventions).

    Parameters
    ----------
    method : "pca" or "tsne"
    perplexity, learning_rate : float or "auto" (chosen from N, see the module docs)
    n_iter : plain t-SNE iterations after early exaggeration
    early_exaggeration_iter : iterations of early exaggeration (factor 12)
    n_components : PCA axes before t-SNE, or None for min(50, n_features, N - 1)
    fit_at_most : fit t-SNE on a stratified subsample above this many windows, place the rest
    random_state : seed (int); n_jobs : threads for openTSNE (results depend on it)

    Attributes after ``fit``: ``embedding_`` (float32 (n, 2)), ``state_`` (:class:`MapState`),
    ``params_`` (dict), ``fitted_`` (bool mask of the rows the map was fitted on),
    ``explained_variance_`` (PCA variances of the kept axes).
    """

    def __init__(self, method: str = "tsne", *, perplexity="auto", learning_rate="auto",
                 n_iter: int = N_ITER, early_exaggeration_iter: int = EARLY_EXAGGERATION_ITER,
                 n_components: int | None = None, fit_at_most: int = FIT_AT_MOST,
                 random_state: int = 0, n_jobs: int = 1):
        self.method = method
        self.perplexity = perplexity
        self.learning_rate = learning_rate
        self.n_iter = n_iter
        self.early_exaggeration_iter = early_exaggeration_iter
        self.n_components = n_components
        self.fit_at_most = fit_at_most
        self.random_state = random_state
        self.n_jobs = n_jobs

    def _validate(self, n: int) -> None:
        if self.method not in METHODS:
            raise MapInputError(f"unknown map method {self.method!r}; use 'pca' or 'tsne'")
        if not isinstance(self.random_state, (int, np.integer)) or isinstance(self.random_state, bool):
            raise MapInputError(f"random_state must be an integer, got {self.random_state!r}")
        if not isinstance(self.n_jobs, (int, np.integer)) or self.n_jobs < 1:
            raise MapInputError(f"n_jobs must be an integer >= 1, got {self.n_jobs!r}")
        for name in ("n_iter", "early_exaggeration_iter"):
            v = getattr(self, name)
            if not isinstance(v, (int, np.integer)) or v < 0:
                raise MapInputError(f"{name} must be an integer >= 0, got {v!r}")
        if not isinstance(self.fit_at_most, (int, np.integer)) or self.fit_at_most < 10:
            raise MapInputError(f"fit_at_most must be an integer >= 10, got {self.fit_at_most!r}")
        if self.n_components is not None and (not isinstance(self.n_components, (int, np.integer))
                                              or self.n_components < 2):
            raise MapInputError(f"n_components must be an integer >= 2 or None, got {self.n_components!r}")
        for name in ("perplexity", "learning_rate"):
            v = getattr(self, name)
            if not (v == "auto" or (isinstance(v, (int, float, np.number)) and not isinstance(v, bool)
                                    and math.isfinite(v) and v > 0)):
                raise MapInputError(f"{name} must be 'auto' or a positive number, got {v!r}")
        if self.method == "tsne" and n < 10:
            raise MapInputError(f"a t-SNE map needs at least 10 windows, got {n}; use method 'pca'")

    def fit(self, X, strata=None, progress: Progress | None = None) -> "MapMaker":
        """Fit the map on features X (n_windows, n_features).

        ``strata`` (one value per row, e.g. recording id) guides the subsample when N is above
        ``fit_at_most``; ``progress(fraction, message)`` is called as the work advances.
        """
        t0 = time.perf_counter()
        X = _check_features(X, min_windows=2)
        n = X.shape[0]
        self._validate(n)
        stage = _Stage(progress)
        stage(0.0, "standardizing and reducing features")
        mean, scale, comps, var = fit_reduction(X, self.n_components)
        if comps.shape[0] < 2:  # a single feature: second axis of zeros
            comps = np.vstack([comps, np.zeros_like(comps)])
            var = np.append(var, 0.0)
        Z = apply_reduction(X, mean, scale, comps)
        self.explained_variance_ = var
        params = {"method": self.method, "n_windows": int(n), "n_features": int(X.shape[1]),
                  "n_components": int(comps.shape[0]), "random_state": int(self.random_state)}
        fitted = np.ones(n, dtype=bool)
        if self.method == "pca":
            coords = np.ascontiguousarray(Z[:, :2], dtype=np.float32)
            state = MapState("pca", mean, scale, comps[:2], np.empty((0, 2), np.float32),
                             np.empty((0, 2), np.float32), params)
            params["n_fitted"] = int(n)
        else:
            stage = stage.sub(0.03, 1.0)
            fit_idx = np.arange(n)
            if n > self.fit_at_most:
                if strata is None:
                    cells = CellIndex(Z, 1, random_state=self.random_state, exact_up_to=0)
                    strata_used, how = cells.labels, "k-means cells"
                else:
                    strata_used, how = np.asarray(strata), "given strata"
                fit_idx = stratified_subsample(n, int(self.fit_at_most), strata_used,
                                               random_state=self.random_state)
                fitted[:] = False
                fitted[fit_idx] = True
                params["subsample"] = how
                fit_stage, place_stage = stage.sub(0.0, 0.6), stage.sub(0.6, 1.0)
            else:
                fit_stage, place_stage = stage, None
            m = fit_idx.size
            perplexity = default_perplexity(m) if self.perplexity == "auto" else \
                float(min(self.perplexity, (m - 1) / 3.0))
            lr = default_learning_rate(m) if self.learning_rate == "auto" else float(self.learning_rate)
            Zf = Z[fit_idx]
            Yf, info = _fit_tsne(Zf, perplexity=perplexity, learning_rate=lr,
                                 n_iter=int(self.n_iter),
                                 early_exaggeration_iter=int(self.early_exaggeration_iter),
                                 random_state=int(self.random_state), n_jobs=int(self.n_jobs),
                                 stage=fit_stage)
            params.update({"n_fitted": int(m), "perplexity": perplexity, "learning_rate": lr,
                           "early_exaggeration": EARLY_EXAGGERATION,
                           "early_exaggeration_iter": int(self.early_exaggeration_iter),
                           "n_iter": int(self.n_iter), "n_jobs": int(self.n_jobs), **info})
            state = MapState("tsne", mean, scale, comps, np.ascontiguousarray(Zf, np.float32), Yf,
                             params)
            coords = np.empty((n, 2), dtype=np.float32)
            coords[fit_idx] = Yf
            if place_stage is not None:
                rest = np.flatnonzero(~fitted)
                coords[rest] = _place_reduced(state, Z[rest], place_stage, int(self.n_jobs))
        params["seconds"] = round(time.perf_counter() - t0, 3)
        state.params = dict(params)
        self.state_, self.params_, self.fitted_, self.embedding_ = state, params, fitted, coords
        _Stage(progress)(1.0, "map ready")
        return self

    def fit_transform(self, X, strata=None, progress: Progress | None = None) -> np.ndarray:
        return self.fit(X, strata=strata, progress=progress).embedding_

    def transform(self, X, progress: Progress | None = None) -> np.ndarray:
        """Place new windows into the fitted map (the map itself does not move)."""
        if not hasattr(self, "state_"):
            raise MapInputError("this MapMaker is not fitted yet; call fit first")
        return place(self.state_, X, progress=progress, n_jobs=int(self.n_jobs))


def pca_map(X, *, progress: Progress | None = None) -> MapResult:
    """PCA map: the first two principal axes of the standardized features."""
    mm = MapMaker("pca").fit(X, progress=progress)
    return MapResult(mm.embedding_, "pca", mm.params_, mm.state_, mm.fitted_)


def tsne_map(X, *, random_state: int = 0, progress: Progress | None = None, n_jobs: int = 1,
             strata=None, **kwargs) -> MapResult:
    """t-SNE map (see :class:`MapMaker` for the keyword arguments)."""
    mm = MapMaker("tsne", random_state=random_state, n_jobs=n_jobs, **kwargs)
    mm.fit(X, strata=strata, progress=progress)
    return MapResult(mm.embedding_, "tsne", mm.params_, mm.state_, mm.fitted_)


def make_map(X, method: str = "pca", **kwargs) -> MapResult:
    """``pca_map`` or ``tsne_map`` by name."""
    if method == "pca":
        return pca_map(X, progress=kwargs.get("progress"))
    if method == "tsne":
        return tsne_map(X, **kwargs)
    raise MapInputError(f"unknown map method {method!r}; use 'pca' or 'tsne'")


def place(state: MapState, X_new, *, progress: Progress | None = None, n_jobs: int = 1
          ) -> np.ndarray:
    """Coordinates float32 (n_new, 2) of new windows placed into the map ``state`` describes."""
    state.validate()
    X_new = np.asarray(X_new)
    if X_new.ndim == 2 and X_new.shape[0] == 0:
        return np.empty((0, 2), dtype=np.float32)
    X_new = _check_features(X_new, "new windows' features")
    if X_new.shape[1] != state.n_features:
        raise MapInputError(f"new windows have {X_new.shape[1]} feature columns but the map was made "
                            f"with {state.n_features}; compute the same features or remake the map")
    Z = apply_reduction(X_new, state.mean, state.scale, state.components)
    stage = _Stage(progress)
    out = _place_reduced(state, Z, stage, int(n_jobs))
    stage(1.0, "placed windows")
    return out
