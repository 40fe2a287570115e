"""Orientation-free window features (labeler.invariants, feature set 2).

References: scipy.spatial.transform.Rotation.random for rotations drawn uniformly (Virtanen et
al., "SciPy 1.0: fundamental algorithms for scientific computing in Python", 2020); numpy.cov,
numpy.linalg.eigvalsh and numpy.percentile (Harris et al., "Array programming with NumPy", 2020);
a rotation keeps norms, covariance eigenvalues and angles between vectors measured in one frame
(common practice, no source); closed forms of a sinusoid A sin(2 pi f t) over whole periods:
standard deviation A / sqrt(2), all its power at frequency f.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from labeler.features import feature_names, orientation_free, window_features

CH12 = [f"{s}_{k}_{a}" for s in ("wrist", "hip") for k in ("acc", "gyr") for a in "xyz"]


def _signal(n=3000, seed=0):
    rng = np.random.default_rng(seed)
    t = np.arange(n) / 50.0
    sig = np.empty((n, 12))
    for site in range(2):
        g = Rotation.random(random_state=seed + site).apply([0.0, 0.0, 1.0])
        motion = np.column_stack([0.3 * np.sin(2 * np.pi * 1.8 * t + k) for k in range(3)])
        sig[:, 6 * site:6 * site + 3] = g + motion + 0.02 * rng.standard_normal((n, 3))
        sig[:, 6 * site + 3:6 * site + 6] = 40 * np.column_stack(
            [np.sin(2 * np.pi * 0.9 * t + 2 * k) for k in range(3)]) + rng.standard_normal((n, 3))
    return sig


def _rotated(sig, seed):
    out = sig.copy()
    for site in range(2):
        R = Rotation.random(random_state=100 + seed + site)  # one mount per site, both triads
        for kind in range(2):
            a = 6 * site + 3 * kind
            out[:, a:a + 3] = R.apply(sig[:, a:a + 3])
    return out


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_orientation_free_columns_do_not_change_when_the_sensor_turns(seed):
    sig = _signal(seed=seed)
    starts = np.arange(0, sig.shape[0] - 128, 64)
    X, names = window_features(sig, starts, 128, 50.0, CH12)
    Xr, _ = window_features(_rotated(sig, seed), starts, 128, 50.0, CH12)
    free = orientation_free(names)
    assert free.size == 4 * 6 + 4 * 16 + 2 * 3 + 2  # the norms' 6 and the invariants per triad
    scale = np.abs(X[:, free]).max(axis=0) + 1e-3
    np.testing.assert_allclose(X[:, free] / scale, Xr[:, free] / scale, atol=2e-3)
    # the per-axis columns do change (the check above can fail)
    axis = names.index("wrist_acc_x.mean")
    assert np.abs(X[:, axis] - Xr[:, axis]).max() > 0.05


def test_moments_match_numpy():
    sig = _signal(seed=4)
    starts = np.arange(0, 2000, 100)
    X, names = window_features(sig, starts, 128, 50.0, CH12)
    col = {n: X[:, i] for i, n in enumerate(names)}
    for k, s in enumerate(starts):
        a = sig[s:s + 128, 0:3].astype(np.float32).astype(np.float64)
        norm = np.linalg.norm(a, axis=1)
        np.testing.assert_allclose([col[f"wrist_acc.inv.p{q}"][k] for q in (10, 50, 90)],
                                   np.percentile(norm, (10, 50, 90)), rtol=1e-4)
        vals = np.sort(np.linalg.eigvalsh(np.cov(a.T, bias=True)))[::-1]
        np.testing.assert_allclose([col[f"wrist_acc.inv.sd{j}"][k] for j in (1, 2, 3)],
                                   np.sqrt(np.maximum(vals, 0)), rtol=1e-3, atol=1e-4)
        np.testing.assert_allclose(col["wrist_acc.inv.line"][k], vals[0] / vals.sum(), rtol=1e-3)
        d = np.linalg.norm(a - a.mean(axis=0), axis=1)
        np.testing.assert_allclose(col["wrist_acc.inv.dyn_mean"][k], d.mean(), rtol=1e-4)
        np.testing.assert_allclose(col["wrist_acc.inv.dyn_std"][k], d.std(), rtol=1e-3)


def test_up_and_down_against_sideways_closed_forms():
    """A sensor bouncing along gravity (amplitude A, f = 2 Hz) and one swaying across it."""
    rate, L, A, f = 50.0, 125, 0.2, 2.0  # 2.5 s: five whole periods
    t = np.arange(L) / rate
    g = Rotation.random(random_state=7).apply([0.0, 0.0, 1.0])  # gravity in an odd sensor frame
    across = np.cross(g, [1.0, 0.0, 0.0])
    across /= np.linalg.norm(across)
    wave = A * np.sin(2 * np.pi * f * t)[:, None]
    gyr = np.zeros((L, 3))
    rows = []
    for motion in (wave * g, wave * across):
        sig = np.hstack([g + motion, gyr])
        X, names = window_features(sig, [0], L, rate, CH12[:6])
        rows.append({n: float(X[0, i]) for i, n in enumerate(names)})
    up, side = rows
    assert up["wrist_acc.inv.vert_std"] == pytest.approx(A / math.sqrt(2), rel=1e-3)
    assert up["wrist_acc.inv.horiz_std"] == pytest.approx(0.0, abs=1e-4)
    assert up["wrist_acc.inv.main_vert"] == pytest.approx(1.0, abs=1e-4)
    assert up["wrist_acc.inv.line"] == pytest.approx(1.0, abs=1e-4)
    assert up["wrist_acc.inv.sd1"] == pytest.approx(A / math.sqrt(2), rel=1e-3)
    # the norm 1 + A sin(...) carries all its power at 2 Hz (band 1-3 Hz)
    assert up["wrist_acc.inv.band_1_3"] == pytest.approx(1.0, abs=1e-3)
    assert side["wrist_acc.inv.horiz_std"] == pytest.approx(A / math.sqrt(2), rel=1e-3)
    assert side["wrist_acc.inv.vert_std"] == pytest.approx(0.0, abs=1e-4)
    assert side["wrist_acc.inv.main_vert"] == pytest.approx(0.0, abs=1e-3)
    # a still gyroscope: no motion, no direction
    assert up["wrist_gyr.inv.axis_vert"] == 0.0 and up["wrist_gyr.inv.sd1"] == 0.0


def test_turning_about_the_vertical_against_swinging():
    rate, L = 50.0, 128
    t = np.arange(L) / rate
    g = np.array([0.0, 0.0, 1.0])
    acc = np.tile(g, (L, 1))
    rate_about = np.sin(2 * np.pi * t)[:, None] * 50.0
    X1, names = window_features(np.hstack([acc, rate_about * g]), [0], L, rate, CH12[:6])
    X2, _ = window_features(np.hstack([acc, rate_about * np.array([1.0, 0, 0])]), [0], L, rate,
                            CH12[:6])
    j = names.index("wrist_gyr.inv.axis_vert")
    assert X1[0, j] == pytest.approx(1.0, abs=1e-4)
    assert X2[0, j] == pytest.approx(0.0, abs=1e-4)


def test_feature_set_1_is_the_head_of_set_2_and_unknown_sets_are_refused():
    sig = _signal(seed=5)
    starts = np.arange(0, 1000, 128)
    X1, n1 = window_features(sig, starts, 128, 50.0, CH12, version="1")
    X2, n2 = window_features(sig, starts, 128, 50.0, CH12, version="2")
    assert n1 == feature_names(CH12, "1") and len(n1) == 294
    assert n2[:294] == n1
    np.testing.assert_array_equal(X1, X2[:, :294])
    assert np.isfinite(X2).all()
    with pytest.raises(ValueError, match="feature set version '9' is unknown"):
        window_features(sig, starts, 128, 50.0, CH12, version="9")


def test_constant_windows_give_zeros_where_undefined():
    sig = np.tile(np.array([0.0, 0.0, 1.0, 0.0, 0.0, 0.0]), (200, 1))
    X, names = window_features(sig, [0, 50], 128, 50.0, CH12[:6])
    assert np.isfinite(X).all()
    col = {n: X[:, i] for i, n in enumerate(names)}
    for name in ("wrist_acc.inv.line", "wrist_acc.inv.main_vert", "wrist_acc.inv.entropy",
                 "wrist_acc.inv.sd1", "wrist_gyr.inv.axis_vert"):
        assert (col[name] == 0).all(), name
    assert col["wrist_acc.inv.p50"] == pytest.approx(1.0)


def _symmetric(rng, n):
    """Random symmetric 3 x 3 matrices: general ones, covariances of a few points (rank 1 and 2),
    multiples of the identity, double eigenvalues, zeros and badly scaled ones."""
    out = []
    for _ in range(n):
        a = rng.standard_normal((3, 3))
        out.append(a + a.T)
    for rank in (1, 2):
        for _ in range(n):
            b = rng.standard_normal((rank, 3))
            out.append(b.T @ b)
    for _ in range(n):
        q, _ = np.linalg.qr(rng.standard_normal((3, 3)))
        d = rng.choice([-1.0, 0.0, 2.0, 5.0], size=3)
        d[1] = d[0] if rng.random() < 0.5 else d[2]  # a double eigenvalue
        out.append(q @ np.diag(d) @ q.T)
    out += [np.eye(3) * 3.0, np.zeros((3, 3)), np.diag([1e-9, 1.0, 1e6])]
    return np.array(out)


def test_closed_form_eigen_matches_lapack():
    """sym3_eigen (Smith, "Eigenvalues of a symmetric 3x3 matrix", Communications of the ACM,
    1961) against numpy.linalg.eigh (LAPACK; Harris et al., "Array programming with NumPy",
    2020): eigenvalues to rounding of the matrix's size, and the main eigenvector wherever the
    largest eigenvalue is single."""
    from labeler.invariants import sym3_eigen

    A = _symmetric(np.random.default_rng(3), 200)
    vals, vec = sym3_eigen(A[:, 0, 0], A[:, 1, 1], A[:, 2, 2], A[:, 0, 1], A[:, 0, 2], A[:, 1, 2])
    ref_vals, ref_vecs = np.linalg.eigh(A)
    size = np.abs(A).sum(axis=(1, 2)) + 1e-300
    np.testing.assert_allclose((vals - ref_vals[:, ::-1]) / size[:, None], 0.0, atol=1e-7)
    assert (np.diff(vals, axis=1) <= 0).all()
    # A v = l1 v for every matrix (any vector of the eigenspace when l1 is not single)
    residual = np.einsum("nij,nj->ni", A, vec) - vals[:, :1] * vec
    np.testing.assert_allclose(np.abs(residual).max(axis=1) / size, 0.0, atol=1e-7)
    unit = np.linalg.norm(vec, axis=1)
    zero = size < 1e-200
    np.testing.assert_allclose(unit[~zero], 1.0, rtol=1e-12)
    single = (ref_vals[:, 2] - ref_vals[:, 1]) > 1e-6 * size
    dots = np.abs((vec[single] * ref_vecs[single, :, 2]).sum(axis=1))
    np.testing.assert_allclose(dots, 1.0, atol=1e-9)
    assert single.sum() > 300 and (~single).sum() > 50  # both cases were checked


def test_main_axes_match_lapack_window_by_window():
    """The main-axis features against numpy.linalg.eigh per window (Harris et al., "Array
    programming with NumPy", 2020) on a moving recording of the demo simulator."""
    from labeler.channels import triads
    from labeler.features import BAND_EDGES
    from labeler.invariants import invariant_features, invariant_names
    from labeler.synthetic import simulate_recording

    from labeler.recordings import recording_from_frame
    from labeler.windows import cut_windows

    sim = simulate_recording(300, seed=2, person=1)
    rec = recording_from_frame(sim.frame, where="sim", content_hash="h", name="sim")
    channels = list(rec.channels[:6])
    sig = np.asarray(rec.signal[:, :6], dtype=np.float64)
    tr = triads(channels)
    starts = cut_windows(rec.valid, 128, 97)
    assert starts.size > 100
    wins = {(s, k): np.stack([sig[a:a + 128, list(idx)] for a in starts]) for s, k, idx in tr}
    X = invariant_features(wins, tr, 50.0, BAND_EDGES)
    col = {n: X[:, i] for i, n in enumerate(invariant_names(tr, BAND_EDGES))}
    (site, _, acc_idx), (_, _, gyr_idx) = tr
    for k, a in enumerate(starts):
        acc, gyr = sig[a:a + 128, list(acc_idx)], sig[a:a + 128, list(gyr_idx)]
        g = acc.mean(axis=0) / np.linalg.norm(acc.mean(axis=0))
        d = acc - acc.mean(axis=0)
        _, vecs = np.linalg.eigh(d.T @ d / 128)
        assert col[f"{site}_acc.inv.main_vert"][k] == pytest.approx(abs(vecs[:, -1] @ g), abs=1e-5)
        _, rvecs = np.linalg.eigh(gyr.T @ gyr / 128)
        assert col[f"{site}_gyr.inv.axis_vert"][k] == pytest.approx(abs(rvecs[:, -1] @ g), abs=1e-5)
