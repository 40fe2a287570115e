"""Tests of the accuracy estimate from confirmations made in any order (labeler.estimate)."""

import numpy as np
import pytest
from sklearn.datasets import load_digits
from sklearn.isotonic import IsotonicRegression

from labeler.errors import InputError
from labeler.estimate import (ConfidenceCalibrator, blocked_folds, calibrate, combine,
                              confirmed_stretches, draw_stratified_audit,
                              importance_weighted_accuracy, missing_note, proposal_accuracy,
                              stratified_accuracy, training_mask)
from labeler.graph import build_graph
from labeler.quality import Estimate, wilson_interval
from labeler.spreading import LabelSpreader


def test_stretches_follow_time_recording_and_label():
    #            0   1   2   3   4   5   6   7   8   9
    y = np.array([0, 0, -1, 0, -1, -1, 0, 1, 1, 0])
    rec = np.array([0, 0, 0, 0, 0, 0, 0, 0, 1, 1])
    seq = np.array([0, 1, 2, 3, 4, 5, 6, 7, 0, 1])
    st = confirmed_stretches(y, rec, seq, gap=2)
    # 0,1,3 one stretch (gaps of 1 and 2 steps); 6 three steps after 3: new; 7 new label;
    # 8 another recording; 9 new label
    assert st[2] == st[4] == st[5] == -1
    assert st[0] == st[1] == st[3]
    assert len({st[0], st[6], st[7], st[8], st[9]}) == 5
    # without time every confirmed window stands alone
    st2 = confirmed_stretches(y)
    assert np.unique(st2[y >= 0]).size == (y >= 0).sum()


def test_folds_never_split_a_stretch_and_say_what_is_missing():
    rng = np.random.default_rng(0)
    n = 600
    rec = np.repeat([0, 1], n // 2)
    seq = np.tile(np.arange(n // 2), 2)
    y = np.full(n, -1)
    for start, c in [(10, 0), (60, 1), (120, 0), (200, 1), (310, 2), (400, 0), (520, 1)]:
        y[start:start + rng.integers(3, 12)] = c
    plan = blocked_folds(y, rec, seq, n_folds=5, random_state=1)
    for s in np.unique(plan.stretch[y >= 0]):
        assert np.unique(plan.fold[plan.stretch == s]).size == 1
    assert plan.short == {2: 1} and plan.ok
    assert np.all(plan.fold[y == 2] == -1)  # never hidden: always trains, never scored
    note = missing_note(plan, {0: "walking", 1: "picking", 2: "resting"})
    assert "resting (1 stretch)" in note and "another time" in note
    # a class the project has but nobody confirmed is missing too
    plan3 = blocked_folds(np.where(y == 2, -1, y), rec, seq, classes=[0, 1, 2])
    assert plan3.short == {2: 0}


def test_training_mask_keeps_a_buffer_around_hidden_windows():
    y = np.zeros(20, dtype=int)
    rec = np.repeat([0, 1], 10)
    seq = np.tile(np.arange(10), 2)
    hidden = np.zeros(20, bool)
    hidden[[4, 5]] = True
    m = training_mask(y, hidden, rec, seq, gap=2)
    # windows 2, 3, 6, 7 of recording 0 are within 2 steps of a hidden one; recording 1 untouched
    assert m.tolist() == [True, True, False, False, False, False, False, False, True, True] + [True] * 10


def test_calibrator_without_prior_is_scikit_learn_isotonic():
    # Zadrozny & Elkan 2002 (isotonic calibration); reference: sklearn.isotonic.IsotonicRegression
    rng = np.random.default_rng(3)
    x = rng.uniform(0.2, 1.0, 300)
    c = (rng.uniform(size=300) < x ** 0.5).astype(float)
    cal = ConfidenceCalibrator(prior_strength=0.0).fit(x, c)
    ref = IsotonicRegression(y_min=0, y_max=1, out_of_bounds="clip").fit(x, c)
    grid = np.linspace(0.2, 1.0, 57)
    np.testing.assert_allclose(cal.predict(grid), ref.predict(grid), atol=1e-9)
    # with a prior, monotone and inside (0, 1) even where every answer was right
    cal2 = ConfidenceCalibrator(prior_strength=2.0).fit(x, c)
    p = cal2.predict(grid)
    assert np.all(np.diff(p) >= -1e-12) and 0 < p.min() and p.max() < 1
    np.testing.assert_allclose(calibrate(grid, cal2.as_dict()), p)
    with pytest.raises(InputError, match="one length"):
        ConfidenceCalibrator().fit([0.5, 0.6], [1])


def test_importance_weighted_accuracy_is_unbiased_for_a_biased_draw():
    # Kossen, Farquhar, Gal & Rainforth, "Active Testing: Sample-Efficient Model Evaluation", 2021:
    # answers drawn with probability q, weighted 1/(N q), estimate the uniform accuracy.
    rng = np.random.default_rng(0)
    N = 2000
    score = rng.uniform(0, 1, N)
    right = rng.uniform(size=N) < 1 - 0.6 * score  # hard windows (high score) are wrong more often
    true = right.mean()
    q = 0.9 * score ** 2 / (score ** 2).sum() + 0.1 / N
    est, naive, cover = [], [], 0
    for r in range(300):
        pick = rng.choice(N, size=60, p=q)  # with replacement: each draw is independent
        e = importance_weighted_accuracy(right[pick], q[pick], N)
        est.append(e.value)
        naive.append(right[pick].mean())
        cover += e.low <= true <= e.high
    assert abs(np.mean(est) - true) < 0.01
    assert np.mean(naive) < true - 0.05  # the unweighted share is far too low
    assert cover / 300 >= 0.9
    # worked example: two answers, q = 0.5 (right) and 0.25 (wrong) from N = 4: weights 1/2 and 1
    e = importance_weighted_accuracy([1, 0], [0.5, 0.25], 4)
    assert e.value == pytest.approx(0.5 / 1.5)
    with pytest.raises(InputError, match="probability"):
        importance_weighted_accuracy([1], [0.0], 3)


def test_stratified_estimate_worked_example():
    # Cochran, "Sampling Techniques", 1977, ch. 5 (stratified proportion; formulas from memory):
    # stratum A: N=600, 3 of 4 answers right; stratum B: N=400, 5 of 5 right.
    # p = 0.6 * 0.75 + 0.4 * 1 = 0.85
    # v = 0.36 * (1 - 4/600) * 0.75*0.25/3 + 0.16 * (1 - 5/400) * 0 = 0.0223500
    c = [1, 1, 1, 0, 1, 1, 1, 1, 1]
    s = [0, 0, 0, 0, 1, 1, 1, 1, 1]
    N = [600] * 4 + [400] * 5
    e = stratified_accuracy(c, s, N)
    assert e.value == pytest.approx(0.85)
    v = 0.36 * (1 - 4 / 600) * 0.75 * 0.25 / 3
    n_eff = 0.85 * 0.15 / v
    assert e.details["effective_n"] == pytest.approx(round(n_eff, 1))
    # the interval is Wilson's (1927) at the effective size; check at a whole-number size
    lo, hi = wilson_interval(17, 20)
    from labeler.estimate import _wilson_p
    assert _wilson_p(0.85, 20, 1.959963984540054) == pytest.approx((lo, hi))


def _digits_state(n_conf=60, seed=0):
    X, t = load_digits(return_X_y=True)
    W = build_graph(X, n_neighbors=10)
    rng = np.random.default_rng(seed)
    y = np.full(t.size, -1)
    i = rng.choice(t.size, n_conf, replace=False)
    y[i] = t[i]
    sp = LabelSpreader().fit(W, y)
    return W, t, y, sp


def test_stratified_audit_of_30_is_narrower_than_a_simple_random_one_and_covers():
    # stratified sampling with Neyman allocation (Cochran 1977, ch. 5) against simple random
    # sampling with a Wilson interval, on scikit-learn's digits with 60 random confirmations
    W, t, y, sp = _digits_state()
    cand = y < 0
    conf = sp.label_distributions_.max(axis=1)
    right = sp.transduction_ == t
    true = right[cand].mean()
    w_st, w_srs, cov_st = [], [], 0
    for r in range(200):
        idx, s, Nh = draw_stratified_audit(cand, conf, 30, random_state=r)
        assert np.all(cand[idx]) and np.unique(idx).size == 30
        e = stratified_accuracy(right[idx], s, Nh)
        w_st.append(e.high - e.low)
        cov_st += e.low <= true <= e.high
        srs = np.random.default_rng(1000 + r).choice(np.flatnonzero(cand), 30, replace=False)
        lo, hi = wilson_interval(int(right[srs].sum()), 30)
        w_srs.append(hi - lo)
    assert np.mean(w_st) < 0.9 * np.mean(w_srs)
    assert cov_st / 200 >= 0.9


def test_combine_weights_by_precision_and_names_its_sources():
    a = Estimate(0.80, 0.70, 0.90, "audit", 30, note="audit note")
    b = Estimate(0.90, 0.88, 0.92, "cross-validation", 200, note="cv note")
    e = combine([a, b])
    # inverse-variance weights: widths 0.2 and 0.04 -> weights 1/25 : 1 -> 0.8*1/26 + 0.9*25/26
    assert e.value == pytest.approx(0.8 / 26 + 0.9 * 25 / 26)
    assert "audit note" in e.note and "cv note" in e.note and e.basis == "audit + cross-validation"
    assert combine([a]) is a
    assert combine([None, Estimate(float("nan"), 0, 1, "none", 0, note="why")]).note == "why"


def test_no_figure_while_a_class_has_one_stretch():
    W, t, y, sp = _digits_state(25, seed=2)
    # keep only one confirmation of class 3
    threes = np.flatnonzero(y == 3)
    y[threes[1:]] = -1
    if threes.size == 0:
        y[np.flatnonzero(t == 3)[0]] = 3
    est, cal = proposal_accuracy(W, y, class_names={3: "three"})
    assert est.basis == "none" and cal is None and "three (1 stretch)" in est.note


def test_small_actions_are_hidden_together_and_large_ones_keep_their_stretches():
    y = np.array([0, 0, 0, -1, 1, 1, 1, 1, 0, 0])
    rec = np.zeros(10, int)
    seq = np.array([0, 1, 2, 3, 10, 11, 20, 21, 30, 31])
    # windows 0 and 8 picked in one small action; 4..7 imported in one large one
    batch = np.array([7, 5, 5, -1, 9, 9, 9, 9, 7, 5])
    st = confirmed_stretches(y, rec, seq, batch=batch, max_batch=3)
    assert st[0] == st[8] and st[1] == st[2] == st[9] and st[0] != st[1]
    assert st[4] == st[5] and st[6] == st[7] and st[4] != st[6]  # the large action: by time
