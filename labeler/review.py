"""Which windows to show the annotator next.

Pure numerics, no storage, no display.

Every unconfirmed window gets a score from two parts:

- uncertainty ``1 - margin``: the two most likely classes are close;
- unexplored ``1 - support / s_ref`` (clipped to [0, 1]): little label mass reached the window, so
  nothing confirmed resembles it; ``s_ref`` is the median support of the confirmed windows, the
  support a window has when it sits as close to the confirmations as they sit to each other;

``score = (w_uncertain * uncertainty + w_unexplored * unexplored) * (1 - w_density + w_density * density)``
where ``density`` is the window's graph degree relative to the largest degree: among equally
uncertain windows the typical ones go first, so an answer teaches the spreading about many windows
rather than about one outlier. Confirmed windows whose neighbourhood disagrees with their label
(``conflict`` above ``conflict_threshold``) and windows on which annotators disagree
(``disagreement``) are shown too, before the rest: they may hold a slip.

The list is diversified by greedy selection: after a window is taken, its graph neighbours and the
windows of its bout (the run of consecutive windows of one recording carrying the same proposed
label, and ``bout_gap`` windows either side) are suppressed, and the unexplored part of the score
of windows within ``explore_hops`` graph hops of it shrinks with their hop distance. Suppressed windows are used
only when the unsuppressed ones run out. Ties are broken by window index, so the queue is
deterministic for a given state.

With no confirmation at all, every window is unexplored and density alone orders them: the queue
then walks through the typical windows of different regions of the graph.

Drawn rather than ranked (``sample_power`` given): each item is drawn at random among the live
candidates with probability ``(1 - floor) * s**power / sum(s**power) + floor / n_live`` (``s`` the
score), and that probability and ``n_live`` are returned with the item, so an accuracy estimate can
weight the answer by how likely it was to be shown (:mod:`labeler.estimate`). A high power keeps
the draw close to the ranking; the floor gives every candidate a chance.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

import numpy as np

from labeler.errors import InputError

REASONS = ("conflict", "disagreement", "uncertain", "unexplored")


class ReviewInputError(InputError, ValueError):
    """Bad input to the review queue (also a ValueError)."""


@dataclass
class ReviewQueue:
    """Windows to show, best first: ``index`` (window indices), ``reason`` and ``score`` per item."""

    index: np.ndarray
    reason: np.ndarray
    score: np.ndarray
    probability: np.ndarray | None = None  # of being drawn, when drawn (sample_power given)
    pool: np.ndarray | None = None  # live candidates at each draw

    def __len__(self) -> int:
        return int(self.index.size)


class CSRGraph(NamedTuple):
    """A graph's compressed sparse rows (the arrays of a ``scipy.sparse.csr_matrix``): what the
    queue reads, without scipy (which a short command then need not import)."""

    indptr: np.ndarray
    indices: np.ndarray
    data: np.ndarray
    shape: tuple[int, int]


def _csr(graph):
    """``graph`` as compressed sparse rows: a :class:`CSRGraph` as it is, anything scipy.sparse
    takes (a sparse matrix, a dense array) converted."""
    if isinstance(graph, CSRGraph):
        return graph
    from scipy import sparse

    W = sparse.csr_matrix(graph)
    return CSRGraph(W.indptr, W.indices, W.data, W.shape)


def _symmetrized(W: CSRGraph) -> CSRGraph:
    """The structure of W + W.T (edges in either direction)."""
    from scipy import sparse

    M = sparse.csr_matrix((W.data, W.indices, W.indptr), shape=W.shape)
    U = (M + M.T).tocsr()
    return CSRGraph(U.indptr, U.indices, U.data, U.shape)


def _within_hops(U: CSRGraph, i: int, hops: int) -> tuple[np.ndarray, np.ndarray]:
    """Windows fewer than ``hops`` graph hops from window ``i`` (``i`` included) and their hop
    counts: a breadth-first walk over U's rows."""
    seen = {int(i): 0}
    frontier = np.array([i], dtype=np.int64)
    for h in range(1, hops):
        if not frontier.size:
            break
        nxt = np.unique(np.concatenate([U.indices[U.indptr[j]:U.indptr[j + 1]] for j in frontier]))
        nxt = np.array([j for j in nxt.tolist() if j not in seen], dtype=np.int64)
        for j in nxt.tolist():
            seen[j] = h
        frontier = nxt
    return np.fromiter(seen.keys(), np.int64, len(seen)), np.fromiter(seen.values(), float, len(seen))


def _bouts(recording, seq, label, n):
    """Bout id per window: runs of consecutive seq in one recording with one proposed label."""
    if recording is None or seq is None:
        return None
    recording = np.asarray(recording)
    seq = np.asarray(seq).astype(np.int64)
    if recording.shape != (n,) or seq.shape != (n,):
        raise ReviewInputError(f"recording and seq must have one entry per window ({n}), got "
                               f"shapes {recording.shape} and {seq.shape}")
    _, rec = np.unique(recording, return_inverse=True)
    order = np.lexsort((seq, rec))
    lab = np.zeros(n, dtype=np.int64) if label is None else np.asarray(label)
    new = np.ones(n, dtype=bool)
    a, b = order[:-1], order[1:]
    new[1:] = ~((rec[a] == rec[b]) & (seq[b] - seq[a] == 1) & (lab[a] == lab[b]))
    bout = np.empty(n, dtype=np.int64)
    bout[order] = np.cumsum(new) - 1
    return bout, rec, seq, order


def _parts(W: CSRGraph, outputs, labeled, w_uncertain, w_unexplored, w_density):
    n = W.shape[0]
    deg = np.zeros(n)
    rows = np.flatnonzero(np.diff(W.indptr))
    if rows.size:
        deg[rows] = np.add.reduceat(np.asarray(W.data, dtype=np.float64), W.indptr[rows])
    density = deg / deg.max() if deg.max() > 0 else np.ones(n)
    if outputs is None or not labeled.any():
        unc = np.zeros(n)
        unexp = np.ones(n)
    else:
        unc = 1.0 - np.asarray(outputs.margin, dtype=np.float64)
        sup = np.asarray(outputs.support, dtype=np.float64)
        s_ref = float(np.median(sup[labeled]))
        unexp = np.clip(1.0 - sup / s_ref, 0.0, 1.0) if s_ref > 0 else np.ones(n)
    weight = 1.0 - w_density + w_density * density
    return w_uncertain * unc * weight, w_unexplored * unexp * weight


def review_scores(graph, outputs=None, labeled_mask=None, *, w_uncertain: float = 1.0,
                  w_unexplored: float = 1.0, w_density: float = 0.5):
    """Score and reason (``"uncertain"``/``"unexplored"``) of every window before diversification."""
    W = _csr(graph)
    labeled = np.zeros(W.shape[0], bool) if labeled_mask is None else np.asarray(labeled_mask, bool)
    a, b = _parts(W, outputs, labeled, w_uncertain, w_unexplored, w_density)
    return a + b, np.where(a > b, "uncertain", "unexplored")


def review_queue(graph, outputs=None, labeled_mask=None, recording=None, seq=None, n: int = 50, *,
                 disagreement=None, conflict_threshold: float = 0.5, w_uncertain: float = 1.0,
                 w_unexplored: float = 1.0, w_density: float = 0.5, bout_gap: int = 3,
                 explore_hops: int = 2, suppress_neighbors: bool = True, exclude=None,
                 sample_power: float | None = None, sample_floor: float = 0.1,
                 random_state=None, symmetric: bool = False) -> ReviewQueue:
    """Up to ``n`` windows to show next (see the module docstring).

    ``outputs`` is a :class:`labeler.spreading.WindowOutputs` (None before any confirmation);
    ``labeled_mask`` marks confirmed windows; ``recording``/``seq`` give bouts (optional);
    ``disagreement`` is a boolean mask of windows annotators disagree on; ``exclude`` a mask of
    windows never to show (e.g. already in an audit). ``sample_power`` draws instead of ranking
    (module docstring). Within one queue, the unexplored part of a
    window's score is scaled by ``min(h, explore_hops) / explore_hops``, h its number of graph hops
    to the nearest window already taken, so one list covers several unexplored regions.
    ``graph``: a scipy sparse matrix or a :class:`CSRGraph`; ``symmetric=True`` says it is
    symmetric (as :func:`labeler.graph.build_graph` makes it), so its rows already hold the
    edges of both directions.
    """
    W = _csr(graph)
    N = W.shape[0]
    if W.shape != (N, N):
        raise ReviewInputError(f"graph must be square, got shape {W.shape}")
    if int(n) != n or n < 0:
        raise ReviewInputError(f"n must be a whole number >= 0, got {n}")
    if int(explore_hops) != explore_hops or explore_hops < 1:
        raise ReviewInputError(f"explore_hops must be a whole number >= 1, got {explore_hops}")
    if sample_power is not None and not (np.isfinite(sample_power) and sample_power > 0
                                         and 0 < sample_floor <= 1):
        raise ReviewInputError(f"sample_power must be > 0 and sample_floor in (0, 1], got "
                               f"{sample_power} and {sample_floor}")
    labeled = np.zeros(N, bool) if labeled_mask is None else np.asarray(labeled_mask, dtype=bool)
    if labeled.shape != (N,):
        raise ReviewInputError(f"labeled_mask must have one entry per window ({N}), got shape {labeled.shape}")
    excluded = np.zeros(N, bool) if exclude is None else np.asarray(exclude, dtype=bool)
    unc, unexp = _parts(W, outputs, labeled, w_uncertain, w_unexplored, w_density)
    reason = np.where(unc > unexp, "uncertain", "unexplored").astype(object)
    # items shown first: windows annotators disagree on, then conflicts among confirmed windows
    first = np.full(N, -np.inf)
    if outputs is not None and labeled.any():
        conflict = np.asarray(outputs.conflict, dtype=np.float64)
        hit = labeled & (conflict > conflict_threshold)
        first[hit] = 2.0 + conflict[hit]
        reason[hit] = "conflict"
    if disagreement is not None:
        dis = np.asarray(disagreement, dtype=bool)
        if dis.shape != (N,):
            raise ReviewInputError(f"disagreement must have one entry per window ({N}), got shape {dis.shape}")
        first[dis] = 4.0
        reason[dis] = "disagreement"
    candidate = ((~labeled) | np.isfinite(first)) & ~excluded
    label = None if outputs is None else np.asarray(outputs.label)
    bouts = _bouts(recording, seq, label, N)
    if bouts is not None:
        bout, rec, _, tord = bouts
        # bout ids increase along the time order, so each bout is one slice of it
        bout_sorted = bout[tord]
        b_lo = np.searchsorted(bout_sorted, np.arange(bout_sorted[-1] + 1), side="left")
        b_hi = np.searchsorted(bout_sorted, np.arange(bout_sorted[-1] + 1), side="right")
    H = int(explore_hops)
    # hops ignore direction and weights: one symmetric structure, made once
    U = _symmetrized(W) if unexp.any() and not symmetric else W
    hop_factor = np.ones(N)
    suppressed = np.zeros(N, dtype=bool)
    available = candidate.copy()
    taken: list[int] = []
    scores: list[float] = []
    probs: list[float] = []
    pools: list[int] = []
    rng = np.random.default_rng(random_state) if sample_power is not None else None
    while len(taken) < n:
        score = np.where(np.isfinite(first), first, unc + unexp * hop_factor)
        live = available & ~suppressed
        if not live.any():
            live = available  # every unsuppressed candidate is taken: relax suppression
            if not live.any():
                break
        if rng is not None and not np.isfinite(first[live]).any():
            i, q, m = _draw(score, live, sample_power, sample_floor, rng)
            probs.append(q)
            pools.append(m)
        else:
            masked = np.where(live, score, -np.inf)
            i = int(np.argmax(masked))  # first index among ties: deterministic
            if rng is not None:  # shown first by rule, not by chance
                probs.append(1.0)
                pools.append(1)
        taken.append(i)
        scores.append(float(score[i]))
        available[i] = False
        if np.isfinite(first[i]):
            continue  # conflicts and disagreements do not suppress the rest
        if suppress_neighbors:
            suppressed[W.indices[W.indptr[i]:W.indptr[i + 1]]] = True
        if unexp.any():
            near, d = _within_hops(U, i, H)
            hop_factor[near] = np.minimum(hop_factor[near], d / H)
        if bouts is not None and bout_gap >= 0:
            # same bout, and the bout_gap windows either side in time
            lo, hi = b_lo[bout[i]], b_hi[bout[i]]
            near_t = tord[max(0, lo - bout_gap):hi + bout_gap]
            suppressed[near_t[rec[near_t] == rec[i]]] = True
    idx = np.asarray(taken, dtype=np.int64)
    return ReviewQueue(idx, np.asarray(reason[idx], dtype=str) if idx.size else np.array([], dtype=str),
                       np.asarray(scores),
                       None if rng is None else np.asarray(probs),
                       None if rng is None else np.asarray(pools, dtype=np.int64))


def _draw(score, live, power, floor, rng):
    """One window drawn among ``live`` (see the module docstring): (index, probability, pool)."""
    cand = np.flatnonzero(live)
    s = np.maximum(score[cand], 0.0)
    top = s.max()
    p = (s / top) ** power if top > 0 else np.zeros(cand.size)
    p = (1 - floor) * p / p.sum() + floor / cand.size if p.sum() > 0 else np.full(cand.size, 1 / cand.size)
    j = int(rng.choice(cand.size, p=p / p.sum()))
    return int(cand[j]), float(p[j]), int(cand.size)
