"""Window features against outside references.

References: scipy.stats.skew / scipy.stats.kurtosis, numpy.percentile, scipy.signal.periodogram,
scipy.signal.find_peaks and numpy.correlate / numpy.corrcoef (Virtanen et al., "SciPy 1.0: fundamental
algorithms for scientific computing in Python", 2020; Harris et al., "Array programming with NumPy",
2020); closed forms of a sinusoid x(t) = A sin(2 pi f t + phi): RMS = A / sqrt(2) over whole periods,
dominant frequency f, 2 f crossings of its mean per second, autocorrelation peak at lag 1 / f.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy import signal as sps, stats

from labeler.features import (CHANNEL_FEATURES, FEATURE_SET_VERSION, feature_names,
                              window_features)

CH12 = [f"{s}_{k}_{a}" for s in ("wrist", "hip") for k in ("acc", "gyr") for a in "xyz"]


def feats(sig, starts, length, rate, channels, **kw):
    X, names = window_features(np.asarray(sig, dtype=np.float32), np.asarray(starts), length,
                               rate, channels, **kw)
    return X, {n: X[:, i] for i, n in enumerate(names)}


@pytest.fixture(scope="module")
def random_windows():
    rng = np.random.default_rng(42)
    L, rate = 128, 50.0
    n = L * 40
    # a mix of noise, offsets (gravity-like) and tones so that every feature varies
    t = np.arange(n) / rate
    sig = (rng.standard_normal((n, 12)) * rng.uniform(0.1, 3, 12)
           + rng.uniform(-1, 1, 12)
           + np.sin(2 * np.pi * rng.uniform(0.5, 12, 12) * t[:, None]) * rng.uniform(0, 2, 12))
    sig = sig ** np.where(rng.random(12) < 0.3, 3, 1)  # some skewed channels
    starts = np.arange(0, n - L + 1, 96)
    X, D = feats(sig, starts, L, rate, CH12)
    w = sig.astype(np.float32).astype(np.float64)
    return w, starts, L, rate, X, D


def test_names_and_shape(random_windows):
    _, starts, _, _, X, D = random_windows
    names = feature_names(CH12)
    assert list(D) == names
    assert len(set(names)) == len(names)
    # set 1: 21 per channel; per triad 6 magnitude + 3 correlations, + 3 gravity for acceleration
    assert len(feature_names(CH12, "1")) == 12 * len(CHANNEL_FEATURES) + 4 * 9 + 2 * 3 == 294
    # set 2 adds per triad 16 orientation-free features, + 3 along gravity for acceleration and
    # 1 for a gyroscope with an accelerometer at its site
    assert FEATURE_SET_VERSION == "2"
    assert len(names) == 294 + 4 * 16 + 2 * 3 + 2 * 1 == 366
    assert names[:294] == feature_names(CH12, "1")
    assert X.shape == (starts.size, 366) and X.dtype == np.float32
    for name in ("wrist_acc_x.mean", "wrist_acc.mag.std", "wrist_acc.gravity.x",
                 "wrist_acc.corr.xy", "hip_gyr_z.ac_lag", "hip_gyr.mag.ac_peak"):
        assert name in D
    assert "wrist_gyr.gravity.x" not in D
    assert isinstance(FEATURE_SET_VERSION, str) and FEATURE_SET_VERSION


def test_moments_and_percentiles_match_numpy_scipy(random_windows):
    w, starts, L, _, _, D = random_windows
    for j, ch in enumerate(CH12):
        win = np.stack([w[s:s + L, j] for s in starts])
        np.testing.assert_allclose(D[f"{ch}.mean"], win.mean(axis=1), rtol=1e-5, atol=1e-5)
        np.testing.assert_allclose(D[f"{ch}.std"], win.std(axis=1), rtol=1e-4, atol=1e-6)
        np.testing.assert_allclose(D[f"{ch}.rms"], np.sqrt((win ** 2).mean(axis=1)), rtol=1e-4)
        np.testing.assert_allclose(D[f"{ch}.range"], np.ptp(win, axis=1), rtol=1e-6)
        for q in (10, 25, 50, 75, 90):
            np.testing.assert_allclose(D[f"{ch}.p{q}"], np.percentile(win, q, axis=1),
                                       rtol=1e-5, atol=1e-6)
        np.testing.assert_allclose(D[f"{ch}.skew"], stats.skew(win, axis=1), rtol=1e-3,
                                   atol=1e-4)
        np.testing.assert_allclose(D[f"{ch}.kurt"], stats.kurtosis(win, axis=1), rtol=1e-3,
                                   atol=1e-4)


def test_spectrum_matches_scipy_periodogram(random_windows):
    w, starts, L, rate, _, D = random_windows
    edges = [(0, 1), (1, 3), (3, 6), (6, 10), (10, np.inf)]
    band_names = ["band_0_1", "band_1_3", "band_3_6", "band_6_10", "band_10_inf"]
    for j, ch in enumerate(CH12):
        for i, s in enumerate(starts):
            f, P = sps.periodogram(w[s:s + L, j], fs=rate)  # boxcar, constant detrend, one-sided
            f, P = f[1:], P[1:]
            assert D[f"{ch}.dom_freq"][i] == pytest.approx(f[np.argmax(P)])
            frac = np.array([P[(f >= a) & (f < b)].sum() for a, b in edges]) / P.sum()
            got = np.array([D[f"{ch}.{b}"][i] for b in band_names])
            np.testing.assert_allclose(got, frac, atol=2e-5)
            p = P / P.sum()
            h = -(p[p > 0] * np.log(p[p > 0])).sum() / np.log(p.size)
            assert D[f"{ch}.spec_entropy"][i] == pytest.approx(h, abs=1e-4)


def _acf_peak(x, rate):
    """Highest local maximum of the biased autocorrelation at lags 0.25-2 s, by
    numpy.correlate and scipy.signal.find_peaks."""
    c = x - x.mean()
    r = np.correlate(c, c, mode="full")[c.size - 1:]
    r = r / r[0]
    lo, hi = math.ceil(0.25 * rate), min(math.floor(2 * rate), c.size - 2)
    peaks, _ = sps.find_peaks(r[: hi + 2])
    peaks = peaks[(peaks >= lo) & (peaks <= hi)]
    if peaks.size == 0:
        return 0.0, 0.0
    k = peaks[np.argmax(r[peaks])]
    return r[k], k / rate


def test_autocorrelation_matches_numpy_correlate(random_windows):
    w, starts, L, rate, _, D = random_windows
    for j, ch in enumerate(CH12):
        for i, s in enumerate(starts):
            height, lag = _acf_peak(w[s:s + L, j], rate)
            assert D[f"{ch}.ac_peak"][i] == pytest.approx(height, abs=1e-4)
            assert D[f"{ch}.ac_lag"][i] == pytest.approx(lag)


def test_triad_features(random_windows):
    w, starts, L, rate, _, D = random_windows
    for site, kind, base in (("wrist", "acc", 0), ("wrist", "gyr", 3), ("hip", "acc", 6),
                             ("hip", "gyr", 9)):
        p = f"{site}_{kind}"
        for i, s in enumerate(starts):
            xyz = w[s:s + L, base:base + 3]
            mag = np.linalg.norm(xyz, axis=1)
            assert D[f"{p}.mag.mean"][i] == pytest.approx(mag.mean(), rel=1e-5)
            assert D[f"{p}.mag.std"][i] == pytest.approx(mag.std(), rel=1e-3)
            assert D[f"{p}.mag.rms"][i] == pytest.approx(np.sqrt((mag ** 2).mean()), rel=1e-5)
            f, P = sps.periodogram(mag, fs=rate)
            assert D[f"{p}.mag.dom_freq"][i] == pytest.approx(f[1:][np.argmax(P[1:])])
            height, lag = _acf_peak(mag, rate)
            assert D[f"{p}.mag.ac_peak"][i] == pytest.approx(height, abs=1e-4)
            cc = np.corrcoef(xyz.T)
            for a, b, name in ((0, 1, "xy"), (0, 2, "xz"), (1, 2, "yz")):
                assert D[f"{p}.corr.{name}"][i] == pytest.approx(cc[a, b], abs=1e-4)
            if kind == "acc":
                g = xyz.mean(axis=0) / np.linalg.norm(xyz.mean(axis=0))
                got = [D[f"{p}.gravity.{a}"][i] for a in "xyz"]
                np.testing.assert_allclose(got, g, atol=1e-5)


@pytest.mark.parametrize("rate,length,bin_k", [(50.0, 512, 24), (20.0, 64, 5), (100.0, 256, 6),
                                               (200.0, 400, 3)])
def test_sinusoid_closed_forms(rate, length, bin_k):
    # f on a frequency bin: a whole number (bin_k) of periods in the window
    f = bin_k * rate / length
    A = 1.7
    t = np.arange(length) / rate
    x = A * np.sin(2 * np.pi * f * t + 0.3)
    _, D = feats(x[:, None], [0], length, rate, ["dev_acc_x"])
    assert D["dev_acc_x.rms"][0] == pytest.approx(A / math.sqrt(2), rel=1e-5)
    assert D["dev_acc_x.std"][0] == pytest.approx(A / math.sqrt(2), rel=1e-5)
    assert D["dev_acc_x.mean"][0] == pytest.approx(0.0, abs=1e-5)
    assert D["dev_acc_x.dom_freq"][0] == pytest.approx(f)
    # 2 f crossings per second, to within one crossing over the window
    assert abs(D["dev_acc_x.mcr"][0] - 2 * f) <= rate / (length - 1) + 1e-6
    # autocorrelation peak at one period, to within one sample (when the period is in range)
    if 0.25 <= 1 / f <= 2.0:
        assert D["dev_acc_x.ac_lag"][0] == pytest.approx(1 / f, abs=1 / rate + 1e-9)
        assert D["dev_acc_x.ac_peak"][0] > 0.5
    assert D["dev_acc_x.spec_entropy"][0] < 0.05  # one pure tone
    # a sine is symmetric: no skew; excess kurtosis of a sine is -1.5
    assert D["dev_acc_x.skew"][0] == pytest.approx(0.0, abs=1e-4)
    assert D["dev_acc_x.kurt"][0] == pytest.approx(-1.5, abs=1e-3)


def test_sinusoid_off_bin_dominant_frequency_within_half_a_bin():
    rate, length = 50.0, 128
    for f in (0.9, 1.8, 2.05, 3.3, 7.7):
        t = np.arange(length) / rate
        _, D = feats(np.sin(2 * np.pi * f * t)[:, None], [0], length, rate, ["a_gyr_x"])
        assert abs(D["a_gyr_x.dom_freq"][0] - f) <= rate / length / 2 + 1e-9


def test_constant_windows_are_finite_and_defined():
    L, rate = 128, 50.0
    sig = np.empty((L * 3, 6), dtype=np.float32)
    sig[:L] = [0.0, 0.0, 1.0, 0.0, 0.0, 0.0]  # at rest, z up, gyro zero
    sig[L:2 * L] = 0.0  # all zero
    sig[2 * L:] = [0.1234567, -0.9876543, 0.3, 12.3456, -7.0, 1e-3]  # odd float32 values
    ch = ["w_acc_x", "w_acc_y", "w_acc_z", "w_gyr_x", "w_gyr_y", "w_gyr_z"]
    X, D = feats(sig, [0, L, 2 * L], L, rate, ch)
    assert np.isfinite(X).all()
    for name in D:
        if name.endswith((".skew", ".kurt", ".std", ".range", ".mcr", ".dom_freq", ".spec_entropy",
                          ".ac_peak", ".ac_lag")) or ".corr." in name or ".band_" in name:
            np.testing.assert_array_equal(D[name], 0.0, err_msg=name)
    np.testing.assert_allclose([D[f"w_acc.gravity.{a}"][0] for a in "xyz"], [0, 0, 1])
    np.testing.assert_array_equal([D[f"w_acc.gravity.{a}"][1] for a in "xyz"], [0, 0, 0])
    assert D["w_gyr_x.mean"][2] == pytest.approx(12.3456)
    assert D["w_acc_x.p25"][2] == np.float32(0.1234567)


def test_chunking_and_start_layout_do_not_change_results():
    rng = np.random.default_rng(3)
    sig = rng.standard_normal((5000, 12)).astype(np.float32)
    regular = np.arange(0, 5000 - 128 + 1, 64)
    X1, _ = window_features(sig, regular, 128, 50.0, CH12)
    X2, _ = window_features(sig, regular, 128, 50.0, CH12, chunk_size=7)
    # float32 sums may differ in the last bit with the chunk's memory alignment (SIMD reductions)
    np.testing.assert_allclose(X1, X2, rtol=1e-6, atol=1e-6)
    irregular = np.sort(rng.choice(5000 - 128, 40, replace=False))
    X3, _ = window_features(sig, irregular, 128, 50.0, CH12, chunk_size=9)
    X4 = np.vstack([window_features(sig, [s], 128, 50.0, CH12)[0] for s in irregular])
    np.testing.assert_allclose(X3, X4, rtol=1e-6, atol=1e-6)
    # float64 input gives the same as float32 input
    X5, _ = window_features(sig.astype(np.float64), regular, 128, 50.0, CH12)
    np.testing.assert_array_equal(X1, X5)


def test_any_channels_sites_rates_and_short_windows():
    rng = np.random.default_rng(5)
    channels = ["ankle_acc_x", "ankle_acc_y", "ankle_acc_z", "chest_gyr_y", "left2_acc_x[m/s2]"]
    sig = rng.standard_normal((300, len(channels)))
    for rate in (20.0, 33.3, 200.0):
        X, D = feats(sig, [0, 100, 292], 8, rate, channels)
        assert X.shape == (3, len(feature_names(channels)))
        assert np.isfinite(X).all()
    assert "ankle_acc.gravity.z" in D and "left2_acc_x.mean" in D  # unit dropped from the name
    assert not any(n.startswith("chest_gyr.") for n in D)  # not a full triad
    assert window_features(sig, np.array([], dtype=np.int64), 8, 50.0, channels)[0].shape == (
        0, len(feature_names(channels)))


def test_bad_arguments():
    sig = np.zeros((100, 3), dtype=np.float32)
    ch = ["a_acc_x", "a_acc_y", "a_acc_z"]
    with pytest.raises(ValueError, match="at least 8"):
        window_features(sig, [0], 7, 50.0, ch)
    with pytest.raises(ValueError, match="out of range"):
        window_features(sig, [95], 8, 50.0, ch)
    with pytest.raises(ValueError, match="channel names"):
        window_features(sig, [0], 8, 50.0, ch[:2])
    with pytest.raises(ValueError, match="rate"):
        window_features(sig, [0], 8, 0.0, ch)


@settings(max_examples=60, deadline=None)
@given(length=st.integers(8, 300), rate=st.sampled_from([20.0, 50.0, 100.0, 200.0]),
       scale=st.sampled_from([1e-3, 1.0, 1e3]), offset=st.floats(-10, 10),
       seed=st.integers(0, 2 ** 16), quantize=st.booleans())
def test_always_finite_and_in_range(length, rate, scale, offset, seed, quantize):
    rng = np.random.default_rng(seed)
    sig = rng.standard_normal((length + 20, 6)) * scale + offset
    if quantize:  # coarse steps: many ties and constant stretches
        sig = np.round(sig / scale)
    ch = ["s_acc_x", "s_acc_y", "s_acc_z", "s_gyr_x", "s_gyr_y", "s_gyr_z"]
    X, D = feats(sig, [0, 10, 20], length, rate, ch)
    assert np.isfinite(X).all()
    for name, v in D.items():
        if ".corr." in name or name.endswith(".ac_peak"):
            assert (np.abs(v) <= 1 + 1e-5).all(), name
        if ".band_" in name or name.endswith(".spec_entropy"):
            assert ((v >= -1e-6) & (v <= 1 + 1e-5)).all(), name
        if name.endswith(".dom_freq"):
            assert ((v >= 0) & (v <= rate / 2 + 1e-6)).all(), name
