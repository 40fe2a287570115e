"""Cutting recordings into windows.

Closed form: a run of n valid samples holds floor((n - length) / step) + 1 windows when n >= length,
none otherwise; the grid restarts at the first valid sample of every run.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from labeler.windows import (DEFAULT_LENGTH_S, DEFAULT_STEP_S, cut_windows, window_samples,
                             window_view)


def expected_count(runs, length, step):
    return sum((n - length) // step + 1 for n in runs if n >= length)


def test_defaults_at_50_hz():
    assert window_samples(50.0, DEFAULT_LENGTH_S, DEFAULT_STEP_S) == (128, 64)
    assert window_samples(100.0, DEFAULT_LENGTH_S, DEFAULT_STEP_S) == (256, 128)
    assert window_samples(20.0, DEFAULT_LENGTH_S, DEFAULT_STEP_S) == (51, 26)
    assert window_samples(1.0, 0.1, 0.1) == (1, 1)  # at least one sample
    inf, nan = float("inf"), float("nan")
    for bad in ((0.0, 1.0, 1.0), (50.0, 0.0, 1.0), (50.0, 1.0, -1.0), (nan, 1, 1), (inf, 1, 1),
                (50.0, inf, 1.0), (50.0, 1.0, inf), (50.0, nan, 1.0), (50.0, 1.0, 1.5)):
        with pytest.raises(ValueError):
            window_samples(*bad)


def test_counts_match_closed_form_without_gaps():
    for n in (0, 1, 127, 128, 129, 191, 192, 193, 10_000):
        starts = cut_windows(np.ones(n, dtype=bool), 128, 64)
        assert starts.size == expected_count([n], 128, 64)
        assert starts.dtype == np.int64
        np.testing.assert_array_equal(starts, np.arange(starts.size) * 64)


def test_grid_restarts_after_a_gap_and_never_covers_it():
    valid = np.ones(1000, dtype=bool)
    valid[300:310] = False  # a 10-sample gap
    valid[500] = False  # one bad sample
    starts = cut_windows(valid, 100, 50)
    # runs: 0-300 (300), 310-500 (190), 501-1000 (499)
    assert starts.size == expected_count([300, 190, 499], 100, 50)
    assert starts[0] == 0 and 310 in starts and 501 in starts
    for s in starts:
        assert valid[s:s + 100].all()
    assert (np.diff(starts) > 0).all()


def test_all_invalid_or_empty():
    assert cut_windows(np.zeros(500, dtype=bool), 10, 5).size == 0
    assert cut_windows(np.array([], dtype=bool), 10, 5).size == 0


def test_window_view_copies_the_windows():
    sig = np.arange(40, dtype=np.float32).reshape(20, 2)
    w = window_view(sig, np.array([0, 5, 12]), 8)
    assert w.shape == (3, 8, 2)
    np.testing.assert_array_equal(w[1], sig[5:13])
    w[0, 0, 0] = -1
    assert sig[0, 0] == 0  # a copy, not a view


@settings(max_examples=200, deadline=None)
@given(valid=st.lists(st.booleans(), min_size=0, max_size=400), length=st.integers(1, 40),
       step=st.integers(1, 40))
def test_property_windows_stay_inside_valid_runs(valid, length, step):
    valid = np.array(valid, dtype=bool)
    starts = cut_windows(valid, length, step)
    runs, n = [], 0
    for v in list(valid) + [False]:
        if v:
            n += 1
        elif n:
            runs.append(n)
            n = 0
    assert starts.size == expected_count(runs, length, step)
    for s in starts:
        assert s + length <= valid.size and valid[s:s + length].all()
    assert (np.diff(starts) > 0).all()
