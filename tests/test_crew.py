"""The crew of pickers with strong person differences (labeler.crew)."""

import numpy as np
import pandas as pd
import pytest

from labeler.crew import crew_traits, simulate_crew, simulate_member
from labeler.synthetic import CHANNELS, simulate_recording


def test_deterministic_and_shaped_like_the_simulator():
    a = simulate_member(120, seed=3, person=2)
    b = simulate_member(120, seed=3, person=2)
    pd.testing.assert_frame_equal(a.frame, b.frame)
    assert list(a.frame.columns) == ["time", *CHANNELS]
    assert len(a.frame) == 120 * 50 and a.rate == 50.0
    np.testing.assert_allclose(np.diff(a.frame["time"]), 1 / 50)
    t = a.truth
    assert t["start_s"].iloc[0] == 0 and t["end_s"].iloc[-1] == pytest.approx(120.0)
    np.testing.assert_array_equal(t["start_s"].to_numpy()[1:], t["end_s"].to_numpy()[:-1])


def test_rotations_are_proper_and_people_differ():
    traits = [crew_traits(k) for k in range(1, 7)]
    for tr in traits:
        for R in (tr.wrist_rotation, tr.hip_rotation):
            np.testing.assert_allclose(R @ R.T, np.eye(3), atol=1e-12)
            assert np.linalg.det(R) == pytest.approx(1.0)
        assert 0.8 <= tr.speed <= 1.2 and 0.65 <= tr.amplitude <= 1.5
    # the watch is turned differently on different people (not all the same quarter turn)
    gx = {tuple(np.round(tr.wrist_rotation[:, 2], 1)) for tr in traits}
    assert len(gx) > 1


def test_gravity_is_one_g_when_sitting_whatever_the_turn():
    """At rest the accelerometer reads gravity alone, |a| = 1 g, in any orientation (physics;
    common practice, no source)."""
    checked = 0
    for sim in simulate_crew(3, 900, seed=8):
        t = sim.truth
        sit = t[(t["activity"] == "sitting") & (t["end_s"] - t["start_s"] > 20)]
        if sit.empty:
            continue
        a, b = sit.iloc[0]["start_s"] + 5, sit.iloc[0]["end_s"] - 5
        rows = (sim.frame["time"] > a) & (sim.frame["time"] < b)
        acc = sim.frame.loc[rows, ["hip_acc_x", "hip_acc_y", "hip_acc_z"]].to_numpy(np.float64)
        assert np.median(np.linalg.norm(acc, axis=1)) == pytest.approx(1.0, abs=0.05)
        checked += 1
    assert checked >= 1


def test_the_shift_plays_at_the_member_s_cadence():
    """The same shift of one person, played at ``speed``: the truth's bouts are 1/speed as long."""
    p = 4
    tr = crew_traits(p)
    sim = simulate_member(600, seed=2, person=p)
    plain = simulate_recording(600 * tr.speed, seed=2, person=p, rate=50 / tr.speed,
                               dropouts=False)
    np.testing.assert_allclose(sim.truth["end_s"].to_numpy()[:-1],
                               plain.truth["end_s"].to_numpy()[:-1] / tr.speed)
    assert list(sim.truth["activity"]) == list(plain.truth["activity"])


def test_bad_crew_size_is_refused():
    with pytest.raises(ValueError, match="n_people"):
        simulate_crew(0, 60, seed=1)
