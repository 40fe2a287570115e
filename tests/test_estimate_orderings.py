"""The accuracy estimate against the truth, for the orders people really confirm windows in.

A simulated annotator answers from ground truth (benchmarks/estimate_orderings.py, the same code
the benchmark prints its table with) in random order, from the drawn review queue and in bulk map
picks. Data: the demo simulator (its truth) and BasicMotions (Bagnall et al., "The UEA
multivariate time series classification archive, 2018", shipped in aeon; its class labels).
Claim checked: the 95 % interval holds the true accuracy of the proposals in at least 90 % of the
checks that give a figure (common practice for an interval's coverage, no source), and random
and queue order give a figure in most checks (bulk map picks often give none before 200
confirmations: a class picked in a single action is not scored).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "benchmarks"))
import estimate_orderings as eo  # noqa: E402

pytestmark = pytest.mark.slow


def _coverage(data, repeats, checkpoints):
    """(intervals holding the truth, figures given, figures given in random and queue order,
    checks in random and queue order, errors)."""
    hits, figures, ranked_figures, ranked_runs, errors = 0, 0, 0, 0, []
    for order in eo.ORDERS:
        for r in range(repeats):
            for k, truth, v, lo, hi, basis in eo.run(data, order, seed=r, checkpoints=checkpoints,
                                                     n_boot=100):
                ranked_runs += order != "map"
                if basis == "none":  # no figure (a class picked in one action only): allowed
                    continue
                figures += 1
                ranked_figures += order != "map"
                hits += lo <= truth <= hi
                errors.append(v - truth)
    return hits, figures, ranked_figures, ranked_runs, np.array(errors)


def test_interval_holds_the_truth_on_the_simulator():
    data = eo.prepare("simulator", quick=True)
    hits, figures, ranked, ranked_runs, err = _coverage(data, repeats=2, checkpoints=(50, 100))
    assert ranked >= 0.6 * ranked_runs, f"a figure in only {ranked} of {ranked_runs} checks"
    assert hits >= 0.9 * figures, f"interval held the truth in {hits} of {figures} checks"
    assert np.abs(err).mean() < 0.08


def test_interval_holds_the_truth_on_basicmotions():
    pytest.importorskip("aeon.datasets")
    data = eo.prepare("BasicMotions")
    hits, figures, ranked, ranked_runs, err = _coverage(data, repeats=2, checkpoints=(50, 100))
    assert ranked >= 0.6 * ranked_runs, f"a figure in only {ranked} of {ranked_runs} checks"
    assert hits >= 0.9 * figures, f"interval held the truth in {hits} of {figures} checks"
    assert np.abs(err).mean() < 0.08
