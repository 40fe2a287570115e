"""Tests of the review queue (labeler.review)."""

import numpy as np
import pytest
from scipy import sparse

from labeler.graph import build_graph
from labeler.review import review_queue, review_scores
from labeler.spreading import LabelSpreader


def clusters(seed=0, per=60):
    """Three well separated blobs in 2-D, one long recording visiting them in bouts of 20."""
    rng = np.random.default_rng(seed)
    centers = np.array([[0, 0], [8, 0], [0, 8]])
    truth = np.repeat(np.arange(3), per)
    X = centers[truth] + rng.normal(size=(truth.size, 2))
    # recording order: bouts of 20 windows, cycling through the classes
    order = np.concatenate([np.flatnonzero(truth == c)[b * 20:(b + 1) * 20]
                            for b in range(per // 20) for c in range(3)])
    seq = np.empty(truth.size, int)
    seq[order] = np.arange(truth.size)
    return X, truth, np.zeros(truth.size, int), seq


def test_cold_start_spreads_over_the_regions():
    X, truth, rec, seq = clusters()
    W = build_graph(X, recording=rec, seq=seq, temporal_weight=0)
    q = review_queue(W, None, None, rec, seq, n=6)
    assert len(q) == 6 and np.unique(q.index).size == 6
    assert set(q.reason) == {"unexplored"}
    # typical windows of all three regions among the first six
    assert set(truth[q.index]) == {0, 1, 2}


def test_no_neighbours_or_same_bout_in_queue():
    X, truth, rec, seq = clusters(1)
    W = build_graph(X, recording=rec, seq=seq)
    y = np.full(truth.size, -1)
    y[[0, 60, 120]] = truth[[0, 60, 120]]
    m = LabelSpreader().fit(W, y)
    o = m.outputs(y)
    q = review_queue(W, o, y >= 0, rec, seq, n=10)
    assert len(q) == 10 and not np.any(y[q.index] >= 0)
    picked = q.index
    A = W[picked][:, picked].toarray()
    assert np.count_nonzero(A) == 0  # no two picks are graph neighbours
    s = np.sort(seq[picked])
    assert np.all(np.diff(s) > 3)  # not consecutive windows of one bout


def test_conflict_and_disagreement_come_first_and_reasons():
    X, truth, rec, seq = clusters(2)
    W = build_graph(X, n_neighbors=8, temporal_weight=0)
    y = np.full(truth.size, -1)
    conf = np.flatnonzero(truth == 0)[:10]
    y[conf] = 0
    y[np.flatnonzero(truth == 1)[:10]] = 1
    slip = np.flatnonzero(truth == 0)[20]
    y[slip] = 1  # a slip: a window of blob 0 confirmed as class 1
    o = LabelSpreader().fit(W, y).outputs(y)
    dis = np.zeros(truth.size, bool)
    dis[np.flatnonzero(truth == 2)[5]] = True
    q = review_queue(W, o, y >= 0, n=8, disagreement=dis)
    assert q.index[0] == np.flatnonzero(dis)[0] and q.reason[0] == "disagreement"
    assert slip in q.index[:3] and q.reason[list(q.index).index(slip)] == "conflict"
    assert set(q.reason) <= {"conflict", "disagreement", "uncertain", "unexplored"}
    # unexplored: blob 2 has no confirmation
    rest = [i for i, r in zip(q.index, q.reason) if r == "unexplored"]
    assert rest and all(truth[i] == 2 for i in rest)


def test_deterministic_and_exclude():
    X, truth, rec, seq = clusters(3)
    W = build_graph(X, recording=rec, seq=seq)
    y = np.full(truth.size, -1)
    y[[5, 70]] = truth[[5, 70]]
    o = LabelSpreader().fit(W, y).outputs(y)
    a = review_queue(W, o, y >= 0, rec, seq, n=15)
    b = review_queue(W, o, y >= 0, rec, seq, n=15)
    np.testing.assert_array_equal(a.index, b.index)
    ex = np.zeros(truth.size, bool)
    ex[a.index[:5]] = True
    c = review_queue(W, o, y >= 0, rec, seq, n=15, exclude=ex)
    assert not set(c.index) & set(a.index[:5])


def test_fills_from_suppressed_when_few_remain():
    W = sparse.csr_matrix(np.ones((5, 5)) - np.eye(5))
    q = review_queue(W, None, None, n=10)
    assert sorted(q.index.tolist()) == [0, 1, 2, 3, 4]


def test_uncertain_scores_follow_margin():
    X, truth, rec, seq = clusters(4)
    W = build_graph(X, temporal_weight=0)
    y = np.full(truth.size, -1)
    y[np.flatnonzero(truth == 0)[:5]] = 0
    y[np.flatnonzero(truth == 1)[:5]] = 1
    y[np.flatnonzero(truth == 2)[:5]] = 2
    o = LabelSpreader().fit(W, y).outputs(y)
    score, reason = review_scores(W, o, y >= 0, w_unexplored=0.0, w_density=0.0)
    np.testing.assert_allclose(score, 1 - o.margin)


def test_bad_input():
    W = sparse.csr_matrix(np.ones((3, 3)) - np.eye(3))
    with pytest.raises(ValueError, match="labeled_mask"):
        review_queue(W, None, np.zeros(2, bool))
    with pytest.raises(ValueError, match="n must be"):
        review_queue(W, None, None, n=-1)


def test_hops_match_scipy_breadth_first_distances():
    """Windows within h hops against scipy.sparse.csgraph.dijkstra with unit weights (Virtanen et
    al., "SciPy 1.0: fundamental algorithms for scientific computing in Python", 2020)."""
    from scipy.sparse.csgraph import dijkstra

    from labeler.review import _csr, _within_hops

    rng = np.random.default_rng(4)
    A = sparse.random(300, 300, density=0.01, random_state=5, format="csr")
    U = (A + A.T).tocsr()
    G = _csr(U)
    for start in rng.choice(300, size=20, replace=False):
        for hops in (1, 2, 3, 4):
            near, d = _within_hops(G, int(start), hops)
            ref = dijkstra(U, directed=True, indices=int(start), unweighted=True, limit=hops - 0.5)
            want = np.flatnonzero(np.isfinite(ref))
            order = np.argsort(near)
            np.testing.assert_array_equal(near[order], want)
            np.testing.assert_array_equal(d[order], ref[want])


def test_queue_on_compressed_rows_equals_the_queue_on_the_sparse_matrix():
    from labeler.review import CSRGraph

    X, truth, rec, seq = clusters(3)
    W = build_graph(X, recording=rec, seq=seq)
    assert abs(W - W.T).max() == 0  # build_graph's graphs are symmetric
    y = np.full(truth.size, -1)
    y[[0, 60, 120]] = truth[[0, 60, 120]]
    o = LabelSpreader().fit(W, y).outputs(y)
    rows = CSRGraph(W.indptr, W.indices, W.data, W.shape)
    for state in range(3):
        a = review_queue(W, o, y >= 0, rec, seq, n=15, sample_power=32.0, sample_floor=0.05,
                         random_state=state)
        b = review_queue(rows, o, y >= 0, rec, seq, n=15, sample_power=32.0, sample_floor=0.05,
                         random_state=state, symmetric=True)
        np.testing.assert_array_equal(a.index, b.index)
        np.testing.assert_allclose(a.probability, b.probability, rtol=1e-12)
        np.testing.assert_array_equal(a.reason, b.reason)
