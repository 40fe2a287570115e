"""Features on real recordings: the UEA BasicMotions data set.

Source: Bagnall et al., "The UEA multivariate time series classification archive, 2018" (2018),
BasicMotions: a smart watch's 3-axis accelerometer and 3-axis gyroscope at 10 Hz, 100 samples (10 s)
per series, four activities (standing, walking, running, badminton), 40 train + 40 test series.
It ships inside the ``aeon`` package (``aeon.datasets.load_basic_motions``, no network), a test extra.

Units, checked by printing the data (not documented with the set): standing series have an
acceleration magnitude near 0.5 (not 1 g or 9.8 m/s²), running near 17, badminton peaks near 44, so
the accelerometer channels look like linear acceleration (gravity removed) in m/s²; the gyroscope
reaches about 13 while running and 38 in badminton, plausible in rad/s (750 and 2200 deg/s) and not
in deg/s. We convert to our canonical units (g and deg/s) as labeler would on reading.

Threshold: the published 1-NN DTW accuracy on BasicMotions is about 1.0 (0.97-1.0 across
the archive's reports; from memory, not re-checked here). Our features with a plain 1-NN on
standardized features must reach at least 0.9 in stratified 5-fold cross-validation on train + test.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from labeler.features import window_features

aeon_datasets = pytest.importorskip("aeon.datasets")

CHANNELS = ["dev_acc_x", "dev_acc_y", "dev_acc_z", "dev_gyr_x", "dev_gyr_y", "dev_gyr_z"]
RATE = 10.0
G = 9.80665


def _load():
    X1, y1 = aeon_datasets.load_basic_motions(split="train")
    X2, y2 = aeon_datasets.load_basic_motions(split="test")
    X = np.concatenate([X1, X2]).astype(np.float64)  # (80, 6, 100)
    y = np.concatenate([y1, y2])
    X[:, :3] /= G  # m/s² -> g
    X[:, 3:] *= 180.0 / math.pi  # rad/s -> deg/s
    return X, y


def _features(X):
    rows = []
    for series in X:  # one window per series
        sig = series.T.astype(np.float32)  # (100, 6)
        F, names = window_features(sig, np.array([0]), sig.shape[0], RATE, CHANNELS)
        rows.append(F[0])
    return np.array(rows), names


def test_units_look_like_linear_acceleration_and_rad_per_s():
    X, y = _load()
    acc = np.linalg.norm(X[:, :3], axis=1)  # now in g
    standing = np.median(acc[y == "standing"])
    running = np.median(acc[y == "running"])
    assert standing < 0.2  # no gravity in it
    assert 1.0 < running < 3.0  # running: 1-3 g of linear acceleration
    gyr = np.linalg.norm(X[:, 3:], axis=1)  # now in deg/s
    assert 200 < np.max(gyr[y == "running"]) < 2000


def test_features_finite_and_named():
    X, _ = _load()
    F, names = _features(X[:5])
    assert F.dtype == np.float32
    assert np.isfinite(F).all()
    assert "dev_acc.mag.mean" in names and "dev_gyr.corr.yz" in names


def test_one_nn_cross_validated_accuracy():
    from sklearn.model_selection import StratifiedKFold, cross_val_score
    from sklearn.neighbors import KNeighborsClassifier
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    X, y = _load()
    F, _ = _features(X)
    model = make_pipeline(StandardScaler(), KNeighborsClassifier(n_neighbors=1))
    scores = cross_val_score(model, F, y, cv=StratifiedKFold(5, shuffle=True, random_state=0))
    assert scores.mean() >= 0.9, scores


def test_one_series_per_class_carries_to_the_rest():
    """Proposals as Project makes them (label spreading on the window graph times a logistic
    regression on the orientation-free features), from one confirmed series of each activity:
    the other 76 series must be proposed right at least 85 % of the time on average over ten
    draws. Our threshold; measured 0.975 (spreading alone: 0.987)."""
    from labeler.features import graph_columns
    from labeler.graph import build_graph
    from labeler.proposing import DEFAULT_CLASSIFIER_WEIGHT, Proposer, classifier_view

    X, y = _load()
    F, names = _features(X)
    _, t = np.unique(y, return_inverse=True)
    W = build_graph(F[:, graph_columns(names)], pca_components=30)
    Z = classifier_view(F, names)
    rng = np.random.default_rng(0)
    accs = []
    for _ in range(10):
        pick = np.array([rng.choice(np.flatnonzero(t == c)) for c in range(4)])
        codes = np.full(t.size, -1)
        codes[pick] = t[pick]
        p = Proposer(classifier_weight=DEFAULT_CLASSIFIER_WEIGHT, classifier_features=Z)
        got = p.fit(W, codes).transduction_
        rest = codes < 0
        accs.append(float((got[rest] == t[rest]).mean()))
    assert np.mean(accs) >= 0.85, accs
