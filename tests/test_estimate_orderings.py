"""The accuracy estimate against the truth, for the orders people really confirm windows in.

A simulated annotator answers from ground truth (benchmarks/estimate_orderings.py, the same code
the benchmark prints its table with) in random order, from the drawn review queue and in bulk map
picks. Data: the demo simulator (its truth) and BasicMotions (Bagnall et al., "The UEA
multivariate time series classification archive, 2018", shipped in aeon; its class labels).
Claim checked: the 95 % interval holds the true accuracy of the proposals in at least 90 % of the
runs that give a figure (common practice for an interval's coverage, no source).
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
    hits, figures, runs, errors = 0, 0, 0, []
    for order in eo.ORDERS:
        for r in range(repeats):
            for k, truth, v, lo, hi, basis in eo.run(data, order, seed=r, checkpoints=checkpoints,
                                                     n_boot=100):
                runs += 1
                if basis == "none":
                    continue
                figures += 1
                hits += lo <= truth <= hi
                errors.append(v - truth)
    return hits, figures, runs, np.array(errors)


def test_interval_holds_the_truth_on_the_simulator():
    data = eo.prepare("simulator", quick=True)
    hits, figures, runs, err = _coverage(data, repeats=3, checkpoints=(50, 100))
    assert figures >= 0.6 * runs, f"a figure in only {figures} of {runs} runs"
    assert hits >= 0.9 * figures, f"interval held the truth in {hits} of {figures} runs"
    assert np.abs(err).mean() < 0.08


def test_interval_holds_the_truth_on_basicmotions():
    pytest.importorskip("aeon.datasets")
    data = eo.prepare("BasicMotions")
    hits, figures, runs, err = _coverage(data, repeats=3, checkpoints=(50, 100))
    assert figures >= 0.6 * runs, f"a figure in only {figures} of {runs} runs"
    assert hits >= 0.9 * figures, f"interval held the truth in {hits} of {figures} runs"
    assert np.abs(err).mean() < 0.08
