"""The simulated Brightwater Orchard recordings."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from labeler.channels import parse_channel, triads
from labeler.synthetic import (ACTIVITIES, BOUT_ACTIVITIES, CHANNELS, SimulatedRecording,
                               simulate_recording, simulate_shift, window_truth)


@pytest.fixture(scope="module")
def two_hours() -> SimulatedRecording:
    return simulate_recording(2 * 3600, seed=11, person=3)


def test_activity_names():
    assert BOUT_ACTIVITIES == ("walking", "carrying", "climbing", "picking", "standing", "sitting")
    assert ACTIVITIES == BOUT_ACTIVITIES + ("transition",)


def test_deterministic_by_seed():
    a = simulate_recording(300, seed=5, person=1)
    b = simulate_recording(300, seed=5, person=1)
    pd.testing.assert_frame_equal(a.frame, b.frame)
    pd.testing.assert_frame_equal(a.truth, b.truth)
    assert (a.name, a.start_time) == (b.name, b.start_time)
    c = simulate_recording(300, seed=6, person=1)
    assert not a.frame["wrist_acc_x"].equals(c.frame["wrist_acc_x"])


def test_columns_and_metadata(two_hours):
    rec = two_hours
    assert list(rec.frame.columns) == ["time", *CHANNELS]
    assert len(CHANNELS) == 12
    assert rec.frame["time"].dtype == np.float64
    for c in CHANNELS:
        ch = parse_channel(c)
        assert ch is not None and ch.site in ("wrist", "hip") and ch.kind in ("acc", "gyr")
        assert rec.frame[c].dtype == np.float32
    assert {(s, k) for s, k, _ in triads(list(rec.frame.columns))} == {
        ("wrist", "acc"), ("wrist", "gyr"), ("hip", "acc"), ("hip", "gyr")}
    assert rec.name == "picker03_shift11"
    assert rec.rate == 50.0
    assert pd.Timestamp(rec.start_time).tzname() == "UTC" and rec.start_time.endswith("Z")


def test_truth_covers_the_recording(two_hours):
    t = two_hours.truth
    assert list(t.columns) == ["start_s", "end_s", "activity"]
    assert t["start_s"].iloc[0] == 0.0
    assert t["end_s"].iloc[-1] == pytest.approx(2 * 3600)
    np.testing.assert_array_equal(t["start_s"].to_numpy()[1:], t["end_s"].to_numpy()[:-1])
    assert (t["end_s"] > t["start_s"]).all()
    assert set(t["activity"]) == set(ACTIVITIES)  # every activity appears in two hours
    # transitions of 1-3 s separate the bouts; bouts last from seconds to minutes
    dur = t["end_s"] - t["start_s"]
    is_tr = t["activity"] == "transition"
    assert dur[is_tr].between(1.0 - 0.02, 3.0 + 0.02).all()
    assert not (t["activity"].to_numpy()[1:] == t["activity"].to_numpy()[:-1]).any()
    inner = dur[~is_tr].iloc[1:-1]  # first and last bouts may be cut by the recording's ends
    assert inner.min() >= 5.0 - 0.02 and inner.median() > 20 and inner.max() > 120


def test_rate_jitter_and_gaps(two_hours):
    time = two_hours.frame["time"].to_numpy()
    dt = np.diff(time)
    assert (dt > 0).all()  # monotonic despite the jitter
    assert np.median(dt) == pytest.approx(1 / 50, rel=1e-3)
    normal = dt[dt < 1.5 / 50]
    assert normal.std() > 1e-4  # time stamps jitter
    assert normal.min() > 0.3 / 50 and normal.max() < 1.7 / 50
    long_gaps = dt[dt > 1.0]
    assert 1 <= long_gaps.size <= 2  # one or two gaps with rows missing
    assert ((long_gaps > 3.0) & (long_gaps < 12.5)).all()
    assert len(time) < 2 * 3600 * 50


def test_short_dropouts_are_nan_runs(two_hours):
    values = two_hours.frame[list(CHANNELS)].to_numpy()
    bad = np.isnan(values).any(axis=1)
    assert bad.any()
    # short: runs of at most 0.6 s, whole sensors (all 6 channels of a site, or all 12)
    edges = np.flatnonzero(np.diff(np.concatenate([[0], bad.astype(int), [0]])))
    lengths = edges[1::2] - edges[0::2]
    assert lengths.max() <= 0.6 * 50 + 1
    nan = np.isnan(values[bad])
    wrist, hip = nan[:, :6], nan[:, 6:]
    assert ((wrist.all(axis=1) | ~wrist.any(axis=1)) & (hip.all(axis=1) | ~hip.any(axis=1))).all()


def test_no_dropouts_when_asked():
    rec = simulate_recording(600, seed=2, dropouts=False)
    assert not rec.frame.isna().any().any()
    assert len(rec.frame) == 600 * 50
    assert np.diff(rec.frame["time"].to_numpy()).max() < 1.5 / 50


def test_other_rate_and_short_duration():
    rec = simulate_recording(30, seed=1, rate=100.0)
    assert len(rec.frame) == 3000  # no long gap in a recording this short (NaN runs only)
    time = rec.frame["time"].to_numpy()
    assert (time[-1] - time[0]) / (len(time) - 1) == pytest.approx(0.01, rel=1e-4)  # clock drift
    assert rec.truth["end_s"].iloc[-1] == pytest.approx(30.0)
    with pytest.raises(ValueError):
        simulate_recording(0, seed=1)


def test_signals_are_physically_plausible(two_hours):
    rec = two_hours
    f = rec.frame.dropna()
    mid = f["time"].to_numpy()
    label = window_truth(rec.truth, mid, mid + 0.02)
    for site in ("wrist", "hip"):
        acc = np.linalg.norm(f[[f"{site}_acc_{a}" for a in "xyz"]].to_numpy(), axis=1)
        gyr = np.linalg.norm(f[[f"{site}_gyr_{a}" for a in "xyz"]].to_numpy(), axis=1)
        still = label == "sitting"
        assert np.median(acc[still]) == pytest.approx(1.0, abs=0.05)  # gravity, in g
        assert np.median(gyr[still]) < 30  # deg/s
        walking = label == "walking"
        assert np.percentile(acc[walking], 95) > 1.2  # steps
        assert np.abs(f[[f"{site}_acc_{a}" for a in "xyz"]].to_numpy()).max() <= 8.0
    # the hip moves little while picking, the wrist a lot
    picking = label == "picking"
    hip_g = np.linalg.norm(f[["hip_gyr_x", "hip_gyr_y", "hip_gyr_z"]].to_numpy(), axis=1)
    wrist_g = np.linalg.norm(f[["wrist_gyr_x", "wrist_gyr_y", "wrist_gyr_z"]].to_numpy(), axis=1)
    assert np.median(wrist_g[picking]) > 4 * np.median(hip_g[picking])


def test_people_differ():
    shift = simulate_shift(3, 120, seed=4)
    assert [r.name for r in shift] == ["picker01_shift4", "picker02_shift4", "picker03_shift4"]
    cadences = {r.meta["person"].step_freq for r in shift}
    assert len(cadences) == 3
    mounts = [r.meta["mounts"]["wrist"] for r in shift]
    assert not np.allclose(mounts[0], mounts[1])
    for r in shift:  # orientations are rotations
        for m in r.meta["mounts"].values():
            np.testing.assert_allclose(m @ m.T, np.eye(3), atol=1e-12)
            assert np.linalg.det(m) == pytest.approx(1.0)


def test_window_truth_majority():
    truth = pd.DataFrame({"start_s": [0.0, 10.0, 11.5, 20.0], "end_s": [10.0, 11.5, 20.0, 30.0],
                          "activity": ["walking", "transition", "standing", "walking"]})
    starts = np.array([0.0, 8.0, 9.5, 10.4, 19.0, 28.0, 29.5, 40.0])
    got = window_truth(truth, starts, starts + 2.56)
    assert list(got) == ["walking", "walking", "transition", "standing", "walking", "walking",
                         "walking", None]
    # a window spanning several intervals: the activity with the most time in it, summed
    wide = window_truth(truth, np.array([5.0]), np.array([25.0]))
    assert list(wide) == ["walking"]  # 5 + 5 s walking beat 8.5 s standing


def test_window_truth_sums_over_intervals():
    truth = pd.DataFrame({"start_s": [0.0, 4.0, 6.0], "end_s": [4.0, 6.0, 9.0],
                          "activity": ["a", "b", "a"]})
    # 3 s of "a" + 1 s of "a" beats 2 s of "b"
    assert list(window_truth(truth, np.array([3.0]), np.array([9.0]))) == ["a"]
    assert list(window_truth(truth, np.array([3.5]), np.array([6.5]))) == ["b"]
