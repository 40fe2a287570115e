"""Proposals from the graph, a classifier and time (labeler.proposing)."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from sklearn.linear_model import LogisticRegression

from labeler.graph import build_graph
from labeler.proposing import (Proposer, ProposingInputError, _margin, _softmax_scores,
                               classifier_probabilities, combine, temporal_smoothing)
from labeler.spreading import LabelSpreader


def _posterior_by_enumeration(P, stay, cont):
    """Smoothed posteriors by summing over every state path (the definition of the forward-
    backward posterior: Rabiner, "A tutorial on hidden Markov models and selected applications in
    speech recognition", 1989, eq. 27), uniform start, uniform restart where ``cont`` is False."""
    n, k = P.shape
    switch = (1 - stay) / (k - 1)
    M = np.full((k, k), switch) + np.eye(k) * (stay - switch)
    post = np.zeros((n, k))
    for path in itertools.product(range(k), repeat=n):
        p = P[0, path[0]] / k
        for i in range(1, n):
            p *= (M[path[i - 1], path[i]] if cont[i] else 1 / k) * P[i, path[i]]
        for i in range(n):
            post[i, path[i]] += p
    return post / post.sum(axis=1, keepdims=True)


@pytest.mark.parametrize("n, gap", [(2, None), (6, None), (7, 3)])
def test_smoothing_equals_the_sum_over_state_paths(n, gap):
    rng = np.random.default_rng(n)
    P = rng.dirichlet(np.ones(3), n)
    seq = np.arange(n)
    if gap is not None:
        seq[gap:] += 1  # a gap in the recording: the chain starts afresh
    cont = np.r_[False, np.diff(seq) == 1]
    got = temporal_smoothing(P, np.zeros(n, int), seq, 0.8, temper=1.0)
    np.testing.assert_allclose(got, _posterior_by_enumeration(P, 0.8, cont), atol=1e-12)


@pytest.mark.parametrize("k", [8, 9])
def test_smoothing_with_eight_classes_and_more_equals_the_sum_over_state_paths(k):
    # from 8 classes numpy sums a row in another order than the class-major layout adds rows:
    # only the last places may differ
    rng = np.random.default_rng(k)
    P = rng.dirichlet(np.ones(k), 5)
    got = temporal_smoothing(P, np.zeros(5, int), np.arange(5), 0.8, temper=1.0)
    np.testing.assert_allclose(got, _posterior_by_enumeration(P, 0.8, np.r_[False, [True] * 4]),
                               atol=1e-12)


def test_margin_is_the_top_two_of_a_sort_bit_for_bit():
    # reference: numpy's sort (the margin's definition, top minus second; common practice, no
    # source)
    rng = np.random.default_rng(11)
    for k in (1, 2, 3, 7, 9):
        P = rng.dirichlet(np.ones(k), 500)
        P[:50] = np.round(P[:50], 1)  # ties among the top two
        part = np.sort(P, axis=1)
        want = part[:, -1] - part[:, -2] if k > 1 else P[:, 0]
        assert np.array_equal(_margin(P), want)


def test_classifier_probabilities_are_scikit_learns_predict_proba_bit_for_bit():
    # reference: scikit-learn's LogisticRegression.predict_proba (Pedregosa et al., "Scikit-learn:
    # machine learning in Python", 2011) on its digits (Alpaydin & Kaynak, "Optical recognition
    # of handwritten digits", 1998)
    from sklearn.datasets import load_digits

    X, t = load_digits(return_X_y=True)
    y = np.full(t.size, -1)
    y[::15] = t[::15]
    Z = X / 16.0
    clf = LogisticRegression(C=1.0, solver="newton-cg", tol=1e-6, max_iter=100).fit(Z[y >= 0],
                                                                                   y[y >= 0])
    assert np.array_equal(classifier_probabilities(Z, y, np.arange(10)), clf.predict_proba(Z))
    assert np.array_equal(_softmax_scores(Z, clf.coef_, clf.intercept_), clf.predict_proba(Z))


def test_smoothing_of_several_recordings_in_any_order_is_per_recording():
    rng = np.random.default_rng(1)
    P = rng.dirichlet(np.ones(4), 300)
    rec = np.repeat([5, 2, 9], 100)
    seq = np.tile(np.arange(100), 3)
    perm = rng.permutation(300)
    mixed = temporal_smoothing(P[perm], rec[perm], seq[perm], 0.9, temper=0.5)
    alone = np.vstack([temporal_smoothing(P[rec == r], rec[rec == r], seq[rec == r], 0.9,
                                          temper=0.5) for r in (5, 2, 9)])
    np.testing.assert_allclose(mixed[np.argsort(perm)], alone, atol=1e-10)


def test_tempered_smoothing_is_smoothing_of_the_powered_emissions():
    rng = np.random.default_rng(2)
    P = rng.dirichlet(np.ones(3), 6)
    Q = P ** 0.5 / (P ** 0.5).sum(axis=1, keepdims=True)
    rec, seq = np.zeros(6, int), np.arange(6)
    np.testing.assert_allclose(temporal_smoothing(P, rec, seq, 0.8, temper=0.5),
                               _posterior_by_enumeration(Q, 0.8, np.r_[False, [True] * 5]),
                               atol=1e-12)


def test_smoothing_at_uniform_stay_changes_nothing():
    P = np.random.default_rng(3).dirichlet(np.ones(4), 50)
    np.testing.assert_allclose(temporal_smoothing(P, np.zeros(50, int), np.arange(50), 0.25), P)


@pytest.mark.parametrize("stay", [0.0, 1.0, 1.5, -0.2])
def test_smoothing_refuses_a_stay_outside_0_1(stay):
    P = np.full((5, 2), 0.5)
    with pytest.raises(ProposingInputError, match="stay must lie strictly between 0 and 1"):
        temporal_smoothing(P, np.zeros(5, int), np.arange(5), stay)


def test_classifier_probabilities_are_scikit_learns():
    rng = np.random.default_rng(4)
    Z = rng.normal(size=(200, 5))
    y = np.full(200, -1)
    y[:40] = np.repeat([3, 7, 8, 3], 10)
    P = classifier_probabilities(Z, y, np.array([3, 7, 8]), C=0.5)
    # the reference: scikit-learn's default solver (lbfgs) run to a tight tolerance
    ref = LogisticRegression(C=0.5, max_iter=2000, tol=1e-10).fit(Z[:40], y[:40]).predict_proba(Z)
    np.testing.assert_allclose(P, ref, atol=1e-5)


def test_combine_is_a_normalized_product_and_unreached_windows_take_the_classifier():
    Pg = np.array([[0.8, 0.2], [0.0, 0.0]])
    Pc = np.array([[0.5, 0.5], [0.3, 0.7]])
    got = combine(Pg, Pc, 0.5)
    w = np.sqrt(Pg[0] * Pc[0])
    np.testing.assert_allclose(got[0], w / w.sum())
    np.testing.assert_allclose(got[1], Pc[1])


def test_without_classifier_and_time_it_is_label_spreading():
    from sklearn.datasets import load_digits

    X, t = load_digits(return_X_y=True)
    W = build_graph(X)
    y = np.full(t.size, -1)
    y[::40] = t[::40]
    p = Proposer(classifier_weight=0.0, stay=0.0).fit(W, y, features=X)
    s = LabelSpreader().fit(W, y)
    np.testing.assert_array_equal(p.transduction_, np.where(y >= 0, y, s.transduction_))


def test_confirmed_windows_keep_their_label_and_outputs_are_consistent():
    from sklearn.datasets import load_digits

    X, t = load_digits(return_X_y=True)
    W = build_graph(X)
    y = np.full(t.size, -1)
    y[::30] = t[::30]
    rec, seq = np.zeros(t.size, int), np.arange(t.size)
    p = Proposer(classifier_weight=0.5, stay=0.9).fit(W, y, features=X, recording=rec, seq=seq)
    out = p.outputs(y)
    lab = y >= 0
    np.testing.assert_array_equal(out.label[lab], y[lab])
    np.testing.assert_allclose(out.distribution.sum(axis=1), 1.0)
    assert ((out.margin >= 0) & (out.margin <= 1)).all()
    assert ((out.support >= 0) & (out.support <= 1)).all()


@pytest.mark.parametrize("kw, word", [({"classifier_weight": 1.5}, "classifier_weight"),
                                      ({"stay": 1.0}, "stay"), ({"temper": 0.0}, "temper"),
                                      ({"C": 0}, "C must"), ({"uncertainty": "x"}, "uncertainty")])
def test_bad_parameters_are_refused_with_their_name(kw, word):
    W = build_graph(np.random.default_rng(0).normal(size=(20, 3)))
    y = np.r_[0, 1, [-1] * 18]
    with pytest.raises(ProposingInputError, match=word):
        Proposer(**kw).fit(W, y)


def test_queue_margins_from_the_experts():
    """"experts": the margin is at most each expert's own; "disagree": zero where the graph's and
    the classifier's top classes differ (scikit-learn's digits; Alpaydin & Kaynak 1998, from
    memory)."""
    from sklearn.datasets import load_digits

    from labeler.proposing import _margin

    X, t = load_digits(return_X_y=True)
    W = build_graph(X)
    y = np.full(t.size, -1)
    y[::60] = t[::60]
    out = {}
    for u in ("both", "experts", "disagree"):
        p = Proposer(classifier_weight=0.3, uncertainty=u).fit(W, y, features=X)
        out[u] = p.outputs(y).margin
    g, c = p.graph_distributions_, p.classifier_distributions_
    assert np.all(out["experts"] <= np.minimum(_margin(g), _margin(c)) + 1e-12)
    assert np.all(out["experts"] <= out["both"] + 1e-12)
    differ = (np.argmax(g, axis=1) != np.argmax(c, axis=1)) & (y < 0)
    assert differ.any() and not differ.all()
    assert np.all(out["disagree"][differ] == 0)
    np.testing.assert_allclose(out["disagree"][~differ], out["experts"][~differ])
    with pytest.raises(ProposingInputError, match="uncertainty must be one of"):
        Proposer(uncertainty="loud").fit(W, y)


@pytest.mark.parametrize("free", [True, False])
def test_the_classifier_fitted_beside_the_spreading_gives_the_numbers_of_one_after_the_other(
        free, monkeypatch):
    """Proposer.fit fits the classifier in a thread while the graph spreads (when a core is
    free): the result is the composition of its parts computed one after the other, bit for bit
    (scikit-learn's digits, Alpaydin & Kaynak 1998, from memory)."""
    from sklearn.datasets import load_digits

    from labeler import proposing

    monkeypatch.setattr(proposing, "_core_free", lambda: free)

    X, t = load_digits(return_X_y=True)
    W = build_graph(X)
    y = np.full(t.size, -1)
    y[::25] = t[::25]
    p = Proposer(classifier_weight=0.3, stay=0.0).fit(W, y, features=X)
    s = LabelSpreader(alpha=p.alpha).fit(W, y)
    Pc = classifier_probabilities(X, y, s.classes_, C=p.C)
    assert np.array_equal(p.classifier_distributions_, Pc)
    want = combine(s.label_distributions_, Pc, 0.3)
    lab = y >= 0
    want[lab] = 0.0
    want[np.flatnonzero(lab), np.searchsorted(s.classes_, y[lab])] = 1.0
    assert np.array_equal(p.label_distributions_, want)


@pytest.mark.parametrize("free", [True, False])
def test_warnings_while_the_classifier_runs_beside_the_spreading(free, monkeypatch):
    """The spreading's warnings still reach the caller (under the caller's filters); the
    classifier's convergence warnings stay silent, as when it runs alone; an error in either
    is raised."""
    import warnings

    from sklearn.exceptions import ConvergenceWarning

    from labeler import proposing

    monkeypatch.setattr(proposing, "_core_free", lambda: free)

    rng = np.random.default_rng(3)
    X = rng.normal(size=(300, 4))
    W = build_graph(X)
    y = np.full(300, -1)
    y[:40] = rng.integers(0, 3, 40)  # labels unrelated to the features: a hard fit
    p = Proposer(classifier_weight=0.3, stay=0.0)
    p.spreader_ = LabelSpreader(alpha=p.alpha, warm_start=True, max_iter=1)  # cannot converge
    with pytest.warns(ConvergenceWarning, match="label spreading stopped after max_iter=1"):
        p.fit(W, y, features=X)
    with warnings.catch_warnings():
        warnings.simplefilter("error", UserWarning)
        warnings.simplefilter("ignore", ConvergenceWarning)  # (a UserWarning) ahead of it
        p.spreader_ = LabelSpreader(alpha=p.alpha, warm_start=True, max_iter=1)
        p.fit(W, y, features=X)  # the caller's filters apply: ignored

    def main():
        warnings.warn("from the spreading", UserWarning)
        return 1

    def side():
        with proposing._quiet():
            warnings.warn("dropped", ConvergenceWarning)
        warnings.warn("from the classifier", RuntimeWarning)
        return 2

    with warnings.catch_warnings(record=True) as got:
        warnings.simplefilter("always")
        assert proposing._beside(main, side) == (1, 2)
    assert sorted(str(w.message) for w in got) == ["from the classifier", "from the spreading"]

    def fails():
        raise ValueError("side failed")

    with pytest.raises(ValueError, match="side failed"):
        proposing._beside(lambda: 1, fails)
    with pytest.raises(KeyError):
        proposing._beside(lambda: {}["main failed"], fails)
