"""Tests of accuracy estimates (labeler.quality)."""

import numpy as np
import pytest
from scipy.stats import binomtest
from sklearn.datasets import load_digits

from labeler.errors import InputError
from labeler.graph import build_graph
from labeler.quality import (Estimate, audit_accuracy, cross_validated_accuracy, draw_audit,
                             expected_calibration_error, training_set_estimate, wilson_interval)


@pytest.mark.parametrize("k, n", [(0, 1), (1, 1), (7, 10), (45, 50), (0, 30), (30, 30), (512, 1000)])
@pytest.mark.parametrize("level", [0.9, 0.95, 0.99])
def test_wilson_matches_scipy(k, n, level):
    # Wilson, "Probable inference, the law of succession, and statistical inference", 1927;
    # reference implementation: scipy.stats.binomtest(k, n).proportion_ci(method="wilson")
    ci = binomtest(k, n).proportion_ci(confidence_level=level, method="wilson")
    low, high = wilson_interval(k, n, level)
    assert low == pytest.approx(ci.low, abs=1e-12)
    assert high == pytest.approx(ci.high, abs=1e-12)


def test_wilson_rejects_bad_counts():
    with pytest.raises(InputError, match="k must be"):
        wilson_interval(5, 4)
    with pytest.raises(ValueError, match="n must be"):
        wilson_interval(0, 0)


def test_ece_worked_example():
    # Expected calibration error, equal-width bins (Naeini et al., "Obtaining well calibrated
    # probabilities using Bayesian binning", 2015; Guo et al., "On calibration of modern neural
    # networks", 2017): ECE = sum_m |B_m|/n |acc(B_m) - conf(B_m)|, bins ((m-1)/M, m/M].
    # M = 5 bins, 8 windows:
    #   conf 0.15, 0.35                -> bins 1, 2 (one window each)
    #   bin 1 (0, 0.2]:   0.15 wrong        acc 0,   conf 0.15  -> |0 - 0.15| = 0.15, weight 1/8
    #   bin 2 (0.2, 0.4]: 0.35 right        acc 1,   conf 0.35  -> 0.65, weight 1/8
    #   bin 3 (0.4, 0.6]: 0.6 right, 0.5 wrong  acc 0.5, conf 0.55 -> 0.05, weight 2/8
    #   bin 5 (0.8, 1]:   0.9, 0.9, 1.0 right, 0.85 wrong  acc 0.75, conf 0.9125 -> 0.1625, weight 4/8
    #   ECE = 0.15/8 + 0.65/8 + 0.05*2/8 + 0.1625*4/8 = 0.01875 + 0.08125 + 0.0125 + 0.08125 = 0.19375
    conf = [0.15, 0.35, 0.6, 0.5, 0.9, 0.9, 1.0, 0.85]
    ok = [0, 1, 1, 0, 1, 1, 1, 0]
    assert expected_calibration_error(conf, ok, n_bins=5) == pytest.approx(0.19375, abs=1e-12)
    # 0.6 sits on the upper edge of bin 3 ((0.4, 0.6]), 0.61 in bin 4: separate bins give
    # 1/2 |1 - 0.6| + 1/2 |0 - 0.61| = 0.505 (one shared bin would give |0.5 - 0.605| = 0.105)
    assert expected_calibration_error([0.6, 0.61], [1, 0], n_bins=5) == pytest.approx(0.505)
    assert expected_calibration_error([0.0], [0], n_bins=5) == 0.0
    with pytest.raises(InputError, match=r"confidence\[0\] = 1.5"):
        expected_calibration_error([1.5], [1])


def test_audit_accuracy_and_interval():
    proposed = np.array([1, 1, 2, 2, 3, 3, 3, 1, 2, 2])
    answered = np.array([1, 1, 2, 1, 3, 3, 3, 1, 2, 3])
    est = audit_accuracy(proposed, answered, confidence=np.full(10, 0.8))
    assert est.basis == "audit" and est.n == 10 and est.value == 0.8
    ci = binomtest(8, 10).proportion_ci(method="wilson")  # scipy reference, Wilson 1927
    assert (est.low, est.high) == pytest.approx((ci.low, ci.high))
    assert est.ece == pytest.approx(0.0)  # all in one bin, accuracy 0.8 = confidence 0.8


def test_draw_audit_uniform_and_only_candidates():
    cand = np.zeros(1000, bool)
    cand[::2] = True
    a = draw_audit(cand, 100, random_state=1)
    assert a.size == 100 and np.all(cand[a]) and np.unique(a).size == 100
    np.testing.assert_array_equal(a, draw_audit(cand, 100, random_state=1))
    # uniform: over many draws each candidate is picked about equally often (chi-square-free check:
    # the count per candidate is Binomial(reps, 0.2); with 200 reps mean 40, sd ~5.7)
    counts = np.zeros(1000)
    for r in range(200):
        counts[draw_audit(cand, 100, random_state=r)] += 1
    assert counts[~cand].sum() == 0
    assert abs(counts[cand].mean() - 40) < 1e-9 and counts[cand].std() < 9
    assert draw_audit(cand[:3], 10).size == 2


def test_cross_validation_on_digits():
    X, t = load_digits(return_X_y=True)
    X, t = X[:500], t[:500]
    W = build_graph(X, n_neighbors=8)
    rng = np.random.default_rng(0)
    y = np.full(t.size, -1)
    idx = rng.choice(t.size, 100, replace=False)
    y[idx] = t[idx]
    est = cross_validated_accuracy(W, y, n_folds=5)
    assert est.basis == "cross-validation" and est.n == 100
    assert est.low <= est.value <= est.high
    # for random confirmations CV is close to the true accuracy of the proposals
    from labeler.spreading import LabelSpreader
    true = (LabelSpreader().fit(W, y).transduction_[y < 0] == t[y < 0]).mean()
    assert abs(est.value - true) < 0.1
    assert "biased" in est.note


def test_training_set_estimate_counts_confirmed_as_right():
    est = Estimate(0.8, 0.7, 0.9, "audit", 50)
    tr = training_set_estimate(est, n_confirmed=100, n_proposed=300)
    assert tr.scope == "training set"
    assert (tr.value, tr.low, tr.high) == pytest.approx((0.25 + 0.75 * 0.8, 0.25 + 0.75 * 0.7, 0.25 + 0.75 * 0.9))
