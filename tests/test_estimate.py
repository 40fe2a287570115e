"""Tests of the accuracy estimate from confirmations made in any order (labeler.estimate)."""

import numpy as np
import pytest
from sklearn.datasets import load_digits
from sklearn.isotonic import IsotonicRegression
from sklearn.linear_model import LogisticRegression

from labeler.errors import InputError
from labeler.estimate import (ConfidenceCalibrator, HeldOut, audit_accuracy, audit_held_out,
                              blocked_folds, calibrate, calibrated_accuracy, combine,
                              confirmed_stretches, draw_stratified_audit,
                              importance_weighted_accuracy, missing_note, proposal_accuracy,
                              stratified_accuracy, training_mask, with_audit)
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
    # class 2 in one stretch of seven: hidden like the others (it then stands for classes
    # nobody has confirmed yet)
    assert plan.short == {} and plan.ok and np.all(plan.fold[y == 2] >= 0)
    # two classes in one stretch each, two of six stretches: more than a quarter, so short
    y2 = np.where(np.isin(np.arange(n), np.arange(520, 540)), -1, y)
    y2[450:455] = 3
    plan2 = blocked_folds(y2, rec, seq, n_folds=5, random_state=1)
    assert plan2.short == {2: 1, 3: 1} and plan2.ok
    assert np.all(plan2.fold[(y2 == 2) | (y2 == 3)] == -1)  # never hidden: always trains
    note = missing_note(plan2, {0: "walking", 1: "picking", 2: "resting", 3: "lifting"})
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
    cal = ConfidenceCalibrator(prior_strength=0.0, method="isotonic").fit(x, c)
    ref = IsotonicRegression(y_min=0, y_max=1, out_of_bounds="clip").fit(x, c)
    grid = np.linspace(0.2, 1.0, 57)
    np.testing.assert_allclose(cal.predict(grid), ref.predict(grid), atol=1e-9)
    # with a prior, monotone and inside (0, 1) even where every answer was right
    cal2 = ConfidenceCalibrator(prior_strength=2.0, method="isotonic").fit(x, c)
    p = cal2.predict(grid)
    assert np.all(np.diff(p) >= -1e-12) and 0 < p.min() and p.max() < 1
    np.testing.assert_allclose(calibrate(grid, cal2.as_dict()), p)
    with pytest.raises(InputError, match="one length"):
        ConfidenceCalibrator().fit([0.5, 0.6], [1])


def test_logistic_calibrator_without_prior_is_scikit_learn_logistic_regression():
    # Platt 1999 (a sigmoid fitted to scores by maximum likelihood), here on the log-odds of the
    # confidence; reference: sklearn.linear_model.LogisticRegression without a penalty
    rng = np.random.default_rng(5)
    x = rng.uniform(0.3, 0.999, 400)
    w = rng.uniform(0.5, 2.0, 400)
    c = (rng.uniform(size=400) < x ** 3).astype(float)
    cal = ConfidenceCalibrator(prior_strength=0.0).fit(x, c, sample_weight=w)
    z = np.log(x / (1 - x))[:, None]
    ref = LogisticRegression(C=np.inf, tol=1e-10, max_iter=1000).fit(z, c, sample_weight=w * 400 / w.sum())
    grid = np.linspace(0.3, 0.995, 40)
    want = ref.predict_proba(np.log(grid / (1 - grid))[:, None])[:, 1]
    np.testing.assert_allclose(cal.predict(grid), want, atol=2e-3)  # the stored map: 201 knots
    # a strong prior keeps the confidence as it is; any fit is monotone
    strong = ConfidenceCalibrator(prior_strength=1e9).fit(x, c)
    np.testing.assert_allclose(strong.predict(grid), grid, atol=2e-3)
    assert np.all(np.diff(cal.predict(np.linspace(0, 1, 50))) >= 0)
    # every answer right: high, below 1, finite
    sure = ConfidenceCalibrator().fit(x, np.ones_like(x)).predict(grid)
    assert np.all(np.isfinite(sure)) and sure.max() < 1 and sure.min() > grid.min()


def test_logistic_calibrator_reaches_the_maximum_where_plain_newton_steps_swing():
    # Wrong answers at the highest confidences and right ones spread below: plain Newton steps
    # from (0, 1) swing between two points far from the maximum. Reference: the same penalized
    # log-likelihood (Bernoulli log-likelihood in the log-odds of the confidence, Gaussian prior
    # of precision 1 around (0, 1); Platt 1999 with a prior) maximized by
    # scipy.optimize.minimize (BFGS).
    from scipy.optimize import minimize

    right = [0.9999, 0.7348, 0.9996, 0.99996, 0.99987, 0.99993, 0.99982, 0.99999, 0.99998,
             0.99987, 0.99999, 0.5362, 0.99967, 0.9681, 0.99995, 0.99842, 0.99999, 0.99551,
             0.99935, 0.9974, 0.99952, 0.99972, 0.99973, 0.99994]
    wrong = [0.99738, 0.99982, 0.99997, 0.99805, 0.97473, 0.99376]
    x = np.array(right + wrong)
    c = np.r_[np.ones(len(right)), np.zeros(len(wrong))]
    cal = ConfidenceCalibrator(prior_strength=1.0).fit(x, c)
    xc = np.clip(x, 1e-4, 1 - 1e-4)  # the calibrator's log-odds stop at 1e-4 from 0 and 1
    z = np.log(xc / (1 - xc))

    def loss(t):
        eta = t[0] + t[1] * z
        return -(c @ eta - np.logaddexp(0.0, eta).sum()) + 0.5 * ((t - [0.0, 1.0]) ** 2).sum()

    a, b = minimize(loss, [0.0, 1.0], method="BFGS", options={"gtol": 1e-10}).x
    grid = np.arange(60, 200) / 200  # knots of the stored map (201 from 0 to 1): exact there
    want = 1 / (1 + np.exp(-(a + b * np.log(grid / (1 - grid)))))
    np.testing.assert_allclose(cal.predict(grid), want, atol=1e-6)
    # 6 of 30 wrong, all sure: the calibrated confidence of a sure proposal is near 0.8, not 1
    assert 0.7 < cal.predict([0.9999])[0] < 0.9


def test_calibrator_follows_the_parameter_protocol_of_scikit_learn():
    # sklearn.base.clone copies an estimator through get_params (scikit-learn developer guide)
    from sklearn.base import clone

    cal = ConfidenceCalibrator(prior_strength=3.0, method="isotonic")
    copy = clone(cal)
    assert copy.get_params() == {"prior_strength": 3.0, "method": "isotonic"}
    with pytest.raises(InputError, match="method must be one of"):
        ConfidenceCalibrator(method="bins").fit([0.5, 0.6], [1, 0])


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
    # one confirmation of each class: leaving one out would score every class as unknown
    y[:] = -1
    for c in range(10):
        y[np.flatnonzero(t == c)[0]] = c
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


def test_queue_weights_enter_the_headline_as_the_importance_weighted_share():
    # Kossen, Farquhar, Gal & Rainforth, "Active Testing: Sample-Efficient Model Evaluation", 2021
    # (weights 1/(N q), self-normalised); Kish, "Survey Sampling", 1965 (effective size
    # (sum w)^2 / sum w^2). Worked by hand: four held-out answers at one confidence, drawn from a
    # pool of N = 10 with q = 0.1, 0.05, 0.2, 0.1 -> weights 1, 2, 0.5, 1; right, wrong, right,
    # right -> headline (1 + 0.5 + 1) / 4.5 = 0.5556; effective stretches 4.5^2 / 6.25 = 3.24.
    held = HeldOut(np.arange(4), np.array([1, 1, 1, 1]), np.array([1, 0, 1, 1]),
                   np.full(4, 0.7), np.array([0, 1, 0, 1]), np.arange(4))
    q = np.array([0.1, 0.05, 0.2, 0.1])
    w = 1 / (10 * q)
    est, _ = calibrated_accuracy(held, np.full(50, 0.7), weights=w, prior_strength=0.0, n_boot=20)
    # (to 1e-3: the map is kept at 201 confidences and averaged through bins 1/2000 wide)
    assert est.value == pytest.approx(2.5 / 4.5, abs=1e-3)
    assert est.value == pytest.approx(importance_weighted_accuracy(held.correct, q, 10).value,
                                      abs=1e-3)
    assert est.details["effective_stretches"] == pytest.approx(3.2, abs=0.05)
    # unweighted the same answers give 3/4, and four whole stretches
    plain, _ = calibrated_accuracy(held, np.full(50, 0.7), prior_strength=0.0, n_boot=20)
    assert plain.value == pytest.approx(0.75, abs=1e-3) and plain.details["effective_stretches"] == 4
    # two confidences: each level is its own weighted share, the headline their mix over the
    # proposed windows. At 0.5: right (w 1), wrong (w 3) -> 0.25; at 0.9: right (w 2), right
    # (w 1), wrong (w 1) -> 0.75; proposed windows half at each -> 0.5.
    held = HeldOut(np.arange(5), np.ones(5, int), np.array([1, 0, 1, 1, 0]),
                   np.array([0.5, 0.5, 0.9, 0.9, 0.9]), np.array([0, 1, 0, 1, 0]), np.arange(5))
    est, cal = calibrated_accuracy(held, np.r_[np.full(10, 0.5), np.full(10, 0.9)],
                                   weights=np.array([1, 3, 2, 1, 1.0]), prior_strength=0.0,
                                   n_boot=20)
    np.testing.assert_allclose(cal.predict([0.5, 0.9]), [0.25, 0.75], atol=1e-3)
    assert est.value == pytest.approx(0.5, abs=1e-3)  # averaged through bins 1/2000 wide
    assert est.low <= est.value <= est.high


def test_audit_answers_are_scored_by_proposals_made_without_them():
    # digits (scikit-learn; Alpaydin & Kaynak 1998): answers the proposals learned from are
    # hidden in turn; the share they get right is close to the share the same proposals get right
    # on windows nobody confirmed (the audit is a random sample of them).
    W, t, y, sp = _digits_state(n_conf=80, seed=3)
    rng = np.random.default_rng(5)
    free = np.flatnonzero(y < 0)
    audit = np.sort(rng.choice(free, 150, replace=False))
    y2 = y.copy()
    y2[audit] = t[audit]
    sp2 = LabelSpreader().fit(W, y2)
    mask = np.zeros(t.size, dtype=bool)
    mask[audit] = True
    h = audit_held_out(W, y2, mask, random_state=0)
    assert np.array_equal(np.sort(h.index), audit) and np.all(h.truth == t[h.index])
    held_right = h.correct.mean()
    rest = y2 < 0
    true_right = (sp2.transduction_[rest] == t[rest]).mean()
    assert abs(held_right - true_right) < 0.08
    # scored as confirmations they would be always right: hiding them is what makes them count
    assert (sp2.transduction_[audit] == t[audit]).mean() > held_right
    # one band holding every proposed window: the calibrated audit is close to the truth
    conf = sp2.label_distributions_.max(axis=1)[rest]
    a, cal = audit_accuracy(h.correct, h.confidence, np.zeros(150, int), np.full(150, rest.sum()),
                            conf, n_boot=50)
    assert a.basis == "audit" and a.low <= a.value <= a.high and cal is not None
    # (measured 0.054 below the truth with the logistic calibration, 0.031 with the isotonic
    # one: the hidden answers lose their neighbours' help, so they are harder than the windows
    # at the same confidence the full proposals score)
    assert abs(a.value - true_right) < 0.06
    # cross-validation leaves the answers to the audit; the audit alone stands where it has none
    cv, _ = proposal_accuracy(W, y2, exclude=mask, n_boot=20)
    assert cv.n == int((y >= 0).sum())
    none = Estimate(float("nan"), 0.0, 1.0, "none", 0, note="no figure")
    assert with_audit(none, a) is a and with_audit(cv, None) is cv
    assert with_audit(cv, a).basis == f"{cv.basis} + audit"


def test_an_audit_deals_the_answers_of_a_class_into_different_folds():
    # digits (scikit-learn; Alpaydin & Kaynak 1998): the audit is the only source of digit 9 (two
    # answers) and holds 30 answers. Dealt class by class (common practice, no source), the two
    # 9s never share a fold, so each is predicted with the other known; with every deal seed the
    # same, and each 9 is right where its class can be learned from one example.
    W, t, y, _ = _digits_state(n_conf=80, seed=3)
    y = np.where(t == 9, -1, y)  # nobody confirmed a 9
    rng = np.random.default_rng(7)
    nines = rng.choice(np.flatnonzero((t == 9) & (y < 0)), 2, replace=False)
    others = rng.choice(np.flatnonzero((t != 9) & (y < 0)), 28, replace=False)
    audit = np.sort(np.r_[nines, others])
    y2 = y.copy()
    y2[audit] = t[audit]
    mask = np.zeros(t.size, dtype=bool)
    mask[audit] = True
    for seed in range(5):
        h = audit_held_out(W, y2, mask, random_state=seed)
        f = dict(zip(h.index, h.fold))
        assert f[nines[0]] != f[nines[1]]
        # folds of equal size (30 answers)
        from labeler.estimate import AUDIT_FOLDS
        assert np.bincount(h.fold).tolist() == [30 // AUDIT_FOLDS] * AUDIT_FOLDS
    nine_right = [bool(audit_held_out(W, y2, mask, random_state=s).take(np.isin(h.index, nines))
                       .correct.all()) for s in range(3)]
    # a 9 hidden alone is predicted from the other 9; both together would be unknown (wrong)
    assert any(nine_right)


def test_audit_answers_weigh_by_their_inverse_chance_of_being_drawn():
    # Cochran, "Sampling Techniques", 1977, ch. 5: an answer of band h weighs N_h / n_h. Worked
    # by hand: band 0 (N = 90) 20 answers, 10 right; band 1 (N = 10) 20 answers, all right; all
    # at one confidence, so the calibrated value is the weighted share:
    # (4.5 * 10 + 0.5 * 20) / (4.5 * 20 + 0.5 * 20) = 55 / 100 (unweighted 30 / 40 = 0.75); the
    # calibration's prior (one pseudo-answer's precision) moves it by less than 0.01
    right = np.r_[np.arange(20) < 10, np.ones(20, bool)]
    a, _ = audit_accuracy(right, np.full(40, 0.8), np.repeat([0, 1], 20),
                          np.repeat([90, 10], 20), np.full(100, 0.8), n_boot=20)
    assert a.value == pytest.approx(0.55, abs=0.01)
    with pytest.raises(InputError, match="one length"):
        audit_accuracy([True], [0.5, 0.6], [0], [3], [0.5])


def test_windows_more_likely_wrong_than_right_are_where_the_errors_are():
    # digits (scikit-learn; Alpaydin & Kaynak 1998), 100 random confirmations, three draws, the
    # proposals made as the project makes them (the spreading times a logistic regression): the
    # proposals whose calibrated confidence is under one half (what `labeler propose` counts as
    # "more likely wrong than right") are wrong far more often than the rest, and the expected
    # number of wrong proposals (sum of one minus the calibrated confidence) is near the true one
    from sklearn.base import clone

    from labeler.proposing import Proposer, classifier_view

    X, t = load_digits(return_X_y=True)
    W = build_graph(X, n_neighbors=10)
    Z = classifier_view(X, [f"pixel{i}" for i in range(X.shape[1])])
    expected, wrong_all, likely_all = 0.0, [], []
    for seed in range(3):
        rng = np.random.default_rng(seed)
        y = np.full(t.size, -1)
        i = rng.choice(t.size, 100, replace=False)
        y[i] = t[i]
        sp = Proposer(classifier_features=Z).fit(W, y)
        conf = sp.label_distributions_.max(axis=1)
        est, cal = proposal_accuracy(W, y, conf, proposed_label=sp.transduction_,
                                     spreader=clone(sp), n_boot=20)
        un = y < 0
        pc = cal.predict(conf[un])
        expected += (1 - pc).sum()
        wrong_all.append(sp.transduction_[un] != t[un])
        likely_all.append(pc < 0.5)
    wrong, likely = np.concatenate(wrong_all), np.concatenate(likely_all)
    assert likely.sum() >= 10
    assert wrong[likely].mean() >= 3 * wrong.mean()
    assert abs(expected - wrong.sum()) <= 0.5 * wrong.sum()


def test_weights_act_within_bands_of_confidence_only():
    # stabilized weights (common practice in inverse-probability weighting, no source): weights
    # that differ only between levels of confidence are levelled out; within a level they stay
    from labeler.estimate import within_bands

    x = np.repeat([0.5, 0.7, 0.9], 4)
    w = np.repeat([10.0, 1.0, 0.1], 4)
    np.testing.assert_allclose(within_bands(x, w, np.ones(12), n_bands=3), np.ones(12))
    w2 = np.array([1, 3, 1, 3, 1, 1, 1, 1, 2, 2, 2, 2.0])
    out = within_bands(x, w2, np.ones(12), n_bands=3)
    np.testing.assert_allclose(out[:4], [0.5, 1.5, 0.5, 1.5])  # band total 4, shared 1:3:1:3
    np.testing.assert_allclose(out[4:], np.ones(8))
