"""Proposals from three sources: the graph, a classifier, and time.

Pure numerics, no storage, no display.

:class:`Proposer` makes a proposed label for every window from the confirmed ones:

1. graph spreading (:class:`labeler.spreading.LabelSpreader`): label mass flows along the edges of
   the window graph, so a confirmation teaches the windows that look like it;
2. a classifier trained on the confirmed windows (multinomial logistic regression, scikit-learn):
   it draws class boundaries across the whole feature space, so it also reaches windows that are
   far from every confirmation in the graph (for instance another person's windows, whose graph
   neighbours are mostly their own windows);
3. time: activities persist, so the combined distribution is smoothed along each recording by a
   forward-backward pass of a hidden Markov model whose hidden state is the activity. A window
   keeps its activity to the next one with probability ``stay`` and switches to each other class
   with equal probability; a gap in the recording (sequence numbers not consecutive) forgets the
   past. The window's combined distribution is the emission; a confirmed window emits its label.

The graph and the classifier are combined as a product of experts:
``p(c) ∝ p_graph(c)**(1 - w) * p_classifier(c)**w`` with ``w = classifier_weight``; windows the
graph has not reached (no label mass) take the classifier alone. The forward-backward pass is the
textbook one (Rabiner, "A tutorial on hidden Markov models and selected applications in speech
recognition", 1989), with scaling per step.

What Project proposes (:meth:`labeler.project.Project.refresh_proposals`): the graph built from
every feature but the orientation-free extras of feature set 2, times the classifier with weight
:data:`DEFAULT_CLASSIFIER_WEIGHT` on the orientation-free features alone
(:func:`classifier_view`), smoothed along time with :data:`DEFAULT_STAY` and
:data:`DEFAULT_TEMPER`. The classifier on features that do not change when a
sensor turns is what carries a few confirmed bouts of one person to the others; the graph, with
the direction of gravity in each sensor, tells postures apart within a person. Measured with
``benchmarks/bench_proposals.py --part tune-proposals`` / ``benchmarks/carry_over.py`` (mean of 3
seeds; the figures are in DEVELOPERS.md, "Proposals across people"); single runs swing by tens of
confirmations, so only averages are compared.

Proposed labels are suggestions: a qualified person reviews them before they are used.
"""

from __future__ import annotations

import contextlib
import os
import threading
import warnings

import numpy as np
from sklearn.base import BaseEstimator

from labeler.cores import usable_cores
from labeler.errors import InputError
from labeler.spreading import DEFAULT_ALPHA, LabelSpreader, WindowOutputs, _check_y

#: Weight of the classifier against the graph (0 = graph alone, 1 = classifier alone). Measured
#: with one bout of each class confirmed on the first recording (accuracy on the other windows at
#: that start, then after 25 / 50 / 100 queue answers, mean of 3 seeds): on the crew of six 0.2
#: gave 0.771 / 0.906 / 0.945 / 0.970, 0.3 gave 0.790 / 0.915 / 0.942 / 0.964, 0.5 gave
#: 0.779 / 0.881 / 0.924 / 0.950 (spreading alone 0.497 / 0.843 / 0.907 / 0.960); on the demo shift
#: 0.643 / 0.963 / 0.983 / 0.991, 0.707 / 0.955 / 0.980 / 0.991 and 0.778 / 0.944 / 0.964 / 0.985
#: (alone 0.564 / 0.927 / 0.967 / 0.981); measured with the graph on every column of set 2, before
#: the graph left the orientation-free extras out. An earlier classifier on every column (not only
#: the orientation-free ones) made the crew worse.
DEFAULT_CLASSIFIER_WEIGHT = 0.3
#: Probability that a window's activity goes on in the next window (0 = no smoothing). Measured
#: with the review queue and an oracle from nothing confirmed (benchmarks/carry_over.py, quick
#: sizes, mean of 3 seeds), confirmations to 95 % queue / random: the crew of six 60 / 183 without
#: smoothing, 45 / 103 at stay 0.8 with the full emissions (temper 1), 50 / 120 at 0.9 with
#: temper 0.5; 2 h of the simulator 33 / 90 without, 33 / 90 at 0.8 (temper 1), 47 / >128 at 0.9
#: (temper 0.5); the demo shift 28 / 92 without, 27 / 82 at 0.8 (temper 1), 28 / 98 at 0.9 (temper
#: 0.5). BasicMotions and digits have no time order (nothing to smooth). Stronger smoothing makes
#: the distributions sure of whole bouts, short activities (transitions) are smoothed away and the
#: queue's margins stop pointing at the errors.
DEFAULT_STAY = 0.8
#: Inverse regularization of the logistic regression.
DEFAULT_C = 1.0
#: Power of the emissions in the smoothing (windows overlapping by half share their samples, so
#: a power below 1 counts their evidence once); 1 measured better than 0.5 (see DEFAULT_STAY).
DEFAULT_TEMPER = 1.0
#: The classifier's principal axes (as the graph's) and the fewest orientation-free columns it
#: takes alone (fewer: every column).
CLASSIFIER_COMPONENTS = 30
MIN_FREE_COLUMNS = 6
_EPS = 1e-6
#: What a window's margin (its uncertainty for the review queue) is taken from: "smoothed" the
#: final distribution; "both" also the distribution before smoothing; "experts" also the graph's
#: and the classifier's own; "disagree" also zero where the graph and the classifier differ.
#: "both" (the default) kept: "experts" and "disagree" needed 77 confirmations to 95 % on the crew
#: of six against 60 (mean of 3 seeds) and were behind after 25 queue answers from the first bouts
#: (0.884 / 0.888 against 0.915); with smoothing along time, "smoothed" needed 72 on the crew
#: against 45 and 43 on 2 h of the simulator against 33.
UNCERTAINTIES = ("both", "smoothed", "experts", "disagree")


class ProposingInputError(InputError, ValueError):
    """Bad input to the proposer (also a ValueError, as scikit-learn conventions expect)."""


def classifier_view(X, names, n_components: int = CLASSIFIER_COMPONENTS) -> np.ndarray:
    """The classifier's features of every window: the columns that do not depend on how a sensor
    sits (:func:`labeler.features.orientation_free`) when there are at least
    :data:`MIN_FREE_COLUMNS` of them, else every column; standardized and projected on at most
    ``n_components`` principal axes (float64, n_windows x k).

    The graph keeps every feature (posture, the direction of gravity in the sensor, tells
    activities apart within one person); the classifier, trained on few confirmations, is to
    carry them to other people, whose sensors may sit otherwise."""
    from labeler.features import orientation_free
    from labeler.graph import reduce, standardize

    X = np.asarray(X)
    names = list(names)
    if X.ndim != 2 or X.shape[1] != len(names):
        raise ProposingInputError(f"features must be (windows x {len(names)} named columns), got "
                                  f"shape {X.shape}")
    free = orientation_free(names)
    if free.size >= MIN_FREE_COLUMNS:
        X = X[:, free]
    Z = standardize(X)
    return reduce(Z, n_components if n_components < Z.shape[1] else None)


def classifier_probabilities(Z, y, classes, *, C: float = DEFAULT_C) -> np.ndarray:
    """Class probabilities of every row of ``Z`` from a logistic regression trained on the rows
    with ``y >= 0``; columns in ``classes`` order. Uniform when fewer than two classes are
    confirmed."""
    from sklearn.linear_model import LogisticRegression

    Z = np.asarray(Z, dtype=np.float64)
    classes = np.asarray(classes)
    n = Z.shape[0]
    lab = y >= 0
    if classes.size < 2:
        return np.ones((n, max(classes.size, 1)))
    with _quiet():  # convergence warnings on a handful of examples
        # Newton steps: about 10 of them where lbfgs takes 100-250 (10x faster here, and closer
        # to the optimum at the default tolerance)
        clf = LogisticRegression(C=C, solver="newton-cg", tol=1e-6, max_iter=100).fit(Z[lab],
                                                                                   y[lab])
    if clf.classes_.size > 2:
        proba = _softmax_scores(Z, clf.coef_, clf.intercept_)
    else:
        proba = clf.predict_proba(Z)
    if np.array_equal(clf.classes_, classes):
        return proba
    P = np.zeros((n, classes.size))
    P[:, np.searchsorted(classes, clf.classes_)] = proba
    return P


def _softmax_scores(Z, coef, intercept) -> np.ndarray:
    """A multinomial logistic regression's class probabilities of the rows of ``Z``: the
    operations of scikit-learn's ``predict_proba`` (its ``decision_function``, then its
    ``softmax``) in the same order, so the same numbers, without its input checks (``Z`` is the
    float64 array the model was trained on rows of)."""
    D = Z @ coef.T + intercept
    D -= _row_max(D)
    np.exp(D, out=D)
    D /= np.sum(D, axis=1).reshape(-1, 1)
    return D


def combine(P_graph: np.ndarray, P_clf: np.ndarray, weight: float) -> np.ndarray:
    """Product of experts ``P_graph**(1 - weight) * P_clf**weight``, rows normalized; a row the
    graph left at zero takes ``P_clf`` alone."""
    reached = P_graph.sum(axis=1) > 0
    # in place, each operation as written out in the formula (the same numbers, fewer copies)
    L = np.maximum(P_graph, _EPS)
    np.log(L, out=L)
    lc = np.maximum(P_clf, _EPS)
    np.log(lc, out=lc)
    alone = None if reached.all() else lc[~reached]
    L *= 1.0 - weight
    lc *= weight
    L += lc
    if alone is not None:
        L[~reached] = alone
    L -= _row_max(L)
    np.exp(L, out=L)
    L /= L.sum(axis=1, keepdims=True)
    return L


def _chains(recording, seq, n):
    """Windows in time order and, per position, whether it continues the previous window."""
    if recording is None or seq is None:
        return None
    recording = np.asarray(recording)
    seq = np.asarray(seq).astype(np.int64)
    if recording.shape != (n,) or seq.shape != (n,):
        raise ProposingInputError(f"recording and seq must have one entry per window ({n}), got "
                                  f"shapes {recording.shape} and {seq.shape}")
    _, rec = np.unique(recording, return_inverse=True)
    order = np.lexsort((seq, rec))
    cont = np.zeros(n, dtype=bool)
    cont[1:] = (rec[order[1:]] == rec[order[:-1]]) & (seq[order[1:]] - seq[order[:-1]] == 1)
    return order, cont


def _margin(P: np.ndarray) -> np.ndarray:
    """Top probability minus the second one, per row (the two largest values found column by
    column: the same values as sorting each row, fewer passes over few columns)."""
    k = P.shape[1]
    if k < 2:
        return P[:, 0].copy() if k else np.zeros(P.shape[0])
    top = np.maximum(P[:, 0], P[:, 1])
    second = np.minimum(P[:, 0], P[:, 1])
    low = np.empty_like(top)
    for i in range(2, k):
        np.minimum(top, P[:, i], out=low)
        np.maximum(second, low, out=second)
        np.maximum(top, P[:, i], out=top)
    top -= second
    return top


def _row_max(A: np.ndarray) -> np.ndarray:
    """The largest value of each row of a 2-D array without NaN, as a column (n x 1), found
    column by column (the same values as ``A.max(axis=1)``; faster for few columns)."""
    m = A[:, 0].copy()
    for i in range(1, A.shape[1]):
        np.maximum(m, A[:, i], out=m)
    return m[:, None]


_SIDE = threading.local()  # .quiet: this thread's warnings are dropped by _beside's recorder


@contextlib.contextmanager
def _quiet():
    """Warnings ignored while in the block: by a filter (process-wide) in the thread that calls
    the fit, or, in the thread :func:`_beside` runs beside it (where the filters are the fit's
    and its warnings are recorded), by a flag of that thread alone."""
    if getattr(_SIDE, "recorded", False):
        _SIDE.quiet = True
        try:
            yield
        finally:
            _SIDE.quiet = False
        return
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        yield


def _beside(main, side):
    """``(main(), side())``, ``side`` run in a thread of its own while ``main`` runs here (the
    sparse products, BLAS and numpy's operations on large arrays let go of the interpreter lock,
    so on two cores the two overlap); the same operations on the same arrays as one after the
    other, so the same numbers. Warnings filters are process-wide, so while both run every
    warning is recorded (but those of ``side`` in a :func:`_quiet` block) and issued again
    afterwards, under the filters as they were; an exception of ``main`` comes first, then one
    of ``side``."""
    got: dict = {}

    def run():
        _SIDE.recorded = True
        try:
            got["value"] = side()
        except BaseException as exc:  # handed to the caller
            got["error"] = exc

    caught = []

    def record(message, category, filename, lineno, file=None, line=None):
        if not getattr(_SIDE, "quiet", False):
            caught.append((message, category, filename, lineno))

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("always")
            warnings.showwarning = record
            thread = threading.Thread(target=run, name="labeler-classifier", daemon=True)
            thread.start()
            try:
                out = main()
            finally:
                thread.join()
    finally:
        for message, category, filename, lineno in caught:
            warnings.warn_explicit(message, category, filename, lineno)
    if "error" in got:
        raise got["error"]
    return out, got["value"]


def _core_free() -> bool:
    """Whether a second core is free for :func:`_beside`: two or more cores to run on and a
    load average (one minute) at least one below their number. Without a free core the two
    threads only take turns (measured at 112k windows on 2 cores at load 3-4: the median
    refresh the same, single refreshes up to twice as long)."""
    cores = usable_cores()
    try:
        load = os.getloadavg()[0]
    except (AttributeError, OSError):
        load = 0.0
    return cores >= 2 and load <= cores - 1


_BLAS = None


def _one_blas_thread():
    """A context in which BLAS runs on one thread (threadpoolctl). The one large BLAS product of
    a fit (the classifier's scores of every window, n x d times d x k) gains little from a second
    thread, and after it the second thread keeps spinning for a while, waiting for more work:
    CPU time taken from the smoothing that follows (and from other processes). The same numbers:
    OpenBLAS splits the rows between its threads, each entry is summed alike."""
    global _BLAS
    if _BLAS is None:
        from threadpoolctl import ThreadpoolController

        _BLAS = ThreadpoolController()
    return _BLAS.limit(limits=1, user_api="blas")


def _normalize(v: np.ndarray) -> np.ndarray:
    return v / v.sum(axis=-1, keepdims=True)


def temporal_smoothing(P, recording, seq, stay: float = DEFAULT_STAY, temper: float = 1.0,
                       *, chains=None) -> np.ndarray:
    """Posterior class distribution of each window given the emissions ``P`` (rows) of its whole
    recording, by forward-backward with a "stay or switch uniformly" transition (see the module
    docstring). ``stay`` in (0, 1); at or below 1/k (k classes) nothing is smoothed. ``temper``
    in (0, 1] raises the emissions to that power: overlapping windows share samples, so their
    evidence is not independent, and counting it in full makes the posterior overconfident.

    The chain is cut into about sqrt(n) blocks that are processed side by side: each block's
    transfer matrix, then the messages at the block borders one block after the other, then every
    window's message from its block's border (the same numbers as one pass, in O(sqrt(n)) steps
    of numpy instead of O(n)). The transition is applied as ``T v = s * sum(v) + c * v``, so no
    k x k matrix per window is formed. The arrays are laid out step, class(es), block, so that
    every operation of a step runs over all blocks as one contiguous row and the sums over
    classes add whole rows one after the other (with fewer than 8 classes the same order, so the
    same numbers, as a sum along a row; from 8 on numpy sums a row in another order, which moves
    the result by a few units in the last place). ``chains``: what :func:`_chains` gives for
    ``recording`` and ``seq`` when the caller keeps it (the same for every refresh).
    """
    P = np.asarray(P, dtype=np.float64)
    n, k = P.shape
    if not (0 < stay < 1):
        raise ProposingInputError(f"stay must lie strictly between 0 and 1, got {stay}")
    if chains is None:
        chains = _chains(recording, seq, n)
    if chains is None or k < 2 or stay <= 1.0 / k or n < 2:
        return P.copy()
    order, cont = chains
    switch = (1.0 - stay) / (k - 1)
    L = int(np.ceil(np.sqrt(n)))
    nb = int(np.ceil(n / L))
    E = np.ones((nb * L, k))
    E[:n] = np.maximum(P[order], 1e-12) ** temper
    # step, class, block: every operation of a step runs over the blocks, contiguous
    Et = np.ascontiguousarray(E.reshape(nb, L, k).transpose(1, 2, 0))
    step = np.zeros(nb * L, dtype=bool)
    step[:n] = cont
    step = np.ascontiguousarray(step.reshape(nb, L).T)
    st = np.where(step, switch, 1.0 / k)
    ct = np.where(step, stay - switch, 0.0)
    # each block's transfer matrix G_b = A_(L-1) ... A_0 with A_j = diag(E_j) T_j, all blocks at
    # once (G[i, m, b]); in place, each product and sum in the same order as written out
    G = np.zeros((k, k, nb))
    G[np.arange(k), np.arange(k)] = 1.0
    col = np.empty((k, nb))
    top = np.empty(nb)
    for j in range(L):
        np.sum(G, axis=0, out=col)
        col *= st[j]
        G *= ct[j]
        G += col
        G *= Et[j][:, None, :]
        np.max(G, axis=(0, 1), out=top)
        G /= top
    Gb = np.ascontiguousarray(G.transpose(2, 0, 1))  # one k x k matrix per block
    g = np.empty((nb, k))  # forward message before each block's first window
    g[0] = 1.0 / k
    for b in range(1, nb):
        g[b] = _normalize(Gb[b - 1] @ g[b - 1])
    h = np.empty((nb, k))  # backward message at each block's last window
    h[-1] = 1.0
    for b in range(nb - 2, -1, -1):
        h[b] = _normalize(Gb[b + 1].T @ h[b + 1])
    f = np.empty((L, k, nb))  # every window's forward message from its block's border
    v = np.ascontiguousarray(g.T)
    tot = np.empty(nb)
    for j in range(L):
        np.sum(v, axis=0, out=tot)
        v = Et[j] * (st[j] * tot + ct[j] * v)
        np.sum(v, axis=0, out=tot)
        v /= tot
        f[j] = v
    beta = np.empty((L, k, nb))  # ... and backward message
    v = np.ascontiguousarray(h.T)
    beta[-1] = v
    for j in range(L - 1, 0, -1):
        w = Et[j] * v
        np.sum(w, axis=0, out=tot)
        v = st[j] * tot + ct[j] * w
        np.sum(v, axis=0, out=tot)
        v /= tot
        beta[j - 1] = v
    f *= beta
    post = _normalize(f.transpose(2, 0, 1).reshape(nb * L, k)[:n])
    out = np.empty_like(post)
    out[order] = post
    return out


class Proposer(BaseEstimator):
    """Graph spreading, a classifier on the confirmed windows, and smoothing along time.

    Parameters
    ----------
    alpha : clamping factor of the spreading (:class:`labeler.spreading.LabelSpreader`).
    classifier_weight : float in [0, 1]; 0 = graph alone, 1 = classifier alone.
    stay : probability that an activity goes on to the next window; 0 turns smoothing off.
    C : inverse regularization of the logistic regression.
    warm_start : spreading starts from the previous fit's label mass.
    classifier_features : (n_windows, d) array or None; the classifier's features when ``fit``
        is given none (so that a clone fits like the original, e.g. in held-out folds).
    recording, seq : per-window recording and sequence number when ``fit`` is given none (as
        ``classifier_features``: a clone smooths along time like the original).

    Attributes
    ----------
    spreader_ : the fitted LabelSpreader.
    classes_ : confirmed class codes, sorted.
    label_distributions_ : (n_windows, n_classes) combined and smoothed distributions.
    transduction_ : proposed class per window (a confirmed window keeps its label).
    """

    def __init__(self, alpha: float = DEFAULT_ALPHA, *, classifier_weight: float =
                 DEFAULT_CLASSIFIER_WEIGHT, stay: float = DEFAULT_STAY,
                 temper: float = DEFAULT_TEMPER, uncertainty: str = "both", C: float = DEFAULT_C,
                 warm_start: bool = True, classifier_features=None, recording=None, seq=None):
        self.alpha = alpha
        self.classifier_weight = classifier_weight
        self.stay = stay
        self.temper = temper
        self.uncertainty = uncertainty
        self.C = C
        self.warm_start = warm_start
        self.classifier_features = classifier_features
        self.recording = recording
        self.seq = seq

    def fit(self, graph, y, *, features=None, recording=None, seq=None, init=None,
            init_classes=None):
        """Propose labels for every window: ``graph`` the window graph, ``y`` class codes with -1
        for unconfirmed, ``features`` (n_windows x d, e.g. standardized and PCA-reduced) for the
        classifier (None: no classifier), ``recording``/``seq`` for smoothing along time (None:
        none)."""
        if not (0.0 <= self.classifier_weight <= 1.0):
            raise ProposingInputError(f"classifier_weight must lie in [0, 1], got "
                                      f"{self.classifier_weight!r}")
        if not (0.0 <= self.stay < 1.0):
            raise ProposingInputError(f"stay must lie in [0, 1), got {self.stay!r}")
        if not (0.0 < self.temper <= 1.0):
            raise ProposingInputError(f"temper must lie in (0, 1], got {self.temper!r}")
        if self.uncertainty not in UNCERTAINTIES:
            raise ProposingInputError(f"uncertainty must be one of {', '.join(UNCERTAINTIES)}, "
                                      f"got {self.uncertainty!r}")
        if not (self.C > 0):
            raise ProposingInputError(f"C must be > 0, got {self.C!r}")
        y = _check_y(y)
        with _one_blas_thread():
            return self._fit(graph, y, features, recording, seq, init, init_classes)

    def _fit(self, graph, y, features, recording, seq, init, init_classes):
        if features is None:
            features = self.classifier_features
        if recording is None and seq is None:
            recording, seq = self.recording, self.seq
        sp = getattr(self, "spreader_", None)
        if sp is None or not self.warm_start or sp.alpha != self.alpha:
            sp = LabelSpreader(alpha=self.alpha, warm_start=self.warm_start)

        def spread():
            sp.fit(graph, y, init=init, init_classes=init_classes)

        # the classifier needs nothing from the spreading: fitted beside it, in a thread, when
        # a core is free (else one after the other)
        Z = Pc = None
        if features is not None and self.classifier_weight > 0:
            Z = np.asarray(features)
            classes = np.unique(y[y >= 0])  # the spreader's classes
            if Z.ndim == 2 and Z.shape[0] == y.size and classes.size > 1 and _core_free():
                Pc = _beside(spread, lambda: classifier_probabilities(Z, y, classes,
                                                                      C=self.C))[1]
        if Pc is None:
            spread()
        classes = sp.classes_
        P = sp.label_distributions_
        self.graph_distributions_ = P
        self.classifier_distributions_ = None
        if Z is not None and classes.size > 1:
            if Z.ndim != 2 or Z.shape[0] != y.size:
                raise ProposingInputError(f"features must have one row per window ({y.size}), "
                                          f"got shape {Z.shape}")
            if Pc is None:
                Pc = classifier_probabilities(Z, y, classes, C=self.C)
            self.classifier_distributions_ = Pc
            P = combine(P, Pc, float(self.classifier_weight))
        lab = y >= 0
        # a confirmed window emits its own label
        P = np.where(lab[:, None], 0.0, P)
        P[np.flatnonzero(lab), np.searchsorted(classes, y[lab])] = 1.0
        self.local_distributions_ = P
        if self.stay > 0 and recording is not None and seq is not None:
            # the windows' time order is the same for every fit with these arrays: kept
            kept = getattr(self, "_chains_kept", None)
            if kept is None or kept[0] is not recording or kept[1] is not seq \
                    or kept[2][0].size != y.size:
                kept = (recording, seq, _chains(recording, seq, y.size))
                self._chains_kept = kept
            P = temporal_smoothing(P, recording, seq, float(self.stay), float(self.temper),
                                   chains=kept[2])
        self.spreader_ = sp
        self.classes_ = classes
        self.label_distributions_ = P
        self.transduction_ = np.where(lab, y, classes[np.argmax(P, axis=1)])
        return self

    def outputs(self, y, reference=None) -> WindowOutputs:
        """Per-window outputs: label, distribution, confidence and margin from the combined
        distribution; support and conflict from the graph spreading."""
        y = _check_y(y)
        support, conflict = self.spreader_.support_conflict(y, reference=reference)
        P = self.label_distributions_
        n, k = P.shape
        label = self.transduction_
        confidence = P[np.arange(n), np.searchsorted(self.classes_, label)]
        margin = _margin(P)
        if self.uncertainty != "smoothed":
            # a window is uncertain when its own evidence or its time context is unsure
            margin = np.minimum(margin, _margin(self.local_distributions_))
        Pc = self.classifier_distributions_
        if self.uncertainty in ("experts", "disagree") and Pc is not None:
            # ... or when one of the two experts is unsure
            margin = np.minimum(margin, np.minimum(_margin(self.graph_distributions_),
                                                   _margin(Pc)))
            if self.uncertainty == "disagree":  # ... or when they disagree
                reached = self.graph_distributions_.sum(axis=1) > 0
                differ = reached & (np.argmax(self.graph_distributions_, axis=1)
                                    != np.argmax(Pc, axis=1))
                margin = np.where(differ & (y < 0), 0.0, margin)
        return WindowOutputs(self.classes_, label, P, confidence, margin, support, conflict)
