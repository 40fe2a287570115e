"""Label spreading over the window graph, and what it says about each window.

Pure numerics, no storage, no display.

:class:`LabelSpreader` computes the fixed point of Zhou et al., "Learning with local and global
consistency", 2004::

    F <- alpha * S @ F + (1 - alpha) * Y,    S = D**-1/2 W D**-1/2

where ``W`` is the window graph, ``D`` its degree matrix and ``Y`` the one-hot matrix of confirmed
labels (rows of unconfirmed windows are zero). The fixed point is
``F* = (1 - alpha) (I - alpha S)**-1 Y``. Two solvers reach it: ``"iterate"`` runs the update above
literally; ``"cg"`` (default) solves the same symmetric positive definite system
``(I - alpha S) F = (1 - alpha) Y`` by conjugate gradients, one column per class, which needs about
``sqrt(1 / (1 - alpha))`` times fewer sparse products. Both stop when a bound on the error of every
column of F, in the Euclidean norm, is below ``tol``.

Warm start: columns of F are independent, so after one more confirmation of class c only column c
has a residual; starting from the previous F the solver touches that column alone.

:func:`window_outputs` turns F into what the annotator sees per window: proposed label, the
normalized distribution, confidence, margin, support (how much label mass reached the window) and,
for confirmed windows, conflict (the neighbourhood disagrees with the confirmed label).

Proposed labels are suggestions: a qualified person reviews them before they are used.
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy import sparse
from sklearn.base import BaseEstimator

from labeler.errors import InputError
from labeler.outputs import WindowOutputs  # noqa: F401  (a result of this module)

#: Default clamping factor, tuned on scikit-learn's digits, BasicMotions and the demo simulator
#: (benchmarks/bench_proposals.py --part tune): with random confirmations accuracy is flat for alpha in
#: 0.8-0.95 and drops at 0.99 and above, where F tends to the graph's leading eigenvector times the
#: number of confirmations per class, so the class confirmed most often wins everywhere.
DEFAULT_ALPHA = 0.9


class SpreadingInputError(InputError, ValueError):
    """Bad input to label spreading (also a ValueError, as scikit-learn conventions expect)."""


def normalized_affinity(W) -> sparse.csr_matrix:
    """``S = D**-1/2 W D**-1/2`` with the diagonal of W ignored; isolated windows get a zero row."""
    W = sparse.csr_matrix(W, dtype=np.float64, copy=True)
    W.setdiag(0)
    W.eliminate_zeros()
    d = np.asarray(W.sum(axis=1)).ravel()
    inv = np.zeros_like(d)
    inv[d > 0] = 1.0 / np.sqrt(d[d > 0])
    Dm = sparse.diags(inv)
    S = (Dm @ W @ Dm).tocsr()
    S.sort_indices()
    return S


def check_graph(W, n: int | None = None) -> sparse.csr_matrix:
    """Validate a precomputed graph: sparse or dense, square, finite, non-negative, symmetric."""
    if not sparse.issparse(W):
        W = np.asarray(W, dtype=np.float64)
        if W.ndim != 2:
            raise SpreadingInputError(f"graph must be a 2-D matrix, got shape {W.shape}")
    if W.shape[0] != W.shape[1]:
        raise SpreadingInputError(f"graph must be square (windows x windows), got shape {W.shape}")
    if n is not None and W.shape[0] != n:
        raise SpreadingInputError(f"graph has {W.shape[0]} windows but y has {n} labels; "
                                  "give one label (or -1) per window")
    W = sparse.csr_matrix(W, dtype=np.float64)
    if W.nnz and not np.all(np.isfinite(W.data)):
        raise SpreadingInputError("graph has a non-finite weight; rebuild the graph")
    if W.nnz and W.data.min() < 0:
        i = int(np.argmin(W.data))
        r = int(np.searchsorted(W.indptr, i, side="right") - 1)
        raise SpreadingInputError(f"graph weights must be >= 0; weight {W.data[i]} joins windows "
                                  f"{r} and {W.indices[i]}")
    asym = abs(W - W.T)
    if asym.nnz and asym.max() > 1e-9 * max(1.0, abs(W).max()):
        raise SpreadingInputError("graph must be symmetric (w_ij == w_ji); symmetrize it, e.g. "
                                  "W.maximum(W.T)")
    return W


def _check_y(y) -> np.ndarray:
    y = np.asarray(y)
    if y.ndim != 1:
        raise SpreadingInputError(f"y must be 1-D (one label per window, -1 unlabeled), got shape {y.shape}")
    if not np.issubdtype(y.dtype, np.integer):
        if np.issubdtype(y.dtype, np.floating) and np.all(np.isfinite(y)) and np.all(y == np.round(y)):
            y = y.astype(np.int64)
        else:
            raise SpreadingInputError(f"y must hold integer class codes with -1 for unlabeled, "
                                      f"got dtype {y.dtype}")
    if np.any(y < -1):
        bad = int(np.flatnonzero(y < -1)[0])
        raise SpreadingInputError(f"y[{bad}] = {y[bad]}: class codes must be >= 0, -1 means unlabeled")
    return y.astype(np.int64)


def _solve(S, B, F0, alpha, tol, max_iter, solver, solved=None):
    """Solve (I - alpha S) F = B column by column from F0; returns F and the iterations used.

    ``solved`` (one bool per column, conjugate gradients only) marks columns known to meet the
    tolerance already (F0 there is the solution of the same system): they are not touched.
    """
    F = F0.copy()
    thresh = tol * (1.0 - alpha)  # ||r|| <= thresh  =>  ||F - F*|| <= tol (smallest eigenvalue 1-alpha)
    if solver == "iterate":
        # Zhou et al. 2004 update; contraction with factor alpha in the 2-norm (||S|| <= 1), so
        # ||F_t - F*|| <= alpha / (1 - alpha) * ||F_t - F_{t-1}||.
        active = np.ones(F.shape[1], dtype=bool)
        it = 0
        for it in range(1, max_iter + 1):
            cols = np.flatnonzero(active)
            new = alpha * (S @ F[:, cols]) + B[:, cols]
            step = np.sqrt(((new - F[:, cols]) ** 2).sum(axis=0))
            F[:, cols] = new
            active[cols[alpha * step <= thresh]] = False
            if not active.any():
                return F, it, True
        return F, it, False
    # conjugate gradients, columns in parallel, each with its own step sizes; the columns still
    # iterating are kept side by side in their own arrays (no strided column updates), and a
    # column leaves them as soon as its residual is small enough
    cols = np.arange(F.shape[1]) if solved is None else np.flatnonzero(~np.asarray(solved))
    if not cols.size:
        return F, 0, True
    Fa = F[:, cols]
    Ra = B[:, cols] - (Fa - alpha * _times(S, Fa))
    rs = (Ra * Ra).sum(axis=0)
    Pa = Ra.copy()
    it = 0
    while True:
        done = np.sqrt(rs) <= thresh
        if done.any():
            F[:, cols[done]] = Fa[:, done]
            keep = ~done
            cols, Fa, Ra, Pa, rs = cols[keep], Fa[:, keep], Ra[:, keep], Pa[:, keep], rs[keep]
        if not cols.size:
            return F, it, True
        if it >= max_iter:
            F[:, cols] = Fa
            return F, it, False
        it += 1
        AP = Pa - alpha * _times(S, Pa)
        a = rs / (Pa * AP).sum(axis=0)
        Fa += a * Pa
        Ra -= a * AP
        rs_new = (Ra * Ra).sum(axis=0)
        Pa = Ra + (rs_new / rs) * Pa
        rs = rs_new


def _times(S, M):
    """S @ M for a dense M of one or more columns (one column as a vector: scipy's faster path)."""
    if M.shape[1] == 1:
        return (S @ M[:, 0])[:, None]
    return S @ M


def reference_mass(W, alpha: float = DEFAULT_ALPHA, *, tol: float = 1e-6, max_iter: int = 2000,
                   S=None) -> np.ndarray:
    """Label mass each window would receive if every window were confirmed.

    ``r = (1 - alpha) (I - alpha S)**-1 1``; the support of a window is its received mass divided by
    this reference, a number in [0, 1]. Depends on the graph and alpha only, so it can be cached
    with the graph.
    """
    if S is None:
        S = normalized_affinity(check_graph(W))
    n = S.shape[0]
    B = np.full((n, 1), 1.0 - alpha)
    r, _, _ = _solve(S, B, np.ones((n, 1)), alpha, tol, max_iter, "cg")
    return r.ravel()


class LabelSpreader(BaseEstimator):
    """Graph label spreading (Zhou et al. 2004) with warm start, in scikit-learn style.

    Parameters
    ----------
    alpha : float in (0, 1)
        Clamping factor: the share of a window's scores that comes from its neighbours.
    tol : float
        Stop when the error of every class column of F is below ``tol`` (Euclidean norm).
    max_iter : int
        Upper bound on solver iterations; a ConvergenceWarning is issued when reached.
    solver : "cg" or "iterate"
        Conjugate gradients (fast) or the literal update of Zhou et al.; same fixed point.
    class_balance : bool, default False
        Divide each class column of F by that class's number of confirmed windows before
        normalizing rows (a simple variant of the class mass normalization of Zhu, Ghahramani &
        Lafferty, "Semi-supervised learning using Gaussian fields and harmonic functions", 2003,
        which rescales columns to class priors; from memory). It helps when confirmations are very
        unequal between classes, but then confirming a window can lower its own confidence (the
        class's denominator grows), so the default is the plain Zhou et al. distribution, where
        confirming never does.
    warm_start : bool
        Start from the previous fit's F (matched by class) when the number of windows is unchanged.
    kernel : "precomputed" (default) or "knn"
        What ``fit`` gets as X: a precomputed graph (windows x windows affinities, sparse or dense),
        or features (windows x features) from which the window graph is built with
        :func:`labeler.graph.build_graph` (scikit-learn's convention for precomputed affinities).
    n_neighbors, temporal_weight, pca_components : graph settings, used only with ``kernel="knn"``.

    Attributes
    ----------
    classes_ : class codes seen among the confirmed windows, sorted.
    label_mass_ : un-normalized F, shape (n_windows, n_classes).
    label_distributions_ : F with rows normalized to sum 1 (all-zero rows stay zero).
    transduction_ : classes_[argmax F] per window.
    n_iter_ : solver iterations of the last fit.
    unchanged_columns_ : per class, True where the column of ``label_mass_`` is the previous
        fit's as it was (a warm start on the same graph whose confirmations of that class did
        not change: not solved again).
    graph_ : the graph used (csr_matrix).
    """

    def __init__(self, alpha: float = DEFAULT_ALPHA, *, tol: float = 1e-6, max_iter: int = 2000,
                 solver: str = "cg", class_balance: bool = False, warm_start: bool = False,
                 kernel: str = "precomputed", n_neighbors: int = 10,
                 temporal_weight: float | None = None, pca_components: int | None = None):
        self.alpha = alpha
        self.tol = tol
        self.max_iter = max_iter
        self.solver = solver
        self.class_balance = class_balance
        self.warm_start = warm_start
        self.kernel = kernel
        self.n_neighbors = n_neighbors
        self.temporal_weight = temporal_weight
        self.pca_components = pca_components

    def _check_params(self):
        if not (isinstance(self.alpha, (int, float, np.floating)) and 0 < self.alpha < 1):
            raise SpreadingInputError(f"alpha must lie strictly between 0 and 1, got {self.alpha!r}")
        if not (self.tol > 0):
            raise SpreadingInputError(f"tol must be > 0, got {self.tol!r}")
        if int(self.max_iter) != self.max_iter or self.max_iter < 1:
            raise SpreadingInputError(f"max_iter must be a whole number >= 1, got {self.max_iter!r}")
        if self.solver not in ("cg", "iterate"):
            raise SpreadingInputError(f"solver must be 'cg' or 'iterate', got {self.solver!r}")
        if self.kernel not in ("precomputed", "knn"):
            raise SpreadingInputError(f"kernel must be 'precomputed' or 'knn', got {self.kernel!r}")

    def fit(self, X, y, *, init=None, init_classes=None, recording=None, seq=None):
        """Spread the confirmed labels of ``y`` (-1 = unconfirmed) over the graph.

        ``X``: with ``kernel="precomputed"`` the graph (windows x windows, sparse or dense); with
        ``kernel="knn"`` the features (windows x features) from which the graph is built with
        :func:`labeler.graph.build_graph` (``recording``/``seq`` add temporal edges).
        ``init`` (n_windows x n_classes, columns in the order of ``init_classes``, default this
        fit's classes) is a starting F, e.g. the ``label_mass_`` of the previous fit.
        """
        self._check_params()
        y = _check_y(y)
        if self.kernel == "precomputed" and sparse.issparse(X) \
                and getattr(self, "_graph_in", None) is X \
                and getattr(self, "graph_", None) is not None and self.graph_.shape[0] == y.size:
            W = self.graph_  # the same graph object as the last fit: checked then
        elif self.kernel == "precomputed":
            W = check_graph(X, y.size)
        else:
            if sparse.issparse(X):
                raise SpreadingInputError("X is a sparse graph but kernel is 'knn' (features); "
                                          "pass kernel='precomputed' for a graph")
            Xa = np.asarray(X)
            if Xa.ndim != 2:
                raise SpreadingInputError(f"X must be a 2-D feature matrix, got shape {Xa.shape}")
            if Xa.shape[0] != y.size:
                raise SpreadingInputError(f"X has {Xa.shape[0]} windows but y has {y.size} labels; "
                                          "give one label (or -1) per window")
            from labeler.graph import DEFAULT_TEMPORAL_WEIGHT, build_graph

            tw = DEFAULT_TEMPORAL_WEIGHT if self.temporal_weight is None else self.temporal_weight
            W = build_graph(Xa, recording=recording, seq=seq, n_neighbors=self.n_neighbors,
                            temporal_weight=tw, pca_components=self.pca_components)
        labeled = y >= 0
        if not labeled.any():
            raise SpreadingInputError("y has no confirmed window (all -1); confirm at least one window")
        classes = np.unique(y[labeled])
        n, c = y.size, classes.size
        Y = np.zeros((n, c))
        Y[np.flatnonzero(labeled), np.searchsorted(classes, y[labeled])] = 1.0

        # reuse the normalized graph when fit is called again with the same graph object
        if getattr(self, "_graph_in", None) is X and hasattr(self, "_S"):
            S = self._S
        else:
            S = normalized_affinity(W)
            self._graph_in, self._S = X, S
            self.__dict__.pop("_reference", None)

        F0 = self._start(n, classes, init, init_classes, Y)
        solved = self._unchanged_columns(y, classes, S, init)
        F, it, ok = _solve(S, (1.0 - self.alpha) * Y, F0, float(self.alpha), float(self.tol),
                           int(self.max_iter), self.solver, solved)
        self._last = {"S": S, "y": y.copy(), "ok": ok,
                      "settings": (float(self.alpha), float(self.tol), self.solver)}
        if not ok:
            from sklearn.exceptions import ConvergenceWarning

            warnings.warn(f"label spreading stopped after max_iter={self.max_iter} iterations "
                          f"without reaching tol={self.tol}", ConvergenceWarning, stacklevel=2)
        self.graph_ = W
        self.classes_ = classes
        self.label_mass_ = F
        self.label_distributions_ = _distributions(F, y, classes, self.class_balance)
        self.transduction_ = classes[np.argmax(self.label_distributions_, axis=1)]
        self.n_iter_ = it
        self.unchanged_columns_ = (np.zeros(c, dtype=bool) if solved is None
                                   else np.asarray(solved, dtype=bool))
        return self

    def _unchanged_columns(self, y, classes, S, init):
        """Per class: True when a warm start begins from the last fit's solution for it, on the
        same graph and settings, that fit converged, and the class's confirmed windows are the
        same; such a column is solved already (one confirmation leaves all but one so)."""
        last = getattr(self, "_last", None)
        if (init is not None or not self.warm_start or last is None or last["S"] is not S
                or not last["ok"] or last["y"].shape != y.shape
                or last["settings"] != (float(self.alpha), float(self.tol), self.solver)):
            return None
        before = set(self.classes_.tolist())
        return np.array([int(k) in before and bool(np.array_equal(y == k, last["y"] == k))
                         for k in classes])

    def _start(self, n, classes, init, init_classes, Y):
        if init is None and self.warm_start and getattr(self, "label_mass_", None) is not None \
                and self.label_mass_.shape[0] == n:
            init, init_classes = self.label_mass_, self.classes_
        if init is None:
            return Y.copy()  # same start as Zhou's update from F(0) = Y
        init = np.asarray(init, dtype=np.float64)
        init_classes = classes if init_classes is None else np.asarray(init_classes)
        if init.ndim != 2 or init.shape[0] != n or init.shape[1] != init_classes.size:
            raise SpreadingInputError(f"init must have shape ({n}, {init_classes.size}), got {init.shape}")
        F0 = Y.copy()
        pos = {int(k): j for j, k in enumerate(init_classes)}
        for j, k in enumerate(classes):
            if int(k) in pos:
                F0[:, j] = init[:, pos[int(k)]]
        return F0

    def reference_mass(self) -> np.ndarray:
        """:func:`reference_mass` of the fitted graph (computed once per graph)."""
        if getattr(self, "_reference", None) is None:
            self._reference = reference_mass(None, float(self.alpha), tol=float(self.tol), S=self._S)
        return self._reference

    def outputs(self, y, reference=None) -> "WindowOutputs":
        """:func:`window_outputs` of the last fit."""
        if reference is None:
            reference = self.reference_mass()
        return _outputs(self.graph_, self.label_mass_, _check_y(y), self.classes_, reference,
                        float(self.alpha), self.class_balance)

    def support_conflict(self, y, reference=None) -> tuple[np.ndarray, np.ndarray]:
        """The support and conflict of :meth:`outputs` alone (the same numbers), for ``y`` the
        labels of the last fit."""
        y = _check_y(y)
        if reference is None:
            reference = self.reference_mass()
        col, col_ok = _columns(self.classes_, y)  # a confirmed window's (the rest are not read)
        return _support_conflict(self.graph_, np.maximum(self.label_mass_, 0.0).sum(axis=1),
                                 self.label_distributions_, y >= 0, col, col_ok, reference)


def _distributions(F, y, classes, class_balance):
    """Rows of F (optionally divided per class by its confirmation count) normalized to sum 1."""
    F = np.maximum(F, 0.0)
    if class_balance and classes.size:
        counts = np.array([(y == k).sum() for k in classes], dtype=np.float64)
        F = F / np.maximum(counts, 1.0)[None, :]
    rs = F.sum(axis=1, keepdims=True)
    return np.divide(F, rs, out=np.zeros_like(F), where=rs > 0)


def window_outputs(graph, F, y, *, classes=None, reference=None, alpha: float = DEFAULT_ALPHA,
                   class_balance: bool = False) -> WindowOutputs:
    """Per-window outputs from an un-normalized F (see :class:`WindowOutputs`).

    ``classes`` are the class codes of F's columns (default: sorted confirmed codes of ``y``).
    ``reference`` is :func:`reference_mass` of the graph (computed with ``alpha`` when not given).
    """
    y = _check_y(y)
    return _outputs(check_graph(graph, y.size), F, y, classes, reference, alpha, class_balance)


def _outputs(W, F, y, classes, reference, alpha, class_balance) -> WindowOutputs:
    """:func:`window_outputs` of a checked graph ``W`` and checked labels ``y``."""
    F = np.asarray(F, dtype=np.float64)
    labeled = y >= 0
    if classes is None:
        classes = np.unique(y[labeled])
    classes = np.asarray(classes)
    if F.shape != (y.size, classes.size):
        raise SpreadingInputError(f"F must have shape ({y.size}, {classes.size}), got {F.shape}")
    F = np.maximum(F, 0.0)
    mass = F.sum(axis=1)
    P = _distributions(F, y, classes, class_balance)
    n = y.size
    if classes.size == 0:
        z = np.zeros(n)
        return WindowOutputs(classes, np.full(n, -1), P, z, z.copy(), z.copy(), z.copy())
    top = np.argmax(P, axis=1)
    label = classes[top]
    label = np.where(labeled, y, label)
    col, col_ok = _columns(classes, label)
    confidence = np.where(col_ok, P[np.arange(n), col], 0.0)
    if classes.size > 1:
        part = np.partition(P, classes.size - 2, axis=1)
        margin = part[:, -1] - part[:, -2]
    else:
        margin = P[:, 0].copy()
    if reference is None:
        reference = reference_mass(W, alpha)
    support, conflict = _support_conflict(W, mass, P, labeled, col, col_ok, reference)
    return WindowOutputs(classes, label, P, confidence, margin, support, conflict)


def _columns(classes, codes):
    """Each window's column in a (windows x classes) array for its class code, and whether the
    code is one of ``classes`` (where not, the column is a valid index that must not be read)."""
    col = np.searchsorted(classes, codes)
    col_ok = (col < classes.size) & (classes[np.minimum(col, classes.size - 1)] == codes)
    return np.minimum(col, classes.size - 1), col_ok


def _support_conflict(W, mass, P, labeled, col, col_ok, reference):
    """(support, conflict) of :class:`WindowOutputs` from the label mass per window, the
    distributions ``P``, the confirmed windows, each window's column in ``P`` (and whether it
    has one) and the reference mass."""
    n = mass.size
    reference = np.asarray(reference, dtype=np.float64)
    support = np.clip(np.divide(mass, reference, out=np.zeros(n), where=reference > 0), 0.0, 1.0)
    # conflict: neighbours' backing of the confirmed label
    conflict = np.zeros(n)
    idx = np.flatnonzero(labeled)
    if idx.size:
        Wl = W[idx]
        deg = np.asarray(Wl.sum(axis=1)).ravel()
        # weighted mean over neighbours j of P[j, col_i]
        rows = np.repeat(np.arange(idx.size), np.diff(Wl.indptr))
        back = np.bincount(rows, weights=Wl.data * P[Wl.indices, col[idx][rows]], minlength=idx.size)
        share = np.divide(back, deg, out=np.ones(idx.size), where=deg > 0)
        conflict[idx] = np.where(col_ok[idx], 1.0 - share, 1.0)
    return support, np.clip(conflict, 0.0, 1.0)
