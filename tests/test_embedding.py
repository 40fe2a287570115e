"""The map (labeler.embedding) against outside references.

Data: scikit-learn's digits (Alpaydin & Kaynak, "Optical recognition of handwritten digits", 1998,
shipped with scikit-learn; 1,797 samples x 64 features) stands in for a window feature matrix, and
UEA BasicMotions (Bagnall et al., "The UEA multivariate time series classification archive, 2018",
shipped in aeon) gives real motion-sensor windows.

Quality measure: trustworthiness (Venna & Kaski, "Neighborhood preservation in nonlinear projection
methods: An experimental study", 2001), as computed by ``sklearn.manifold.trustworthiness``, k = 10.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from sklearn.datasets import load_digits
from sklearn.decomposition import PCA
from sklearn.manifold import TSNE, trustworthiness
from sklearn.neighbors import KNeighborsClassifier, NearestNeighbors
from sklearn.model_selection import LeaveOneOut, cross_val_score
from sklearn.preprocessing import StandardScaler

from labeler.embedding import (CellIndex, MapInputError, MapMaker, MapState, apply_reduction,
                               default_learning_rate, default_perplexity, fit_reduction, pca_map,
                               place, stratified_subsample, tsne_map)
from labeler.errors import InputError


@pytest.fixture(scope="module")
def digits():
    X, y = load_digits(return_X_y=True)
    return X[:1200].astype(np.float32), y[:1200]  # 1,200 of 1,797: keeps CI's t-SNE work small


@pytest.fixture(scope="module")
def digits_maps(digits):
    X, _ = digits
    ours = tsne_map(X, random_state=0)
    Z = StandardScaler().fit_transform(X)
    # scikit-learn's TSNE on the same standardized windows, same perplexity, PCA init and the
    # N/12 learning rate ("auto")
    theirs = TSNE(n_components=2, perplexity=30, init="pca", learning_rate="auto",
                  random_state=0).fit_transform(Z)
    return ours, theirs, Z


def _knn_kept(Z, Y, k=10):
    """Mean fraction of each point's k nearest neighbours in Z that stay among its k nearest in Y."""
    a = NearestNeighbors(n_neighbors=k + 1).fit(Z).kneighbors(Z, return_distance=False)[:, 1:]
    b = NearestNeighbors(n_neighbors=k + 1).fit(Y).kneighbors(Y, return_distance=False)[:, 1:]
    return float(np.mean([len(set(p) & set(q)) / k for p, q in zip(a, b)]))


# ------------------------------------------------------------------------------------------------
# pieces against scikit-learn


def test_reduction_matches_scikit_learn_pca(digits):
    X, _ = digits
    mean, scale, comps, var = fit_reduction(X)
    Z = StandardScaler().fit_transform(X.astype(np.float64))
    ref = PCA(n_components=comps.shape[0], svd_solver="full").fit(Z)  # scikit-learn reference
    np.testing.assert_allclose(var, ref.explained_variance_, rtol=1e-4, atol=1e-8)
    # same sign convention (largest loading positive); compare axes with clearly separated variances
    sep = np.flatnonzero(np.diff(var[:21]) < -1e-3 * var[0])[:20]
    np.testing.assert_allclose(comps[sep], ref.components_[sep], atol=2e-3)
    proj = apply_reduction(X, mean, scale, comps)
    np.testing.assert_allclose(proj[:, sep], ref.transform(Z)[:, sep], atol=2e-3)
    assert comps.shape[0] == 50  # min(50, 64 features)


def test_neighbours_exact_and_cells_against_scikit_learn(digits):
    X, _ = digits
    Z = StandardScaler().fit_transform(X).astype(np.float32)
    true_d, true_i = NearestNeighbors(n_neighbors=16).fit(Z).kneighbors(Z)  # scikit-learn reference
    ind, dist = CellIndex(Z, 15).build()
    np.testing.assert_allclose(dist, true_d[:, 1:], rtol=1e-4, atol=1e-4)
    # the cell search (forced here) finds most of the true neighbours
    ind2, dist2 = CellIndex(Z, 15, exact_up_to=0).build()
    recall = np.mean([len(set(a) & set(b[1:])) / 15 for a, b in zip(ind2, true_i)])
    assert recall >= 0.9
    assert (dist2 >= dist - 1e-4).all()  # never nearer than the true k-th neighbours
    q_ind, q_dist = CellIndex(Z[:900], 10).query(Z[900:], 10)
    ref_d, _ = NearestNeighbors(n_neighbors=10).fit(Z[:900]).kneighbors(Z[900:])
    np.testing.assert_allclose(q_dist, ref_d, rtol=1e-4, atol=1e-4)


def test_parameter_rules():
    # Belkina et al. 2019: learning rate N / early exaggeration (12); 200 floor for small N
    assert default_learning_rate(120_000) == pytest.approx(10_000)
    assert default_learning_rate(1000) == 200
    # Kobak & Berens 2019: perplexity 30; here at most (N - 1) / 3 for tiny N
    assert default_perplexity(100_000) == 30
    assert default_perplexity(40) == pytest.approx(13)


# ------------------------------------------------------------------------------------------------
# quality of the map


def test_trustworthiness_not_below_scikit_learn_tsne(digits_maps):
    ours, theirs, Z = digits_maps
    t_ours = trustworthiness(Z, ours.coords, n_neighbors=10)
    t_theirs = trustworthiness(Z, theirs, n_neighbors=10)
    assert ours.coords.dtype == np.float32 and ours.coords.shape == (Z.shape[0], 2)
    assert t_ours >= t_theirs - 0.01, (t_ours, t_theirs)


def test_tsne_keeps_more_neighbours_than_pca(digits, digits_maps):
    X, _ = digits
    ours, _, Z = digits_maps
    kept_tsne = _knn_kept(Z, ours.coords)
    kept_pca = _knn_kept(Z, pca_map(X).coords)
    assert kept_tsne > kept_pca + 0.1, (kept_tsne, kept_pca)


def test_placed_windows_about_as_trustworthy_as_a_refit(digits, digits_maps):
    """Fit on 900 windows, place the other 300, compare with the full fit of all 1,200.

    Placed windows are optimized against a fixed map and ignore each other, so some loss is
    expected; we allow 0.03 on all windows and 0.05 on the placed ones (measured: about 0.005 and
    0.01 here), far below the gap between a t-SNE and a PCA map (about 0.2 on digits).
    """
    X, _ = digits
    ours, _, Z = digits_maps
    rng = np.random.default_rng(0)
    perm = rng.permutation(X.shape[0])
    fit, new = np.sort(perm[:900]), np.sort(perm[900:])
    partial = tsne_map(X[fit], random_state=0)
    Y = np.empty((X.shape[0], 2), dtype=np.float32)
    Y[fit] = partial.coords
    Y[new] = place(partial.state, X[new])
    t_refit = trustworthiness(Z, ours.coords, n_neighbors=10)
    t_placed = trustworthiness(Z, Y, n_neighbors=10)
    assert t_placed >= t_refit - 0.03, (t_placed, t_refit)
    t_new_refit = trustworthiness(Z[new], ours.coords[new], n_neighbors=10)
    t_new_placed = trustworthiness(Z[new], Y[new], n_neighbors=10)
    assert t_new_placed >= t_new_refit - 0.05, (t_new_placed, t_new_refit)
    assert t_placed > trustworthiness(Z, pca_map(X).coords, n_neighbors=10) + 0.05


def test_basicmotions_activities_separate_on_the_map():
    """BasicMotions (Bagnall et al. 2018, in aeon): 80 series, 6 channels, 100 samples at 10 Hz.

    Threshold: the features alone reach >= 0.9 with 1-NN (tests/test_basicmotions.py); a 2-D map
    loses some of that, so we ask 5-NN leave-one-out accuracy >= 0.85 in 2-D (4 balanced classes:
    chance is 0.25).
    """
    aeon_datasets = pytest.importorskip("aeon.datasets")
    from labeler.features import window_features

    X1, y1 = aeon_datasets.load_basic_motions(split="train")
    X2, y2 = aeon_datasets.load_basic_motions(split="test")
    S = np.concatenate([X1, X2]).astype(np.float64)
    y = np.concatenate([y1, y2])
    S[:, :3] /= 9.80665  # m/s² -> g (see tests/test_basicmotions.py for the units)
    S[:, 3:] *= 180.0 / math.pi  # rad/s -> deg/s
    channels = ["dev_acc_x", "dev_acc_y", "dev_acc_z", "dev_gyr_x", "dev_gyr_y", "dev_gyr_z"]
    F = np.vstack([window_features(s.T, np.array([0]), 100, 10.0, channels)[0] for s in S])
    res = tsne_map(F, random_state=0)
    acc = cross_val_score(KNeighborsClassifier(5), res.coords, y, cv=LeaveOneOut()).mean()
    assert acc >= 0.85, acc


# ------------------------------------------------------------------------------------------------
# behaviour


def test_same_seed_same_coordinates_other_seed_differs(digits):
    X, _ = digits
    a = tsne_map(X[:300], random_state=3, n_iter=100).coords
    b = tsne_map(X[:300], random_state=3, n_iter=100).coords
    c = tsne_map(X[:300], random_state=4, n_iter=100).coords
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, c)
    Z = StandardScaler().fit_transform(X).astype(np.float32)
    i1, _ = CellIndex(Z, 10, exact_up_to=0, random_state=5).build()
    i2, _ = CellIndex(Z, 10, exact_up_to=0, random_state=5).build()
    np.testing.assert_array_equal(i1, i2)


def test_state_is_plain_arrays_and_places_identically(digits):
    X, _ = digits
    mm = MapMaker("tsne", n_iter=100, random_state=1).fit(X[:800])
    blob = mm.state_.to_bytes()
    again = MapState.from_bytes(blob)  # np.load with allow_pickle=False
    for name in ("mean", "scale", "components", "reference", "reference_coords"):
        arr = getattr(again, name)
        assert arr.dtype != object
        np.testing.assert_array_equal(arr, getattr(mm.state_, name))
    assert again.params == mm.state_.params
    np.testing.assert_array_equal(place(again, X[800:900]), mm.transform(X[800:900]))
    with pytest.raises(MapInputError, match="cannot be read"):
        MapState.from_bytes(b"not a map")


def test_pca_map_and_its_placement_are_the_projection(digits):
    X, _ = digits
    res = pca_map(X)
    Z = StandardScaler().fit_transform(X.astype(np.float64))
    ref = PCA(n_components=2, svd_solver="full").fit_transform(Z)  # scikit-learn reference
    np.testing.assert_allclose(np.abs(res.coords), np.abs(ref), atol=2e-3)
    np.testing.assert_allclose(place(res.state, X[:50]), res.coords[:50], atol=1e-5)


def test_large_input_fits_a_stratified_subsample_and_places_the_rest(digits):
    X, y = digits
    strata = np.where(np.arange(X.shape[0]) < 60, 0, 1)  # a short "recording" of 60 windows
    res = tsne_map(X, random_state=0, fit_at_most=400, strata=strata, n_iter=300)
    assert res.fitted.sum() == 400 and res.params["n_fitted"] == 400
    assert res.fitted[:60].sum() >= 60 * 0.9  # the small stratum keeps its floor (all 60 here)
    assert np.isfinite(res.coords).all()
    acc = cross_val_score(KNeighborsClassifier(5), res.coords, y, cv=5).mean()
    assert acc >= 0.85, acc  # digits classes stay apart (PCA 2-D: about 0.6)


def test_stratified_subsample_allocation():
    strata = np.array([0] * 5000 + [1] * 50 + [2] * 950)
    idx = stratified_subsample(strata.size, 1000, strata, random_state=0, min_per_stratum=100)
    assert idx.size == 1000 and np.unique(idx).size == 1000
    counts = np.bincount(strata[idx])
    assert counts[1] == 50  # all of a stratum smaller than the floor
    assert counts[0] > counts[2] >= 100
    np.testing.assert_array_equal(idx, stratified_subsample(strata.size, 1000, strata,
                                                            random_state=0, min_per_stratum=100))


def test_progress_is_reported_and_ends_at_one(digits):
    X, _ = digits
    seen = []
    tsne_map(X[:500], n_iter=100, progress=lambda f, m: seen.append((f, m)))
    fr = [f for f, _ in seen]
    assert len(seen) >= 5 and fr == sorted(fr) and fr[-1] == 1.0
    assert all(isinstance(m, str) and m for _, m in seen)


def test_bad_input_gets_a_clear_error(digits):
    X, _ = digits
    bad = X[:100].copy()
    bad[3, 2] = np.nan
    with pytest.raises(InputError, match="window 3, feature column 2"):
        tsne_map(bad)
    with pytest.raises(InputError, match="unknown map method"):
        MapMaker("umap-like").fit(X[:100])
    with pytest.raises(InputError, match="at least 10 windows"):
        tsne_map(X[:5])
    with pytest.raises(InputError, match="2-D array"):
        pca_map(X[0])
    res = pca_map(X[:100])
    with pytest.raises(InputError, match="64"):
        place(res.state, X[:10, :20])
    assert place(res.state, np.empty((0, 64))).shape == (0, 2)
