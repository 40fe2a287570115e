"""What Project proposes: label spreading times a logistic regression on orientation-free features,
smoothed along time.

Outside references: the closed form of label spreading, F* = (1 - alpha) (I - alpha S)^-1 Y with
S = D^-1/2 W D^-1/2 (Zhou et al., "Learning with local and global consistency", 2004), solved
here with scipy's sparse direct solver; scikit-learn's StandardScaler, PCA and LogisticRegression
(Pedregosa et al., "Scikit-learn: machine learning in Python", 2011) on the same columns; an L2
penalized logistic regression does not change under a rotation of its inputs, so the principal
axes' signs do not matter (common practice, no source); the smoothing against the textbook
forward-backward recursions (Rabiner 1989), run window by window.
"""

from __future__ import annotations

import io
import warnings

import numpy as np
import pytest
from scipy import sparse
from scipy.sparse.linalg import spsolve
from sklearn.decomposition import PCA
from sklearn.linear_model import LogisticRegression
from sklearn.preprocessing import StandardScaler

from labeler.features import FEATURE_SET_VERSION
from labeler.project import Project
from labeler.proposing import DEFAULT_CLASSIFIER_WEIGHT, DEFAULT_STAY, DEFAULT_TEMPER
from labeler.recordings import recording_from_frame
from labeler.synthetic import simulate_recording, window_truth


def _rec(seed, person, minutes=8):
    sim = simulate_recording(minutes * 60, seed=seed, person=person)
    rec = recording_from_frame(sim.frame, where=sim.name, content_hash=f"q{seed}-{person}",
                               name=sim.name)
    return rec, sim.truth


@pytest.fixture(scope="module")
def sims():
    return [_rec(15, 1), _rec(16, 2)]


def _truth(p, sims):
    w = p.windows()
    out = np.empty(len(w), dtype=object)
    for rec, truth in sims:
        sel = (w["recording"] == rec.name).to_numpy()
        out[sel] = window_truth(truth, w["start_s"][sel], w["stop_s"][sel])
    return out


def _confirm(p, ids, truth):
    w = p.windows()["id"].to_numpy()
    ids = np.asarray(ids)
    t = truth[np.searchsorted(w, ids)]
    for c in sorted(set(t)):
        p.confirm(ids[t == c], c, create_class=True)


def _reference(p, alpha, weight, stay):
    """Label, confidence and distribution of every window from the outside references."""
    X, names = p.features()
    got = p.store.get_blob("proposals/graph")
    W = sparse.load_npz(io.BytesIO(got[0])).tocsr()
    codes = p._ledger.class_codes()
    lab = codes >= 0
    classes = np.unique(codes[lab])
    Y = np.zeros((codes.size, classes.size))
    Y[np.flatnonzero(lab), np.searchsorted(classes, codes[lab])] = 1.0
    W = W.copy()
    W.setdiag(0)
    d = np.asarray(W.sum(axis=1)).ravel()
    Dm = sparse.diags(1.0 / np.sqrt(d))
    S = Dm @ W @ Dm
    A = (sparse.identity(codes.size) - alpha * S).tocsc()
    F = np.column_stack([spsolve(A, (1 - alpha) * Y[:, k]) for k in range(classes.size)])
    Pg = np.maximum(F, 0) / np.maximum(F, 0).sum(axis=1, keepdims=True)
    free = [i for i, n in enumerate(names) if ".mag." in n or ".inv." in n]
    Z = StandardScaler().fit_transform(X[:, free].astype(np.float64))
    Z = PCA(n_components=30, svd_solver="full").fit_transform(Z)  # exact: no random draw
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        clf = LogisticRegression(C=1.0, max_iter=1000, tol=1e-8).fit(Z[lab], codes[lab])
    Pc = clf.predict_proba(Z)
    L = (1 - weight) * np.log(np.maximum(Pg, 1e-6)) + weight * np.log(np.maximum(Pc, 1e-6))
    P = np.exp(L - L.max(axis=1, keepdims=True))
    P /= P.sum(axis=1, keepdims=True)
    P[lab] = 0.0
    P[np.flatnonzero(lab), np.searchsorted(classes, codes[lab])] = 1.0
    if stay > 0:
        rid, seq = p._catalog.window_sequence()
        P = _forward_backward(np.maximum(P, 1e-12) ** DEFAULT_TEMPER, rid, seq, stay)
    label = classes[P.argmax(axis=1)]
    return label, P.max(axis=1)


def _forward_backward(P, rid, seq, stay):
    """Posterior of each window's class given its recording's emissions ``P``: the scaled
    forward-backward recursions of Rabiner ("A tutorial on hidden Markov models and selected
    applications in speech recognition", 1989, eqs. 19-27 and section V.A), one window at a time;
    the chain stays in its class with probability ``stay`` and moves to each other class with an
    equal share of the rest, starts uniform, and starts afresh after a gap (seq jumps by more
    than 1)."""
    n, k = P.shape
    M = np.full((k, k), (1 - stay) / (k - 1))
    np.fill_diagonal(M, stay)
    out = np.empty_like(P)
    for r in np.unique(rid):
        idx = np.flatnonzero(rid == r)
        idx = idx[np.argsort(seq[idx])]
        E = P[idx]
        m = idx.size
        cont = np.r_[False, np.diff(seq[idx]) == 1]
        alpha = np.empty((m, k))
        a = E[0] / k
        alpha[0] = a / a.sum()
        for t in range(1, m):
            prior = alpha[t - 1] @ M if cont[t] else np.full(k, 1 / k)
            a = prior * E[t]
            alpha[t] = a / a.sum()
        beta = np.ones((m, k))
        for t in range(m - 2, -1, -1):
            b = M @ (E[t + 1] * beta[t + 1]) if cont[t + 1] else np.ones(k)
            beta[t] = b / b.sum()
        g = alpha * beta
        out[idx] = g / g.sum(axis=1, keepdims=True)
    return out


def test_warm_refresh_equals_the_closed_forms_of_spreading_and_logistic_regression(tmp_path, sims):
    assert DEFAULT_CLASSIFIER_WEIGHT > 0
    with Project.create(tmp_path / "p.labeler", annotator="t") as p:
        p.add_recording_data([r for r, _ in sims])
        truth = _truth(p, sims)
        # fixed draws: the review queue draws at random, and the comparison below is of one input
        _confirm(p, p.review_queue(30, random_state=0)["window_id"], truth)
        first = p.refresh_proposals()
        assert not first.warm_start
        _confirm(p, p.review_queue(10, random_state=100)["window_id"], truth)
        run = p.refresh_proposals()
        assert run.warm_start  # started from the previous run's label mass
        params = p.store.runs("proposals")[-1]["params"]
        assert params["classifier_weight"] == DEFAULT_CLASSIFIER_WEIGHT
        # the graph is built from the columns of feature set 1 (the orientation-free extras
        # go to the classifier)
        from labeler.graph import build_graph

        X, names = p.features()
        stored = sparse.load_npz(io.BytesIO(p.store.get_blob("proposals/graph")[0]))
        rid, seq = p._catalog.window_sequence()
        again = build_graph(X[:, :294], recording=rid, seq=seq, n_neighbors=10,
                            temporal_weight=params["temporal_weight"], pca_components=30)
        assert abs(stored - again).max() < 1e-9
        assert params["stay"] == DEFAULT_STAY
        label, conf = _reference(p, params["alpha"], DEFAULT_CLASSIFIER_WEIGHT, DEFAULT_STAY)
        props = p.proposals()
        assert (props["class_id"].to_numpy() == label).mean() > 0.995
        # 30 principal axes of about 100 columns: where the 30th and 31st variances lie close,
        # the two subspaces differ a little, so a few windows differ by up to a few thousandths
        got = props["confidence"].to_numpy()
        np.testing.assert_allclose(got, conf, atol=6e-3)
        assert np.abs(got - conf).mean() < 1e-3
        # the classifier changes proposals: spreading alone would differ somewhere
        acc = float((props["label"].to_numpy() == truth).mean())
        assert acc > 0.7, acc


def test_a_project_of_feature_set_1_keeps_computing_it(tmp_path, sims):
    assert FEATURE_SET_VERSION == "2"
    with Project.create(tmp_path / "old.labeler", annotator="t") as p:
        p.store.set_setting("feature_set_version", "1")  # as a project made before set 2
        p.add_recording_data([sims[0][0]])
        p.add_recording_data([sims[1][0]])
        X, names = p.features()
        assert p.feature_set_version == "1" and X.shape[1] == 294
        assert not any(".inv." in n for n in names)
        truth = _truth(p, sims)
        _confirm(p, p.review_queue(20)["window_id"], truth)
        run = p.refresh_proposals()  # the classifier takes the norms' features of set 1
        assert run.proposed == p.n_windows - 20
