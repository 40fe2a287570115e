"""Tests of label spreading (labeler.spreading)."""

import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import sparse
from sklearn.datasets import load_digits
from sklearn.semi_supervised import LabelSpreading

from labeler.errors import InputError
from labeler.graph import build_graph
from labeler.spreading import LabelSpreader, normalized_affinity, reference_mass, window_outputs


@pytest.fixture(scope="module")
def digits_graph():
    X, t = load_digits(return_X_y=True)
    X, t = X[:400], t[:400]
    W = build_graph(X, n_neighbors=8)
    rng = np.random.default_rng(0)
    y = np.full(t.size, -1)
    idx = rng.choice(t.size, 25, replace=False)
    y[idx] = t[idx]
    return X, t, W, y


@pytest.mark.parametrize("solver", ["cg", "iterate"])
@pytest.mark.parametrize("alpha", [0.5, 0.9])
def test_matches_scikit_learn_label_spreading(digits_graph, solver, alpha):
    # Reference: scikit-learn's LabelSpreading (Pedregosa et al., "Scikit-learn: Machine learning in
    # Python", 2011) with our graph as a callable kernel. It builds S from the normalized graph
    # Laplacian (diagonal of W ignored, diagonal of S set to 0) and iterates from F(0) = Y, the
    # same fixed point as ours; both run to a tight tolerance.
    X, t, W, y = digits_graph
    ref = LabelSpreading(kernel=lambda A, B: W, alpha=alpha, tol=1e-13, max_iter=100000).fit(X, y)
    ours = LabelSpreader(alpha=alpha, solver=solver, class_balance=False, tol=1e-11,
                         max_iter=100000).fit(W, y)
    np.testing.assert_allclose(ours.label_distributions_, ref.label_distributions_, atol=1e-6)
    np.testing.assert_array_equal(ours.transduction_, ref.transduction_)
    np.testing.assert_array_equal(ours.classes_, ref.classes_)


def test_self_loops_ignored_like_scikit_learn(digits_graph):
    # scikit-learn (Pedregosa et al. 2011) ignores the diagonal of the affinity matrix; so do we
    X, t, W, y = digits_graph
    Wd = (W + sparse.identity(W.shape[0]) * 3.0).tocsr()
    ref = LabelSpreading(kernel=lambda A, B: Wd, alpha=0.9, tol=1e-13, max_iter=100000).fit(X, y)
    ours = LabelSpreader(alpha=0.9, class_balance=False, tol=1e-11).fit(Wd, y)
    np.testing.assert_allclose(ours.label_distributions_, ref.label_distributions_, atol=1e-6)


def small_graph(n=12, seed=0, p=0.4):
    rng = np.random.default_rng(seed)
    A = rng.random((n, n)) * (rng.random((n, n)) < p)
    A = np.triu(A, 1)
    return A + A.T


@pytest.mark.parametrize("solver", ["cg", "iterate"])
def test_matches_closed_form(solver):
    # Zhou et al., "Learning with local and global consistency", 2004: F* = (1 - a)(I - aS)^-1 Y
    W = small_graph()
    n, alpha = W.shape[0], 0.8
    y = np.full(n, -1)
    y[[0, 3]] = 0
    y[[5]] = 2
    d = W.sum(1)
    inv = np.where(d > 0, 1 / np.sqrt(np.where(d > 0, d, 1)), 0)
    S = inv[:, None] * W * inv[None, :]
    Y = np.zeros((n, 2))
    Y[[0, 3], 0] = 1
    Y[5, 1] = 1
    F = (1 - alpha) * np.linalg.solve(np.eye(n) - alpha * S, Y)
    m = LabelSpreader(alpha=alpha, solver=solver, tol=1e-12, max_iter=10000).fit(sparse.csr_matrix(W), y)
    np.testing.assert_allclose(m.label_mass_, F, atol=1e-10)
    np.testing.assert_array_equal(m.classes_, [0, 2])
    np.testing.assert_allclose(normalized_affinity(W).toarray(), S, atol=1e-14)
    # support reference: label mass if every window were confirmed
    r = (1 - alpha) * np.linalg.solve(np.eye(n) - alpha * S, np.ones(n))
    np.testing.assert_allclose(reference_mass(W, alpha, tol=1e-12), r, atol=1e-10)


def test_class_balance_divides_columns_by_confirmation_count():
    W = small_graph(seed=2)
    y = np.full(W.shape[0], -1)
    y[[0, 1, 2]] = 4
    y[7] = 9
    m = LabelSpreader(alpha=0.9, tol=1e-10, class_balance=True).fit(sparse.csr_matrix(W), y)
    F = m.label_mass_ / np.array([3.0, 1.0])
    s = F.sum(1, keepdims=True)
    np.testing.assert_allclose(m.label_distributions_, np.divide(F, s, out=np.zeros_like(F), where=s > 0))
    np.testing.assert_array_equal(m.transduction_, np.array([4, 9])[np.argmax(F, 1)])


def test_warm_start_reaches_same_result_faster(digits_graph):
    X, t, W, y = digits_graph
    cold = LabelSpreader(tol=1e-8).fit(W, y)
    y2 = y.copy()
    y2[np.flatnonzero(y < 0)[0]] = 3
    warm = LabelSpreader(tol=1e-8, warm_start=True).fit(W, y)
    first = warm.n_iter_
    warm.fit(W, y2)
    ref = LabelSpreader(tol=1e-8).fit(W, y2)
    np.testing.assert_allclose(warm.label_mass_, ref.label_mass_, atol=1e-6)
    assert warm.n_iter_ < first
    # explicit init with columns in another order gives the same answer
    m = LabelSpreader(tol=1e-8).fit(W, y2, init=cold.label_mass_[:, ::-1], init_classes=cold.classes_[::-1])
    np.testing.assert_allclose(m.label_mass_, ref.label_mass_, atol=1e-6)


def test_fit_from_raw_features_builds_the_graph(digits_graph):
    X, t, W, y = digits_graph
    a = LabelSpreader(kernel="knn", n_neighbors=8).fit(X, y)
    b = LabelSpreader().fit(W, y)
    np.testing.assert_allclose(a.label_mass_, b.label_mass_, atol=1e-9)
    assert (a.transduction_ == t).mean() > 0.8  # 25 confirmations of 400 digits


def test_kernel_says_what_x_is(digits_graph):
    X, t, W, y = digits_graph
    with pytest.raises(ValueError, match="square"):
        LabelSpreader().fit(X, y)                      # features given as a graph
    with pytest.raises(ValueError, match="kernel='precomputed'"):
        LabelSpreader(kernel="knn").fit(W, y)          # a graph given as features
    with pytest.raises(ValueError, match="kernel must be"):
        LabelSpreader(kernel="rbf").fit(W, y)


def test_convergence_warning():
    from sklearn.exceptions import ConvergenceWarning
    W = sparse.csr_matrix(small_graph())
    y = np.full(12, -1)
    y[0] = 1
    with pytest.warns(ConvergenceWarning, match="max_iter=1"):
        LabelSpreader(max_iter=1, solver="iterate").fit(W, y)


@pytest.mark.parametrize("kwargs, W, y, match", [
    ({}, np.eye(3)[:2], [0, -1], "square"),
    ({}, np.zeros((3, 3)), [0, -1], "3 windows but y has 2"),
    ({}, np.zeros((3, 3)), [-1, -1, -1], "no confirmed window"),
    ({"alpha": 1.0}, np.zeros((3, 3)), [0, -1, -1], "alpha must lie strictly between 0 and 1, got 1.0"),
    ({"alpha": 0}, np.zeros((3, 3)), [0, -1, -1], "got 0"),
    ({}, np.array([[0, -1.0, 0], [-1, 0, 0], [0, 0, 0]]), [0, -1, -1], "weight -1.0 joins windows 0 and 1"),
    ({}, np.array([[0, 1.0, 0], [0, 0, 0], [0, 0, 0]]), [0, -1, -1], "symmetric"),
    ({}, np.zeros((3, 3)), [0, -2, -1], r"y\[1\] = -2"),
    ({"solver": "newton"}, np.zeros((3, 3)), [0, -1, -1], "solver"),
])
def test_bad_input_names_the_value(kwargs, W, y, match):
    with pytest.raises(ValueError, match=match) as info:
        LabelSpreader(**kwargs).fit(sparse.csr_matrix(W), np.array(y))
    assert isinstance(info.value, InputError)


def test_outputs_support_and_conflict():
    # two chains 0-1-2-3-4 and 5-6-7-8-9 joined by a weak edge 4-5
    n = 10
    W = np.zeros((n, n))
    for i in range(n - 1):
        W[i, i + 1] = W[i + 1, i] = 1.0 if i != 4 else 0.01
    W = sparse.csr_matrix(W)
    y = np.full(n, -1)
    y[0] = 0
    y[1] = 1  # next to a confirmed 0, far from the other 1
    y[9] = 1
    m = LabelSpreader(alpha=0.9, tol=1e-10).fit(W, y)
    o = m.outputs(y)
    assert np.all((o.support >= 0) & (o.support <= 1))
    assert o.support[5] < o.support[8]  # further from any confirmation
    np.testing.assert_array_equal(o.label[[0, 1, 9]], [0, 1, 1])
    np.testing.assert_allclose(o.distribution.sum(1), 1)
    assert np.all(o.conflict[y < 0] == 0)
    assert o.conflict[9] < 0.05  # its chain follows it
    assert o.conflict[0] > o.conflict[9] and o.conflict[1] > o.conflict[9]
    assert np.all(o.margin >= 0) and np.all(o.margin <= 1)
    top2 = np.sort(o.distribution, 1)
    np.testing.assert_allclose(o.margin, top2[:, -1] - top2[:, -2])


# ---- properties (hypothesis), small graphs ----

@st.composite
def labeled_graphs(draw):
    n = draw(st.integers(4, 14))
    seed = draw(st.integers(0, 10_000))
    rng = np.random.default_rng(seed)
    A = rng.random((n, n)) * (rng.random((n, n)) < 0.5)
    A = np.triu(A, 1)
    A = A + A.T
    n_classes = draw(st.integers(1, 3))
    y = np.full(n, -1)
    k = draw(st.integers(1, n - 1))
    idx = rng.choice(n, k, replace=False)
    y[idx] = rng.integers(0, n_classes, k)
    balance = draw(st.booleans())
    return sparse.csr_matrix(A), y, balance, rng


SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def fit_out(W, y, balance):
    m = LabelSpreader(alpha=0.9, tol=1e-12, max_iter=5000, class_balance=balance).fit(W, y)
    return m, m.outputs(y)


@SETTINGS
@given(labeled_graphs())
def test_property_confirmed_windows_keep_their_label(case):
    W, y, balance, _ = case
    _, o = fit_out(W, y, balance)
    np.testing.assert_array_equal(o.label[y >= 0], y[y >= 0])


@SETTINGS
@given(labeled_graphs(), st.integers(0, 2))
def test_property_confirming_never_lowers_own_confidence(case, pick):
    # holds for the plain distribution (the default): confirming i with c adds
    # (1 - alpha)[(I - alpha S)^-1]_ii > 0 to F[i, c] only, and (a + d) / (s + d) >= a / s
    W, y, _, rng = case
    balance = False
    m, o = fit_out(W, y, balance)
    i = int(np.flatnonzero(y < 0)[0])
    # confirm window i with its proposed label, or with another class already in use
    choices = [int(o.label[i])] + [int(c) for c in m.classes_ if c != o.label[i]]
    c = choices[pick % len(choices)]
    before = o.distribution[i, int(np.searchsorted(m.classes_, c))]
    if c == o.label[i]:
        assert before == pytest.approx(o.confidence[i], abs=1e-12)
    y2 = y.copy()
    y2[i] = c
    _, o2 = fit_out(W, y2, balance)
    assert o2.confidence[i] >= before - 1e-9


@SETTINGS
@given(labeled_graphs())
def test_property_results_do_not_depend_on_window_order(case):
    W, y, balance, rng = case
    perm = rng.permutation(y.size)
    _, o = fit_out(W, y, balance)
    Wp = W[perm][:, perm]
    _, op = fit_out(Wp, y[perm], balance)
    np.testing.assert_array_equal(op.label, o.label[perm])
    np.testing.assert_allclose(op.distribution, o.distribution[perm], atol=1e-8)
    np.testing.assert_allclose(op.support, o.support[perm], atol=1e-8)
    np.testing.assert_allclose(op.conflict, o.conflict[perm], atol=1e-8)


def test_warm_refreshes_match_scikit_learn_after_every_kind_of_change(digits_graph):
    # A run of warm refreshes on one graph object (one more confirmation, a relabel, a withdrawal,
    # a class seen for the first time) against scikit-learn's LabelSpreading (Pedregosa et al.,
    # "Scikit-learn: Machine learning in Python", 2011) fitted from scratch each time.
    X, t, W, y = digits_graph
    warm = LabelSpreader(alpha=0.5, tol=1e-10, warm_start=True, max_iter=100000).fit(W, y)
    y = y.copy()
    y[np.flatnonzero(y == 4)] = -1  # class 4 not confirmed yet
    unl = np.flatnonzero(y < 0)
    steps = [(unl[0], t[unl[0]]), (unl[1], t[unl[1]]), (np.flatnonzero(y >= 0)[0], -1),
             (unl[2], 4), (np.flatnonzero(y >= 0)[1], (t[np.flatnonzero(y >= 0)[1]] + 1) % 10)]
    for i, label in steps:
        y[i] = label
        warm.fit(W, y)
        ref = LabelSpreading(kernel=lambda A, B: W, alpha=0.5, tol=1e-13, max_iter=100000).fit(X, y)
        np.testing.assert_array_equal(warm.classes_, ref.classes_)
        np.testing.assert_allclose(warm.label_distributions_, ref.label_distributions_, atol=1e-6)
        out = warm.outputs(y)
        np.testing.assert_allclose(out.distribution, window_outputs(W, warm.label_mass_, y,
                                                                    classes=warm.classes_).distribution)


@pytest.mark.parametrize("class_balance", [False, True])
def test_support_and_conflict_alone_are_those_of_the_outputs(digits_graph, class_balance):
    """scikit-learn's digits (Alpaydin & Kaynak 1998), 60 confirmed."""
    _, y_true, W, _ = digits_graph
    rng = np.random.default_rng(4)
    y = np.full(y_true.size, -1)
    idx = rng.choice(y_true.size, 60, replace=False)
    y[idx] = y_true[idx]
    sp = LabelSpreader(class_balance=class_balance).fit(W, y)
    full = sp.outputs(y)
    support, conflict = sp.support_conflict(y)
    assert np.array_equal(full.support, support) and np.array_equal(full.conflict, conflict)
    assert conflict[y < 0].max() == 0 and conflict[y >= 0].max() > 0
