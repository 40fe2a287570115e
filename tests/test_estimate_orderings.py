"""The accuracy estimate against the truth, for the orders people really confirm windows in.

A simulated annotator answers from ground truth (benchmarks/estimate_orderings.py, the same code
the benchmark prints its table with) in random order, from the drawn review queue and in bulk map
picks. Data: the demo simulator (its truth) and BasicMotions (Bagnall et al., "The UEA
multivariate time series classification archive, 2018", shipped in aeon; its class labels).
Claim checked: the 95 % interval holds the true accuracy of the proposals in at least 90 % of the
checks (common practice for an interval's coverage, no source), and every check gives a figure:
where cross-validation has none (a class confirmed in one stretch or one action only, common with
bulk map picks), the simulated annotator answers the blind audit of 30 the estimate asks for.
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
    """(intervals holding the truth, checks, checks without a figure, errors)."""
    hits, checks, none, errors = 0, 0, 0, []
    for order in eo.ORDERS:
        for r in range(repeats):
            for k, truth, v, lo, hi, basis, audited in eo.run(data, order, seed=r,
                                                              checkpoints=checkpoints, n_boot=100):
                checks += 1
                if basis == "none":
                    none += 1
                    continue
                hits += lo <= truth <= hi
                errors.append(v - truth)
    return hits, checks, none, np.array(errors)


def test_interval_holds_the_truth_on_the_simulator():
    data = eo.prepare("simulator", quick=True)
    hits, checks, none, err = _coverage(data, repeats=2, checkpoints=(50, 100))
    assert none == 0, f"no figure in {none} of {checks} checks"
    assert hits >= 0.9 * checks, f"interval held the truth in {hits} of {checks} checks"
    assert np.abs(err).mean() < 0.06


def test_interval_holds_the_truth_on_basicmotions():
    pytest.importorskip("aeon.datasets")
    data = eo.prepare("BasicMotions")
    hits, checks, none, err = _coverage(data, repeats=2, checkpoints=(50, 100))
    assert none == 0, f"no figure in {none} of {checks} checks"
    assert hits >= 0.9 * checks, f"interval held the truth in {hits} of {checks} checks"
    assert np.abs(err).mean() < 0.06
