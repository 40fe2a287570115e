"""Accuracy of the proposals from the confirmations people make in any order, and calibrated
confidence. Pure numerics, no storage, no display.

The question: of the windows the tool proposes a label for (unconfirmed windows), what share carry
the right label? People confirm windows in orders that are no random sample: the review queue
shows the hard ones, a lasso on the map takes whole clear clusters, consecutive windows overlap.
The estimate here works with such confirmations in three steps.

1. **Held-out predictions that respect time** (:func:`blocked_folds`,
   :func:`held_out_predictions`). Confirmed windows are grouped into *stretches*: runs of one
   recording with one label whose windows are at most ``gap`` steps apart. Whole stretches go to a
   fold; when a fold is hidden, confirmed windows within ``gap`` steps of a hidden one are left out
   of training too (a buffer, as in blocked cross-validation for dependent data: Burman, Chow &
   Nolan, "A cross-validatory method for dependent data", Biometrika 1994; from memory). So a
   hidden window is never predicted from a window it overlaps or is joined to by a temporal edge.
   A class confirmed in fewer than two stretches gives no figure: hiding its only stretch would
   score it as unlearnable; the estimate says which class needs confirmations elsewhere.
   Where several recordings carry confirmations and some proposed windows sit in recordings with
   none, those windows are scored separately by leave-one-recording-out folds (a recording with no
   confirmation is a new person or day to the proposals).

2. **Calibration** (:class:`ConfidenceCalibrator`). A logistic curve in the log-odds of the
   proposals' confidence (Platt 1999; or an isotonic map, Zadrozny & Elkan, "Transforming
   classifier scores into accurate multiclass probability estimates", KDD 2002) giving the
   probability that the proposal is right, fitted on the held-out predictions, each weighted by
   how under-represented its kind of window is among the answers at its level of confidence
   (see 3). Selection that depends on what the calibration conditions on (the queue favours
   low-margin windows, a lasso favours clear ones) leaves this conditional probability unbiased;
   that is why the estimate is the *mean calibrated confidence over the proposed windows* rather
   than the share of held-out windows that came out right. The per-window calibrated confidence is
   what the export writes. Expected calibration error (equal-width bins) is reported before and
   after, cross-fitted: each fold's windows are scored by a map fitted on the other folds.

3. **Importance weights** for windows whose selection probability is known: a window drawn by a
   stochastic review queue with probability ``q`` from a pool of ``N`` counts ``1 / (N q)`` times
   (Kossen, Farquhar, Gal & Rainforth, "Active Testing: Sample-Efficient Model Evaluation", ICML
   2021; the self-normalised Hajek form). The weights enter the headline through the
   calibration: each pooled block of the isotonic map is the weighted share of its held-out
   answers that came out right, so where the held-out confidences tie the headline *is*
   :func:`importance_weighted_accuracy` of the held-out answers; the bootstrap resamples
   stretches with their weights, and the interval's floor counts each stretch by its mean weight
   (Kish's effective size below). Audit windows drawn with stratified sampling by confidence
   (:func:`draw_stratified_audit`, Neyman allocation; Cochran, "Sampling Techniques", 3rd ed.
   1977, ch. 5) weigh ``N_h / n_h``; :func:`stratified_accuracy` is Cochran's stratified
   estimator of a proportion. An audit's answers the proposals learned from are scored by
   proposals made without them (:func:`audit_held_out`), so one audit keeps measuring the
   proposals as they improve; cross-validation then leaves them to the audit (``exclude``) and
   :func:`with_audit` joins the two.

Intervals: a bootstrap over stretches (whole stretches are resampled, the calibration refitted),
widened to at least a Wilson interval (Wilson 1927) at the effective number of stretches; for
survey estimates a Wilson interval at the Kish effective sample size ``(sum w)^2 / sum w^2``
(Kish, "Survey Sampling", 1965), so it stays inside [0, 1].

:func:`combine` joins independent estimates by inverse-variance weighting into one headline whose
note says what it rests on.

Proposed labels are suggestions. Where labels feed clinical or safety decisions a qualified person
reviews them, and local rules and licensed practice come first.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

# scikit-learn and scipy are imported where they are used: reading a stored estimate with an
# answered audit comes through this module, and their imports cost seconds at start-up
from labeler.quality import (Estimate, QualityInputError, calibrate, combine,  # noqa: F401
                             expected_calibration_error, normal_quantile, wilson_interval,
                             with_audit)

#: Confirmed windows of one recording at most this many window steps apart, with one label, form
#: one stretch, and a hidden window's training set leaves out confirmed windows this close. With
#: the default windows (2.56 s every 1.28 s) windows 1 step apart overlap by half and a temporal
#: edge joins them; 2 steps apart they touch. Common practice, no source.
DEFAULT_GAP = 2
#: Folds of the time-blocked cross-validation. Ten rather than five: each fold hides a tenth of
#: the confirmations, so the held-out proposals are closer to the full ones while confirmations
#: are few (measured with benchmarks/estimate_orderings.py: the crew's review-queue order at 50
#: confirmations went from -0.079 to -0.047 mean error, the other data sets and orders unchanged
#: within 0.01) at about a quarter more time.
DEFAULT_FOLDS = 10
#: Groups holding a class confirmed in no other group are hidden like the others (and stand for
#: the classes nobody has confirmed yet) while they are at most this share of all groups (see
#: :func:`blocked_folds`). Measured with benchmarks/estimate_orderings.py: hiding them took the
#: simulator's random order at 50 confirmations from +0.021 to +0.010 mean error (its rarest
#: activities are 1-2 % of the windows and often not met by then); a start with one bout per
#: class keeps no figure.
SINGLE_GROUP_SHARE = 0.25
CALIBRATION_BINS = 10
_HIST_BINS = 2000  # calibrated confidences of many windows are averaged through a histogram


def _z(level: float) -> float:
    return normal_quantile(level)


# --------------------------------------------------------------------------- folds

def confirmed_stretches(y, recording=None, seq=None, *, gap: int = DEFAULT_GAP, batch=None,
                        max_batch: int = 50) -> np.ndarray:
    """Stretch id per window (-1 for unconfirmed windows).

    A stretch is a maximal run of confirmed windows of one recording with one label, each at most
    ``gap`` window steps after the previous. Without ``recording``/``seq`` (windows that are not
    parts of a longer recording, e.g. separate series) every confirmed window is its own stretch.
    ``batch`` (one id per window: the user action that confirmed it, -1 for none) makes the
    windows of each action of at most ``max_batch`` windows one group instead: windows picked
    together on the map are alike whenever they were recorded, so they are hidden together.
    Larger actions (an imported file) keep the stretches.
    """
    y = _labels(y)
    n = y.size
    lab = np.flatnonzero(y >= 0)
    out = np.full(n, -1, dtype=np.int64)
    if recording is None or seq is None:
        out[lab] = np.arange(lab.size)
    else:
        rec, sq = _time(recording, seq, n)
        if int(gap) != gap or gap < 0:
            raise QualityInputError(f"gap must be a whole number >= 0, got {gap}")
        order = lab[np.lexsort((sq[lab], rec[lab]))]
        new = np.ones(order.size, dtype=bool)
        a, b = order[:-1], order[1:]
        new[1:] = ~((rec[a] == rec[b]) & (sq[b] - sq[a] <= gap) & (y[a] == y[b]))
        out[order] = np.cumsum(new) - 1
    if batch is not None and lab.size:
        bt = np.asarray(batch)
        if bt.shape != (n,):
            raise QualityInputError(f"batch must have one entry per window ({n}), got shape {bt.shape}")
        _, b_id, b_n = np.unique(bt[lab], return_inverse=True, return_counts=True)
        small = (b_n[b_id] <= max_batch) & (bt[lab] >= 0)
        key = np.where(small, out[lab].max() + 1 + b_id, out[lab])
        _, out[lab] = np.unique(key, return_inverse=True)
    return out


def _labels(y) -> np.ndarray:
    y = np.asarray(y)
    if y.ndim != 1:
        raise QualityInputError(f"y must be 1-D (one label per window, -1 unconfirmed), got shape {y.shape}")
    return y.astype(np.int64)


def _time(recording, seq, n):
    _, rec = np.unique(np.asarray(recording), return_inverse=True)
    sq = np.asarray(seq)
    if rec.shape != (n,) or sq.shape != (n,):
        raise QualityInputError(f"recording and seq must have one entry per window ({n}), got "
                                f"shapes {np.shape(recording)} and {sq.shape}")
    return rec.astype(np.int64), sq.astype(np.int64)


@dataclass
class FoldPlan:
    """Folds of the confirmed windows.

    fold: fold per window (-1 unconfirmed); n_folds: number of folds; stretch: stretch id per
    window; short: {class code: number of stretches} for classes with fewer than ``need``
    (their windows are never hidden: they always train, and are not scored); need: stretches a
    class needs to be scored.
    """

    fold: np.ndarray
    n_folds: int
    stretch: np.ndarray
    short: dict
    need: int = 2

    @property
    def ok(self) -> bool:
        return self.n_folds >= 2


def blocked_folds(y, recording=None, seq=None, *, n_folds: int = DEFAULT_FOLDS,
                  gap: int = DEFAULT_GAP, random_state=0, classes=None, batch=None) -> FoldPlan:
    """Deal whole groups (stretches or actions, :func:`confirmed_stretches`) into at most
    ``n_folds`` folds.

    Larger groups first, each goes to the fold holding the smallest share of its classes so far,
    so every class is spread over as many folds as it has groups.

    A class confirmed in a single group is, when hidden with it, unknown to the proposals that
    score it, so its windows come out wrong: they stand for the windows of classes nobody has
    confirmed yet (leaving one out is the Good-Turing estimate of the share of the unseen:
    Good, "The population frequencies of species and the estimation of population parameters",
    Biometrika 1953). That reading holds while such groups are a small part of the answers:
    when at least two classes have two groups or more and the groups holding single-group
    classes are at most :data:`SINGLE_GROUP_SHARE` of all groups, they are hidden like the
    others. Otherwise (a start with one bout of each class, a few large picks) a class in
    fewer than two groups is short: its windows are never hidden.
    ``classes`` lists every class code the proposals should know (the project's classes); one
    with no confirmation at all is short too, since its windows can only be proposed wrongly.
    """
    y = _labels(y)
    if int(n_folds) != n_folds or n_folds < 2:
        raise QualityInputError(f"n_folds must be a whole number >= 2, got {n_folds}")
    st = confirmed_stretches(y, recording, seq, gap=gap, batch=batch)
    fold = np.full(y.size, -1, dtype=np.int64)
    lab = np.flatnonzero(y >= 0)
    if lab.size == 0:
        return FoldPlan(fold, 0, st, {int(c): 0 for c in ([] if classes is None else classes)}, 2)
    n_st = int(st.max()) + 1
    cls, c_idx = np.unique(y[lab], return_inverse=True)
    # windows per (group, class): a group may hold several classes (one action, several labels)
    load_gc = np.zeros((n_st, cls.size))
    np.add.at(load_gc, (st[lab], c_idx), 1.0)
    groups_per_class = (load_gc > 0).sum(axis=0)
    single_groups = int(((load_gc[:, groups_per_class == 1] > 0).any(axis=1)).sum())
    need = 1 if ((groups_per_class >= 2).sum() >= 2
                 and single_groups <= SINGLE_GROUP_SHARE * n_st) else 2
    short = {int(c): int(k) for c, k in zip(cls, groups_per_class) if k < need}
    k = int(min(n_folds, n_st))
    rng = np.random.default_rng(random_state)
    st_fold = np.full(n_st, -1, dtype=np.int64)
    scored_cls = groups_per_class >= need
    load = np.zeros((k, cls.size))
    total = load_gc.sum(axis=0)
    # larger groups first, ties in random order; each to the fold holding the smallest share of
    # its classes so far, so a class with two groups gets them in two folds
    order = np.lexsort((rng.permutation(n_st), -load_gc.sum(axis=1)))
    for g in order:
        cols = (load_gc[g] > 0) & scored_cls
        if not cols.any():
            continue
        cost = (load[:, cols] / total[cols]).sum(axis=1) + 1e-9 * rng.permutation(k)
        f = int(np.argmin(cost))
        st_fold[g] = f
        load[f] += load_gc[g]
    for c in ([] if classes is None else classes):
        if int(c) not in set(cls.tolist()):
            short[int(c)] = 0
    fold[lab] = np.where(scored_cls[c_idx], st_fold[st[lab]], -1)
    scored = lab[fold[lab] >= 0]
    used = np.unique(fold[scored])
    remap = np.full(k, -1)
    remap[used] = np.arange(used.size)
    fold[scored] = remap[fold[scored]]
    return FoldPlan(fold, int(used.size), st, short, need)


def training_mask(y, hidden, recording=None, seq=None, *, gap: int = DEFAULT_GAP) -> np.ndarray:
    """Confirmed windows that may train while ``hidden`` (a mask) is scored: not hidden, and not
    within ``gap`` steps of a hidden window of the same recording."""
    y = _labels(y)
    hidden = np.asarray(hidden, dtype=bool)
    keep = (y >= 0) & ~hidden
    if recording is None or seq is None or not hidden.any() or gap <= 0:
        return keep
    rec, sq = _time(recording, seq, y.size)
    span = int(sq.max()) + gap + 2
    key = rec * span + sq
    hk = np.sort(key[hidden])
    cand = np.flatnonzero(keep)
    pos = np.searchsorted(hk, key[cand])
    near = np.zeros(cand.size, dtype=bool)
    for p in (pos - 1, pos):
        ok = (p >= 0) & (p < hk.size)
        d = np.abs(key[cand][ok] - hk[p[ok]])
        near[np.flatnonzero(ok)] |= d <= gap
    keep[cand[near]] = False
    return keep


@dataclass
class HeldOut:
    """Held-out predictions of confirmed windows: ``index`` (window), ``truth`` (confirmed label),
    ``predicted``, ``confidence`` (of the predicted label), ``fold``, ``stretch``."""

    index: np.ndarray
    truth: np.ndarray
    predicted: np.ndarray
    confidence: np.ndarray
    fold: np.ndarray
    stretch: np.ndarray

    @property
    def correct(self) -> np.ndarray:
        return self.predicted == self.truth

    def take(self, sel) -> "HeldOut":
        return HeldOut(*(np.asarray(a)[sel] for a in (self.index, self.truth, self.predicted,
                                                     self.confidence, self.fold, self.stretch)))


def held_out_predictions(graph, y, plan: FoldPlan, *, recording=None, seq=None,
                         gap: int = DEFAULT_GAP, spreader=None, init=None,
                         init_classes=None) -> HeldOut:
    """Spread the training part of each fold (see :func:`training_mask`) and record the label the
    spreading gives each hidden window and its confidence. ``init`` (e.g. the full fit's
    ``label_mass_``) warm-starts every fold's fit."""
    from sklearn.base import clone

    from labeler.spreading import LabelSpreader

    y = _labels(y)
    base = spreader if spreader is not None else LabelSpreader()
    parts = []
    for f in range(plan.n_folds):
        hidden = plan.fold == f
        train = training_mask(y, hidden, recording, seq, gap=gap)
        if not train.any() or not hidden.any():
            continue
        y_tr = np.where(train, y, -1)
        m = clone(base)
        if init is not None:
            m.fit(graph, y_tr, init=init, init_classes=init_classes)
        else:
            m.fit(graph, y_tr)
        h = np.flatnonzero(hidden)
        pred = m.transduction_[h]
        col = np.searchsorted(m.classes_, pred)
        conf = m.label_distributions_[h, col]
        parts.append((h, y[h], pred, conf, np.full(h.size, f), plan.stretch[h]))
    if not parts:
        z = np.zeros(0, dtype=np.int64)
        return HeldOut(z, z, z, np.zeros(0), z, z)
    return HeldOut(*(np.concatenate(a) for a in zip(*parts)))


#: Answered audit windows are hidden in this many groups (at most) to be scored by proposals made
#: without them: small groups keep the proposals close to the full ones (hiding every answer at
#: once would drop many confirmations in a young project), few groups keep the cost down.
AUDIT_FOLDS = 5


def audit_held_out(graph, y, audit_mask, *, recording=None, seq=None, gap: int = DEFAULT_GAP,
                   spreader=None, init=None, init_classes=None, n_folds: int = AUDIT_FOLDS,
                   random_state=0) -> HeldOut:
    """The label and confidence the proposals give each confirmed window of ``audit_mask`` when
    it is hidden (with confirmed windows within ``gap`` steps, :func:`training_mask`) and the
    rest train: the answers of an audit drawn from earlier proposals scored against the current
    ones, so an audit keeps measuring the proposals as they improve. Returns the held-out
    predictions (:class:`HeldOut`; ``stretch`` is the window's index: each answer stands alone).

    The answers are dealt into at most ``n_folds`` groups, each hidden in turn, class by class
    (stratified, as scikit-learn's StratifiedKFold deals; common practice, no source): answers
    of one class go to different groups while the class has fewer answers than there are groups,
    so a class only the audit found is learned from its other answers when one is hidden, not
    scored wrong whenever a random deal put its answers together.
    """
    y = _labels(y)
    m = np.asarray(audit_mask, dtype=bool) & (y >= 0)
    idx = np.flatnonzero(m)
    k = int(min(n_folds, idx.size))
    fold = np.full(y.size, -1, dtype=np.int64)
    shuffled = idx[np.random.default_rng(random_state).permutation(idx.size)]
    dealt = shuffled[np.argsort(y[shuffled], kind="stable")]  # by class, random within one
    fold[dealt] = np.arange(idx.size) % max(k, 1)
    plan = FoldPlan(fold, k, np.where(m, np.arange(y.size), -1), {}, 2)
    return held_out_predictions(graph, y, plan, recording=recording, seq=seq, gap=gap,
                                spreader=spreader, init=init, init_classes=init_classes)


def audit_accuracy(correct, confidence, stratum, stratum_size, proposed_confidence, *,
                   level: float = 0.95, n_boot: int = 200,
                   random_state=0) -> tuple[Estimate, ConfidenceCalibrator | None]:
    """Accuracy of the proposed windows from answered audit windows, each scored by proposals
    that did not learn from it (its own run's proposal, or :func:`audit_held_out`).

    ``correct``/``confidence``: per answer, whether that proposal was right and its confidence;
    ``stratum``/``stratum_size``: the confidence band it was drawn from and the band's size.
    Each answer weighs ``N_h / n_h`` (its inverse chance of being drawn; Cochran 1977, ch. 5)
    and the confidence is calibrated on the answers (:func:`calibrated_accuracy`, each answer its
    own stretch), so the headline is the mean calibrated confidence over ``proposed_confidence``:
    windows next to a confirmation, sure and right, count as what they are, though an answer
    scored without its own label never is one. Returns the estimate and the calibration.
    """
    c = np.asarray(correct, dtype=bool)
    x = np.asarray(confidence, dtype=np.float64)
    s = np.asarray(stratum)
    Nh = np.asarray(stratum_size, dtype=np.float64)
    if not (c.ndim == 1 and x.shape == c.shape == s.shape == Nh.shape):
        raise QualityInputError("correct, confidence, stratum and stratum_size must be 1-D of one "
                                "length")
    if c.size == 0:
        return Estimate(float("nan"), 0.0, 1.0, "none", 0, note="no audited window answered yet"), None
    _, inv, nh = np.unique(s, return_inverse=True, return_counts=True)
    k = c.size
    held = HeldOut(np.arange(k), np.ones(k, np.int64), c.astype(np.int64), x,
                   np.arange(k) % 5, np.arange(k))
    est, cal = calibrated_accuracy(held, proposed_confidence, weights=Nh / nh[inv], level=level,
                                   n_boot=n_boot, random_state=random_state)
    est.basis = "audit"
    # a cross-fitted calibration error on a few dozen answers says more about the folds than
    # about the calibration: none is reported
    est.ece = None
    est.details.pop("ece_raw", None)
    est.note = (f"audit: {k} window(s) drawn at random within {nh.size} confidence band(s) and "
                "answered blind, confidence calibrated on them")
    return est, cal


# --------------------------------------------------------------------------- calibration

class ConfidenceCalibrator:
    """Monotone map from a proposal's confidence to the probability that it is right.

    ``method="logistic"`` (the default): a logistic curve in the log-odds of the confidence,
    ``P(right) = 1 / (1 + exp(-(a + b logit(confidence))))``, fitted by weighted maximum
    likelihood (Platt, "Probabilistic outputs for support vector machines and comparisons to
    regularized likelihood methods", 1999, on the log-odds of the confidence; with ``a = 0`` it
    is the temperature scaling of Guo, Pleiss, Sun & Weinberger, "On calibration of modern
    neural networks", 2017). A Gaussian prior of precision ``prior_strength`` pulls ``(a, b)``
    towards ``(0, 1)``, the confidence taken at its word, so a few answers move it a little and
    many answers decide; ``b`` is kept >= 0 (monotone). Two parameters learn from a few dozen
    answers where an isotonic step would call every band without a wrong answer certain:
    measured with benchmarks/estimate_orderings.py, the mean |estimate - truth| from 50
    confirmations on went from 0.026 (isotonic) to 0.019 on the simulator and the crew.

    ``method="isotonic"``: isotonic regression (Zadrozny & Elkan 2002; pool-adjacent-violators
    as in scipy) of ``correct`` on ``confidence``; each pooled block's rate is shrunk towards the
    overall rate by ``prior_strength`` pseudo-windows (a beta prior, common practice, no source),
    and the result is made monotone again.

    Learned: ``knots_x_``, ``knots_y_`` (the map is the linear interpolation between them, flat
    beyond), ``n_``.
    """

    def __init__(self, prior_strength: float = 1.0, method: str = "logistic"):
        self.prior_strength = prior_strength
        self.method = method

    # the parameter protocol of scikit-learn estimators (so ``sklearn.base.clone`` copies one),
    # written out: the class is used where scikit-learn is not imported
    def get_params(self, deep: bool = True) -> dict:
        return {"prior_strength": self.prior_strength, "method": self.method}

    def set_params(self, **params) -> "ConfidenceCalibrator":
        for k, v in params.items():
            if k not in ("prior_strength", "method"):
                raise QualityInputError(f"ConfidenceCalibrator has no parameter {k!r}")
            setattr(self, k, v)
        return self

    def __repr__(self) -> str:
        return (f"ConfidenceCalibrator(prior_strength={self.prior_strength!r}, "
                f"method={self.method!r})")

    def fit(self, confidence, correct, sample_weight=None):
        x = np.asarray(confidence, dtype=np.float64)
        c = np.asarray(correct, dtype=np.float64)
        if x.ndim != 1 or x.shape != c.shape:
            raise QualityInputError(f"confidence and correct must be 1-D of one length, got "
                                    f"{x.shape} and {c.shape}")
        if x.size == 0:
            raise QualityInputError("no answered window to calibrate the confidence on")
        if not np.all(np.isfinite(x)):
            raise QualityInputError(f"confidence[{int(np.flatnonzero(~np.isfinite(x))[0])}] is not a number")
        if not self.prior_strength >= 0:
            raise QualityInputError(f"prior_strength must be >= 0, got {self.prior_strength}")
        if self.method not in CALIBRATION_METHODS:
            raise QualityInputError(f"method must be one of {', '.join(CALIBRATION_METHODS)}, got "
                                    f"{self.method!r}")
        w = np.ones_like(x) if sample_weight is None else np.asarray(sample_weight, np.float64)
        if w.shape != x.shape or np.any(~np.isfinite(w)) or np.any(w < 0) or w.sum() <= 0:
            raise QualityInputError("sample_weight must be finite, >= 0, one per window, not all 0")
        w = w * (x.size / w.sum())  # weights count as windows
        ux, inv = np.unique(x, return_inverse=True)
        uw = np.bincount(inv, weights=w)
        self.knots_x_, self.knots_y_ = _curve(ux, uw, np.bincount(inv, weights=w * c),
                                              self.prior_strength, self.method)
        self.n_ = int(x.size)
        return self

    def predict(self, confidence) -> np.ndarray:
        """Calibrated probability that the proposal is right, per window."""
        x = np.asarray(confidence, dtype=np.float64)
        return np.interp(x, self.knots_x_, self.knots_y_)

    def mean_over(self, confidence) -> float:
        """Mean calibrated probability over many windows (through a fine histogram)."""
        return float(np.dot(_histogram(confidence), self.predict(_CENTRES)))

    def as_dict(self) -> dict:
        return {"confidence": [float(v) for v in self.knots_x_],
                "probability": [float(v) for v in self.knots_y_], "fitted_on": self.n_}


_CENTRES = (np.arange(_HIST_BINS) + 0.5) / _HIST_BINS


CALIBRATION_METHODS = ("logistic", "isotonic")
#: The logistic map is kept as its values at these confidences (stored with the run).
_GRID = np.linspace(0.0, 1.0, 201)


def _curve(ux, uw, uk, prior_strength, method):
    """The calibration's knots (x, y) from the weight ``uw`` and the weighted count of right
    answers ``uk`` at each distinct confidence ``ux`` (ascending)."""
    if method == "logistic":
        return _GRID, _logistic_curve(ux, uw, uk, prior_strength)
    return ux, _isotonic_knots(uw, uk, prior_strength)


def _logit(p):
    p = np.clip(np.asarray(p, dtype=np.float64), 1e-4, 1 - 1e-4)
    return np.log(p / (1 - p))


def _logistic_curve(ux, uw, uk, prior_strength, at=_GRID):
    """``1 / (1 + exp(-(a + b logit(at))))`` with ``(a, b)`` the maximum a posteriori fit of
    ``uk`` right answers out of ``uw`` at ``logit(ux)`` under a Gaussian prior of precision
    ``prior_strength`` around ``(0, 1)`` (Newton's method; without a prior, a tiny precision
    keeps a fit where every answer is right finite). A Newton step that lowers the posterior is
    halved until it does not (a plain Newton step can overshoot and swing between two points for
    ever, e.g. when wrong answers sit at the highest confidences); the posterior is concave, so
    the damped steps reach its one maximum."""
    z = _logit(ux)
    X = np.column_stack([np.ones_like(z), z])
    lam = float(prior_strength) if prior_strength > 0 else 1e-8
    prior = np.array([0.0, 1.0])
    eye = lam * np.eye(2)

    def log_posterior(theta):
        eta = X @ theta
        d = theta - prior
        return float(uk @ eta - uw @ np.logaddexp(0.0, eta) - 0.5 * lam * (d @ d))

    th = prior.copy()
    value = log_posterior(th)
    for _ in range(100):
        p = 1.0 / (1.0 + np.exp(-np.clip(X @ th, -35, 35)))
        g = X.T @ (uk - uw * p) - lam * (th - prior)
        H = (X * (uw * p * (1 - p))[:, None]).T @ X + eye
        step = np.linalg.solve(H, g)
        for _ in range(60):
            new = log_posterior(th + step)
            # rounding may make a converged step look a hair worse: that step is kept
            if new >= value - 1e-12 * (1.0 + abs(value)):
                break
            step = step / 2
        th = th + step
        value = new
        if np.abs(step).max() < 1e-10:
            break
    a, b = th[0], max(th[1], 0.0)
    return 1.0 / (1.0 + np.exp(-np.clip(a + b * _logit(at), -35, 35)))


def _isotonic_knots(uw, uk, prior_strength):
    """Calibrated value per distinct confidence (ascending) from the weight ``uw`` and the
    weighted count of right answers ``uk`` at each: pool-adjacent-violators
    (scipy.optimize.isotonic_regression; a fit of values in [0, 1] stays in [0, 1]), then each
    pooled block shrunk towards the overall rate by ``prior_strength`` windows and made monotone
    again."""
    from scipy.optimize import isotonic_regression

    fit = isotonic_regression(uk / uw, weights=uw).x
    if prior_strength > 0:
        p0 = uk.sum() / uw.sum()
        new = np.r_[True, np.abs(np.diff(fit)) > 1e-12]
        block = np.cumsum(new) - 1
        bw = np.bincount(block, weights=uw)[block]
        fit = isotonic_regression((fit * bw + prior_strength * p0) / (bw + prior_strength),
                                  weights=uw).x
    return np.asarray(fit, dtype=np.float64)


def _histogram(confidence) -> np.ndarray:
    x = np.clip(np.asarray(confidence, dtype=np.float64), 0.0, 1.0)
    h = np.bincount(np.minimum((x * _HIST_BINS).astype(np.int64), _HIST_BINS - 1),
                    minlength=_HIST_BINS).astype(np.float64)
    return h / max(h.sum(), 1.0)


# --------------------------------------------------------------------------- the estimate

def calibrated_accuracy(held: HeldOut, proposed_confidence, *, weights=None, level: float = 0.95,
                        n_boot: int = 200, prior_strength: float = 1.0, random_state=0,
                        what: str = "", method: str = "logistic"
                        ) -> tuple[Estimate, ConfidenceCalibrator | None]:
    """Mean calibrated confidence over the proposed windows, with a bootstrap interval.

    ``held`` are held-out predictions, ``proposed_confidence`` the current confidences of the
    windows whose accuracy is wanted, ``weights`` one importance weight per held-out window
    (default 1); each stretch (``held.stretch``) weighs as one answer, shared by its windows. The interval is the percentile interval of ``n_boot`` refits on stretches drawn
    with replacement, widened to at least the binomial (Wilson) interval of the held-out windows
    scored at the estimate, so that a handful of answers never gives a narrow interval.
    """
    z = _z(level)
    conf_p = np.asarray(proposed_confidence, dtype=np.float64)
    n = int(held.index.size)
    if n == 0 or conf_p.size == 0:
        return Estimate(float("nan"), 0.0, 1.0, "none", n, note="no held-out window to score"), None
    w = np.ones(n) if weights is None else np.asarray(weights, dtype=np.float64)
    # each stretch counts as one answer, whatever its length: its windows move together, and a
    # long hidden stretch (an imported file, a long bout) would otherwise outweigh every other
    # answer with predictions from proposals that lost most of their examples of its class
    _, s_inv, s_n = np.unique(held.stretch, return_inverse=True, return_counts=True)
    w = within_bands(held.confidence, w, 1.0 / s_n[s_inv]) if BAND_WEIGHTS else w / s_n[s_inv]
    cal = ConfidenceCalibrator(prior_strength, method).fit(held.confidence, held.correct, w)
    hist = _histogram(conf_p)
    value = float(np.dot(hist, cal.predict(_CENTRES)))
    rng = np.random.default_rng(random_state)
    st, st_inv = np.unique(held.stretch, return_inverse=True)
    # each stretch's weight and weighted right answers at each distinct confidence, so a
    # bootstrap sample (stretches drawn with replacement) is a weighted sum of stretches
    ux, inv = np.unique(held.confidence, return_inverse=True)
    ws = w * (n / w.sum())
    W_s = np.zeros((st.size, ux.size))
    K_s = np.zeros((st.size, ux.size))
    np.add.at(W_s, (st_inv, inv), ws)
    np.add.at(K_s, (st_inv, inv), ws * held.correct)
    boots = []
    for _ in range(int(n_boot)):
        times = np.bincount(rng.integers(0, st.size, st.size), minlength=st.size).astype(np.float64)
        uw, uk = times @ W_s, times @ K_s
        keep = uw > 0
        kx, ky = _curve(ux[keep], uw[keep], uk[keep], prior_strength, method)
        boots.append(float(np.dot(hist, np.interp(_CENTRES, kx, ky))))
    a = (1 - level) / 2
    lo, hi = (np.quantile(boots, [a, 1 - a]) if boots else (0.0, 1.0))
    # effective number of independent answers: stretches, not windows (windows of a stretch
    # move together), each counted by its weight (its windows' mean importance weight; Kish's
    # effective size, (sum a)^2 / sum a^2: a few heavily weighted answers count as few)
    a_s = np.bincount(st_inv, weights=ws)
    n_eff = max(1.0, float(a_s.sum() ** 2 / np.dot(a_s, a_s)))
    wl, wh = _wilson_p(value, n_eff, z)
    # the shrinkage pulls blocks towards the overall rate; the interval reaches the unshrunk value
    raw = float(np.dot(hist, ConfidenceCalibrator(0.0, method).fit(held.confidence,
                                                                  held.correct, w)
                       .predict(_CENTRES)))
    low, high = float(min(lo, wl, raw)), float(max(hi, wh, raw))
    # reported to three decimals: rounded outwards, so a proportion of exactly 1 (or 0) that the
    # interval reaches to within rounding is inside it as printed
    low, high = np.floor(low * 1000) / 1000, np.ceil(high * 1000) / 1000
    ece_raw = expected_calibration_error(np.clip(held.confidence, 0, 1), held.correct, CALIBRATION_BINS)
    ece_cal = _cross_fitted_ece(held, w, prior_strength, method)
    est = Estimate(value, max(0.0, low), min(1.0, high), "cross-validation", n, level=level,
                   ece=ece_cal,
                   note=(f"time-blocked cross-validation of {n} confirmed window(s) in {st.size} "
                         f"stretch(es){what}, confidence calibrated on them"),
                   details={"stretches": int(st.size), "effective_stretches": round(n_eff, 1),
                            "folds": int(np.unique(held.fold).size),
                            "held_out_right": float(np.average(held.correct, weights=w)),
                            "ece_raw": ece_raw, "calibration": cal.as_dict()})
    return est, cal


#: Importance weights act within bands of confidence only (:func:`within_bands`). Off: with the
#: bands between quantiles the simulator's queue order read 0.06-0.10 low at 100 answers (the
#: intervals narrower, missing the truth); with whole weights it was within 0.015, its intervals
#: wide (0.37-1.0 at 50 answers).
BAND_WEIGHTS = False
WEIGHT_BANDS = 10


def within_bands(confidence, weights, base, n_bands: int = WEIGHT_BANDS) -> np.ndarray:
    """Importance weights made to act within bands of confidence only: each of ``n_bands``
    equal-count bands of ``confidence`` keeps the total of ``base`` (the weight each answer has
    without importance weights) and shares it out in proportion to ``base * weights``.

    The calibration estimates the chance that a proposal is right *given its confidence*, so a
    draw that favours some confidences over others needs no correction (module docstring, 2);
    only a preference within one level of confidence (for windows of little support, say) does.
    Weights that differ between bands only widen the interval (Kish's effective size falls)
    without removing any bias; within bands they are kept whole. Stabilized weights of this kind
    are common practice in inverse-probability weighting (no source)."""
    x = np.asarray(confidence, dtype=np.float64)
    w = np.asarray(weights, dtype=np.float64) * base
    base = np.broadcast_to(np.asarray(base, dtype=np.float64), x.shape)
    if x.size == 0:
        return w
    k = int(max(1, min(n_bands, x.size)))
    # bands between quantiles of the confidence: equal confidences share a band
    edges = np.unique(np.quantile(x, np.linspace(0, 1, k + 1)[1:-1]))
    band = np.searchsorted(edges, x, side="right")
    k = edges.size + 1
    tot_w = np.bincount(band, weights=w, minlength=k)
    tot_b = np.bincount(band, weights=base, minlength=k)
    return w * np.where(tot_w > 0, tot_b / np.where(tot_w > 0, tot_w, 1.0), 0.0)[band]


def _wilson_p(p: float, n: float, z: float) -> tuple[float, float]:
    """Wilson interval for a proportion p observed on n (possibly fractional) trials."""
    denom = 1 + z * z / n
    centre = (p + z * z / (2 * n)) / denom
    half = z * np.sqrt(max(p * (1 - p), 0.0) / n + z * z / (4 * n * n)) / denom
    return float(max(0.0, centre - half)), float(min(1.0, centre + half))


def _cross_fitted_ece(held: HeldOut, w, prior_strength, method) -> float | None:
    folds = np.unique(held.fold)
    if folds.size < 2:
        return None
    out = np.empty(held.index.size)
    for f in folds:
        te = held.fold == f
        cal = ConfidenceCalibrator(prior_strength, method).fit(held.confidence[~te],
                                                               held.correct[~te], w[~te])
        out[te] = cal.predict(held.confidence[te])
    return expected_calibration_error(np.clip(out, 0, 1), held.correct, CALIBRATION_BINS)


def missing_note(plan: FoldPlan, class_names=None, classes=None) -> str:
    """What cross-validation is missing, in one line (``classes``: which short classes to name;
    default all)."""
    name = (lambda c: str(class_names[c]) if class_names is not None and c in class_names
            else f"class {c}")
    short = {c: k for c, k in plan.short.items() if classes is None or c in classes}
    if not short:
        return ("no figure yet: time-blocked cross-validation needs confirmed windows of two "
                "classes, each in at least two separate stretches of time")
    parts = [f"{name(c)} ({k} stretch{'es' if k != 1 else ''})" for c, k in sorted(short.items())]
    return ("no figure yet: time-blocked cross-validation needs each class confirmed in at least "
            f"{plan.need} separate stretches of time; short: {', '.join(parts)}; confirm those "
            "classes at another time or in another recording")


#: A class confirmed in a single stretch is not scored; when the windows proposed as such classes
#: are at most this share of the proposed windows they count as unknown (anywhere from all wrong
#: to all right) in the interval; above it there is no figure.
MAX_UNSCORED_SHARE = 0.05


def proposal_accuracy(graph, y, proposed_confidence=None, *, recording=None, seq=None,
                      weights=None, spreader=None, init=None, init_classes=None,
                      n_folds: int = DEFAULT_FOLDS, gap: int = DEFAULT_GAP, level: float = 0.95,
                      n_boot: int = 200, random_state=0, class_names=None,
                      proposed_mask=None, classes=None, proposed_label=None, batch=None,
                      exclude=None) -> tuple[Estimate, ConfidenceCalibrator | None]:
    """Accuracy of the proposals for the unconfirmed windows of ``y`` (module docstring, 1-2).

    ``proposed_confidence`` is the current confidence of every window (the full fit's; computed
    here when None). ``weights`` are importance weights per window (used for confirmed windows;
    default 1). ``proposed_mask`` limits the windows whose accuracy is wanted (default: all
    unconfirmed). ``batch``: the user action that confirmed each window (see
    :func:`confirmed_stretches`). ``classes``: every class code the project has (a class never confirmed gives
    no figure). ``exclude``: confirmed windows that train but are never hidden nor scored here
    (audit answers, scored on their own by :func:`audit_held_out`, so the two estimates rest on
    different windows). Returns the estimate and the calibrator (None when there is no figure).
    """
    from sklearn.base import clone

    from labeler.spreading import LabelSpreader

    y = _labels(y)
    base = spreader if spreader is not None else LabelSpreader()
    target = (y < 0) if proposed_mask is None else np.asarray(proposed_mask, dtype=bool)
    if proposed_confidence is None:
        full = clone(base).fit(graph, y)
        proposed_confidence = full.label_distributions_.max(axis=1)
        if init is None:
            init, init_classes = full.label_mass_, full.classes_
        if proposed_label is None:
            proposed_label = full.transduction_
    conf = np.asarray(proposed_confidence, dtype=np.float64)
    w_all = np.ones(y.size) if weights is None else np.asarray(weights, dtype=np.float64)
    y_plan = y if exclude is None else np.where(np.asarray(exclude, dtype=bool), -1, y)
    plan = blocked_folds(y_plan, recording, seq, n_folds=n_folds, gap=gap,
                         random_state=random_state, classes=classes, batch=batch)
    n_conf = int((y_plan >= 0).sum())
    never = {c for c, k in plan.short.items() if k == 0}
    unscored = np.zeros(y.size, dtype=bool)
    if plan.short and not never:
        if proposed_label is None:
            raise QualityInputError("give proposed_label with proposed_confidence")
        unscored = target & np.isin(np.asarray(proposed_label), list(plan.short))
    share = float(unscored.sum() / max(1, target.sum()))
    if not plan.ok or never or share > MAX_UNSCORED_SHARE:
        return Estimate(float("nan"), 0.0, 1.0, "none", n_conf,
                        note=missing_note(plan, class_names)), None
    est, cal = _scored_accuracy(graph, y, plan, conf, target & ~unscored, w_all, base, init,
                                init_classes, recording, seq, gap, level, n_boot, random_state,
                                y_plan >= 0)
    if not unscored.any() or est.basis == "none":
        return est, cal
    # windows proposed as unscored classes: calibrated value, anywhere in [0, 1] for the interval
    v_un = cal.mean_over(conf[unscored])
    details = {**est.details, "unscored_windows": int(unscored.sum())}
    note = (est.note + f"; {int(unscored.sum())} window(s) proposed as "
            f"{missing_note(plan, class_names).split('short: ')[1].split(';')[0]} are not checked "
            "and widen the interval (0-100 % right)")
    return Estimate((1 - share) * est.value + share * v_un, (1 - share) * est.low,
                    (1 - share) * est.high + share, est.basis, est.n, level=level, ece=est.ece,
                    note=note, details=details), cal


def _scored_accuracy(graph, y, plan, conf, target, w_all, base, init, init_classes, recording,
                     seq, gap, level, n_boot, random_state, scorable):
    held = held_out_predictions(graph, y, plan, recording=recording, seq=seq, gap=gap,
                                spreader=base, init=init, init_classes=init_classes)
    parts = [(target, held, "")]
    # windows in recordings without any confirmation: leave-one-recording-out
    if recording is not None and seq is not None:
        rec, _ = _time(recording, seq, y.size)
        has = np.zeros(int(rec.max()) + 1, dtype=bool)
        has[rec[y >= 0]] = True
        orphan = target & ~has[rec]
        if orphan.any() and has.sum() >= 2:
            lo_plan = FoldPlan(np.where(scorable, np.searchsorted(np.flatnonzero(has), rec), -1),
                               int(has.sum()), plan.stretch, {}, 2)
            lo_held = held_out_predictions(graph, y, lo_plan, recording=recording, seq=seq,
                                           gap=gap, spreader=base, init=init,
                                           init_classes=init_classes)
            parts = [(target & has[rec], held, ""),
                     (orphan, lo_held, ", leave-one-recording-out for recordings without one")]
    ests = []
    for mask, h, what in parts:
        if not mask.any():
            continue
        e, cal = calibrated_accuracy(h, conf[mask], weights=w_all[h.index], level=level,
                                     n_boot=n_boot, random_state=random_state, what=what)
        ests.append((int(mask.sum()), e, cal))
    if not ests:
        return Estimate(float("nan"), 0.0, 1.0, "none", 0, note="no proposed window to score"), None
    if len(ests) == 1:
        return ests[0][1], ests[0][2]
    # a mixture of the two populations by their sizes; intervals added conservatively
    tot = sum(k for k, _, _ in ests)
    value = sum(k * e.value for k, e, _ in ests) / tot
    low = sum(k * e.low for k, e, _ in ests) / tot
    high = sum(k * e.high for k, e, _ in ests) / tot
    e0 = ests[0][1]
    est = Estimate(value, low, high, "cross-validation", e0.n, level=level, ece=e0.ece,
                   note="; ".join(f"{k} window(s): {e.note}" for k, e, _ in ests),
                   details={**e0.details, "parts": [{"windows": k, **e.as_dict()} for k, e, _ in ests]})
    return est, ests[0][2]


# --------------------------------------------------------------------------- weighted answers

def _weighted_share(correct, w, level, basis, note, n=None) -> Estimate:
    c = np.asarray(correct, dtype=np.float64)
    w = np.asarray(w, dtype=np.float64)
    p = float(np.dot(w, c) / w.sum())
    n_eff = float(w.sum() ** 2 / np.dot(w, w))
    low, high = _wilson_p(p, n_eff, _z(level))
    return Estimate(p, low, high, basis, int(c.size if n is None else n), level=level, note=note,
                    details={"effective_n": round(n_eff, 1)})


def importance_weighted_accuracy(correct, probability, pool_size, *, level: float = 0.95) -> Estimate:
    """Share of answers whose proposal was right, each answer weighted ``1 / (N q)``: ``q`` its
    probability of being drawn from a pool of ``N`` windows (Kossen et al. 2021; Hajek's
    self-normalised form). Unbiased for a uniform draw's accuracy as the number of answers grows."""
    c = np.asarray(correct, dtype=np.float64)
    q = np.asarray(probability, dtype=np.float64)
    N = np.broadcast_to(np.asarray(pool_size, dtype=np.float64), c.shape)
    if c.ndim != 1 or q.shape != c.shape:
        raise QualityInputError(f"correct and probability must be 1-D of one length, got {c.shape} and {q.shape}")
    if c.size == 0:
        return Estimate(float("nan"), 0.0, 1.0, "none", 0, note="no answered window drawn with a known probability")
    if np.any(~(q > 0)) or np.any(q > 1):
        bad = int(np.flatnonzero(~((q > 0) & (q <= 1)))[0])
        raise QualityInputError(f"probability[{bad}] = {q[bad]} must lie in (0, 1]")
    if np.any(N < 1):
        raise QualityInputError("pool_size must be >= 1")
    return _weighted_share(c, 1.0 / (N * q), level, "importance-weighted",
                           f"{c.size} answered window(s) drawn with known probability, weighted "
                           "by 1/(pool x probability)")


def importance_weights(window_ids, drawn_ids, probability, pool) -> np.ndarray:
    """Weight per window of ``window_ids``: ``1 / (pool q)`` for windows drawn at random with
    probability ``q`` among ``pool`` candidates (Kossen et al. 2021), 1 for the others (whose
    selection is unknown)."""
    ids = np.asarray(window_ids)
    w = np.ones(ids.size)
    q = np.asarray(probability, dtype=np.float64)
    m = np.asarray(pool, dtype=np.float64)
    if q.size and (np.any(~(q > 0)) or np.any(q > 1) or np.any(m < 1)):
        raise QualityInputError("draw probabilities must lie in (0, 1] and pools be >= 1")
    pos = np.searchsorted(ids, drawn_ids) if ids.size else np.zeros(0, np.int64)
    hit = (pos < ids.size) & (ids[np.minimum(pos, max(ids.size - 1, 0))] == drawn_ids) if ids.size else pos.astype(bool)
    w[pos[hit]] = 1.0 / (m[hit] * q[hit])
    return w


def draw_stratified_audit(candidate_mask, confidence, n: int, *, n_strata: int = 4,
                          random_state=None, min_per_stratum: int = 2):
    """Stratified random sample of ``n`` candidates, strata by confidence (Cochran 1977, ch. 5).

    Strata are equal-count bands of the candidates' confidence. Neyman allocation
    ``n_h ~ N_h S_h`` with ``S_h = sqrt(p_h (1 - p_h))`` and ``p_h`` the stratum's mean
    confidence kept in [0.15, 0.85] (so no stratum is starved), at least ``min_per_stratum`` per
    stratum. Returns (index, stratum, stratum_size): sorted window indices, each one's stratum and
    that stratum's number of candidates ``N_h``.
    """
    cand = np.flatnonzero(np.asarray(candidate_mask, dtype=bool))
    conf = np.asarray(confidence, dtype=np.float64)
    if int(n) != n or n < 1:
        raise QualityInputError(f"audit size must be a whole number >= 1, got {n}")
    if int(n_strata) != n_strata or n_strata < 1:
        raise QualityInputError(f"n_strata must be a whole number >= 1, got {n_strata}")
    rng = np.random.default_rng(random_state)
    n = int(min(n, cand.size))
    if n == 0:
        z = np.zeros(0, dtype=np.int64)
        return z, z, z
    H = int(max(1, min(n_strata, n // max(1, min_per_stratum), cand.size)))
    order = cand[np.argsort(conf[cand], kind="stable")]
    bands = np.array_split(order, H)
    Nh = np.array([b.size for b in bands], dtype=np.float64)
    ph = np.clip([conf[b].mean() for b in bands], 0.15, 0.85)
    share = Nh * np.sqrt(ph * (1 - ph))
    nh = np.minimum(Nh, np.maximum(min_per_stratum, 0)).astype(np.int64)
    left = n - int(nh.sum())
    while left > 0:  # hand out one at a time to the largest remaining Neyman deficit
        room = nh < Nh
        target = share / share.sum() * n
        gapv = np.where(room, target - nh, -np.inf)
        h = int(np.argmax(gapv))
        nh[h] += 1
        left -= 1
    idx, strat, size = [], [], []
    for h, b in enumerate(bands):
        pick = rng.choice(b, size=int(nh[h]), replace=False)
        idx.append(pick)
        strat.append(np.full(pick.size, h))
        size.append(np.full(pick.size, b.size))
    idx, strat, size = (np.concatenate(a) for a in (idx, strat, size))
    o = np.argsort(idx)
    return idx[o], strat[o].astype(np.int64), size[o].astype(np.int64)


def stratified_accuracy(correct, stratum, stratum_size, *, level: float = 0.95) -> Estimate:
    """Cochran's stratified estimate of a proportion (1977, eqs. 5.52-5.54 from memory):
    ``p = sum_h W_h p_h``, ``v = sum_h W_h^2 (1 - f_h) p_h (1 - p_h) / (n_h - 1)``, ``W_h = N_h / N``,
    ``f_h = n_h / N_h``; the interval is Wilson's at the effective size ``p (1 - p) / v``.
    Strata with a single answer count with the variance of a stratum of two."""
    c = np.asarray(correct, dtype=np.float64)
    s = np.asarray(stratum)
    Nh_per = np.asarray(stratum_size, dtype=np.float64)
    if c.ndim != 1 or s.shape != c.shape or Nh_per.shape != c.shape:
        raise QualityInputError("correct, stratum and stratum_size must be 1-D of one length")
    if c.size == 0:
        return Estimate(float("nan"), 0.0, 1.0, "none", 0, note="no audited window answered yet")
    strata = np.unique(s)
    Nh = np.array([Nh_per[s == h][0] for h in strata])
    N = Nh.sum()
    p = v = 0.0
    for h, Nhh in zip(strata, Nh):
        ch = c[s == h]
        nh = ch.size
        ph = ch.mean()
        Wh = Nhh / N
        p += Wh * ph
        fh = min(1.0, nh / Nhh)
        v += Wh * Wh * (1 - fh) * ph * (1 - ph) / max(nh - 1, 1)
    n = c.size
    n_eff = p * (1 - p) / v if v > 0 else float(n)
    n_eff = float(min(max(n_eff, 1.0), 10 * n))
    low, high = _wilson_p(p, n_eff, _z(level))
    return Estimate(float(p), low, high, "audit", int(n), level=level,
                    note=f"audit: {n} window(s) drawn at random within {strata.size} confidence "
                         "band(s), answered blind; unbiased for the proposals at the draw",
                    details={"strata": int(strata.size), "effective_n": round(n_eff, 1)})
