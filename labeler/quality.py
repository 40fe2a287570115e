"""How good are the proposed labels? Building blocks of estimates that say what they rest on.

Pure numerics, no storage, no display. The estimate the project reports is assembled in
:mod:`labeler.estimate` (time-blocked cross-validation, calibration, weighted and stratified
answers); this module keeps the estimate record, intervals, the calibration error and the plain
estimators below.

Two sources of evidence:

- **Audit** (:func:`audit_accuracy`, for draws made without confidence bands): a uniformly random sample of proposed, unconfirmed windows
  (:func:`draw_audit`), which the annotator then labels. The share whose proposal matched is an
  unbiased estimate of the accuracy of the proposals at the time of the draw, with a Wilson score
  interval (Wilson, "Probable inference, the law of succession, and statistical inference", 1927).
  Confirmations made after the draw usually improve the proposals, so an old audit tends to
  understate the current accuracy; the estimate says how many windows and which run it rests on.
- **Cross-validation on the confirmed windows** (:func:`cross_validated_accuracy`): hide one fold
  of the confirmed windows, spread the others, score the hidden fold. It costs the annotator
  nothing but is biased: confirmed windows are not a random sample. Windows picked from the review
  queue are the hard ones (uncertain, unexplored), which makes it pessimistic; windows picked where
  the map looks clear, or next to each other in time, make it optimistic (random folds put
  overlapping windows on both sides). Kept as the naive baseline the benchmark compares with; the
  project reports :func:`labeler.estimate.proposal_accuracy` instead.

Calibration of the confidence on audited windows: expected calibration error with equal-width bins
(Naeini, Cooper & Hauskrecht, "Obtaining well calibrated probabilities using Bayesian binning", 2015;
Guo, Pleiss, Sun & Weinberger, "On calibration of modern neural networks", 2017):
``ECE = sum_m |B_m| / n * |acc(B_m) - conf(B_m)|`` over bins ``B_m = ((m-1)/M, m/M]``.

Proposed labels are suggestions. Where labels feed clinical or safety decisions a qualified person
reviews them, and local rules and licensed practice come first.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from labeler.errors import InputError

from labeler.deferred import numpy_when_used

np = numpy_when_used(globals())

CV_NOTE = ("cross-validation on confirmed windows: biased, since confirmed windows are not a random "
           "sample (queue picks are harder than average, windows picked on the map or next to "
           "each other easier); draw an audit for an unbiased estimate")
AUDIT_NOTE = ("audit: uniformly random sample of proposed windows, labeled by the annotator; "
              "unbiased for the proposals at the time of the draw")


class QualityInputError(InputError, ValueError):
    """Bad input to a quality estimate (also a ValueError)."""


@dataclass
class Estimate:
    """An accuracy estimate and what it rests on.

    value, low, high: point estimate and interval (``level``, default 95 %), as fractions.
    basis: "audit", "cross-validation" or "none"; n: number of windows it rests on.
    scope: what the accuracy is of ("proposed windows" or "training set").
    ece: expected calibration error of the confidence (audit only), else None.
    note: one line on what the figure means and its known bias.
    """

    value: float
    low: float
    high: float
    basis: str
    n: int
    scope: str = "proposed windows"
    level: float = 0.95
    ece: float | None = None
    note: str = ""
    details: dict = field(default_factory=dict)

    def as_dict(self) -> dict:
        return {"value": self.value, "low": self.low, "high": self.high, "basis": self.basis,
                "n": self.n, "scope": self.scope, "level": self.level, "ece": self.ece,
                "note": self.note, **({"details": self.details} if self.details else {})}


def wilson_interval(k: int, n: int, level: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for k successes in n trials (Wilson 1927).

    ``(p + z^2/2n +- z sqrt(p(1-p)/n + z^2/4n^2)) / (1 + z^2/n)``, z the two-sided normal quantile.
    """
    if int(n) != n or n < 1:
        raise QualityInputError(f"n must be a whole number >= 1, got {n}")
    if int(k) != k or not 0 <= k <= n:
        raise QualityInputError(f"k must be a whole number in [0, n={n}], got {k}")
    if not 0 < level < 1:
        raise QualityInputError(f"level must lie strictly between 0 and 1, got {level}")
    from scipy.stats import norm  # imported here: scipy.stats alone slows every command's start

    z = float(norm.ppf(0.5 + level / 2))
    p = k / n
    denom = 1 + z * z / n
    center = (p + z * z / (2 * n)) / denom
    half = z * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / denom
    return float(max(0.0, center - half)), float(min(1.0, center + half))


def expected_calibration_error(confidence, correct, n_bins: int = 10) -> float:
    """ECE with ``n_bins`` equal-width bins ((m-1)/M, m/M]; a confidence of 0 falls in the first."""
    conf = np.asarray(confidence, dtype=np.float64)
    ok = np.asarray(correct, dtype=np.float64)
    if conf.shape != ok.shape or conf.ndim != 1:
        raise QualityInputError(f"confidence and correct must be 1-D of one length, got {conf.shape} and {ok.shape}")
    if conf.size == 0:
        raise QualityInputError("no window to compute the calibration error on")
    if np.any((conf < 0) | (conf > 1)) or not np.all(np.isfinite(conf)):
        bad = int(np.flatnonzero(~((conf >= 0) & (conf <= 1)))[0])
        raise QualityInputError(f"confidence[{bad}] = {conf[bad]} is outside [0, 1]")
    if int(n_bins) != n_bins or n_bins < 1:
        raise QualityInputError(f"n_bins must be a whole number >= 1, got {n_bins}")
    b = np.clip(np.ceil(conf * n_bins).astype(np.int64) - 1, 0, n_bins - 1)
    ece = 0.0
    for m in range(n_bins):
        sel = b == m
        if sel.any():
            ece += sel.sum() / conf.size * abs(ok[sel].mean() - conf[sel].mean())
    return float(ece)


def draw_audit(candidate_mask, n: int, random_state=None) -> np.ndarray:
    """Uniformly random sample (without replacement) of ``n`` windows among ``candidate_mask``.

    Candidates are the windows with a proposal and no confirmation. Returns sorted indices; fewer
    than n when fewer candidates exist.
    """
    cand = np.flatnonzero(np.asarray(candidate_mask, dtype=bool))
    if int(n) != n or n < 1:
        raise QualityInputError(f"audit size must be a whole number >= 1, got {n}")
    rng = np.random.default_rng(random_state)
    k = min(int(n), cand.size)
    return np.sort(rng.choice(cand, size=k, replace=False)) if k else cand


def audit_accuracy(proposed, answered, confidence=None, level: float = 0.95,
                   n_bins: int = 10) -> Estimate:
    """Accuracy of proposals on audited windows: ``proposed`` (label at draw time) vs ``answered``.

    ``confidence`` (the proposal's confidence at draw time) adds the expected calibration error.
    """
    p = np.asarray(proposed)
    a = np.asarray(answered)
    if p.shape != a.shape or p.ndim != 1:
        raise QualityInputError(f"proposed and answered must be 1-D of one length, got {p.shape} and {a.shape}")
    n = int(p.size)
    if n == 0:
        return Estimate(float("nan"), 0.0, 1.0, "none", 0, note="no audited window answered yet")
    ok = p == a
    k = int(ok.sum())
    low, high = wilson_interval(k, n, level)
    ece = None if confidence is None else expected_calibration_error(confidence, ok, n_bins)
    return Estimate(k / n, low, high, "audit", n, level=level, ece=ece, note=AUDIT_NOTE)


def cross_validated_accuracy(graph, y, *, n_folds: int = 5, random_state=0, spreader=None,
                             level: float = 0.95) -> Estimate:
    """Hide each fold of the confirmed windows in turn, spread the rest, score the hidden fold.

    Folds are stratified by class where a class has enough confirmations. A hidden window of a
    class with no remaining confirmation counts as wrong (the proposals could not have found it).
    The interval is the Wilson interval of the pooled hits, a rough guide: folds are not
    independent and confirmed windows are not a random sample (see the module docstring).
    """
    from sklearn.base import clone

    from labeler.spreading import LabelSpreader

    y = np.asarray(y).astype(np.int64)
    lab = np.flatnonzero(y >= 0)
    if int(n_folds) != n_folds or n_folds < 2:
        raise QualityInputError(f"n_folds must be a whole number >= 2, got {n_folds}")
    if lab.size < 2 or np.unique(y[lab]).size < 2:
        return Estimate(float("nan"), 0.0, 1.0, "none", int(lab.size),
                        note="cross-validation needs confirmed windows of at least two classes")
    rng = np.random.default_rng(random_state)
    fold = np.empty(lab.size, dtype=np.int64)
    # stratified: shuffle within each class, deal out round robin from a random offset
    offset = 0
    for c in np.unique(y[lab]):
        members = np.flatnonzero(y[lab] == c)
        rng.shuffle(members)
        fold[members] = (np.arange(members.size) + offset) % n_folds
        offset += members.size
    k_folds = min(int(n_folds), lab.size)
    fold %= k_folds
    base = spreader if spreader is not None else LabelSpreader()
    hits = 0
    total = 0
    for f in range(k_folds):
        hide = lab[fold == f]
        if hide.size == 0:
            continue
        y_tr = y.copy()
        y_tr[hide] = -1
        if not (y_tr >= 0).any():
            continue
        m = clone(base)
        m.fit(graph, y_tr)
        hits += int((m.transduction_[hide] == y[hide]).sum())
        total += int(hide.size)
    if total == 0:
        return Estimate(float("nan"), 0.0, 1.0, "none", 0, note="no fold could be scored")
    low, high = wilson_interval(hits, total, level)
    return Estimate(hits / total, low, high, "cross-validation", total, level=level, note=CV_NOTE,
                    details={"folds": k_folds})


def training_set_estimate(est: Estimate, n_confirmed: int, n_proposed: int) -> Estimate:
    """Accuracy of the exported set (confirmed windows count as right, proposals at ``est``)."""
    total = n_confirmed + n_proposed
    if total == 0:
        raise QualityInputError("the training set is empty")
    if est.basis == "none":
        return Estimate(float("nan"), n_confirmed / total, 1.0, "none", est.n, scope="training set",
                        note=est.note)
    w = n_proposed / total
    conf = n_confirmed / total
    return Estimate(conf + w * est.value, conf + w * est.low, conf + w * est.high, est.basis, est.n,
                    scope="training set", level=est.level, ece=est.ece,
                    note=est.note + "; confirmed windows counted as right")


def normal_quantile(level: float) -> float:
    """z such that a standard normal lies within +-z with probability ``level``
    (``statistics.NormalDist``: no scipy.stats import on the way to a stored figure)."""
    if not 0 < level < 1:
        raise QualityInputError(f"level must lie strictly between 0 and 1, got {level}")
    from statistics import NormalDist

    return float(NormalDist().inv_cdf(0.5 + level / 2))


def calibrate(confidence, calibration: dict) -> np.ndarray:
    """Apply a stored calibration (:meth:`ConfidenceCalibrator.as_dict`) to confidences."""
    xs = np.asarray(calibration["confidence"], dtype=np.float64)
    ys = np.asarray(calibration["probability"], dtype=np.float64)
    if xs.size == 0 or xs.shape != ys.shape:
        raise QualityInputError("calibration must list confidences and probabilities of one length")
    return np.interp(np.asarray(confidence, dtype=np.float64), xs, ys)


#: A figure whose interval is wider than this, resting on no audit, comes with the advice to answer
#: a blind audit of about 30 windows (:func:`audit_would_narrow`). Queue answers weigh by their
#: inverse chance of being drawn (0.0003-20 in the simulated crew), so cross-validation on them is
#: honest but can span most of [0, 1] (measured with benchmarks/estimate_orderings.py on the crew
#: at 50 queue answers: intervals 0.15-0.97); a stratified audit of 30 spans about 0.1-0.25.
WIDE_INTERVAL = 0.25


def audit_would_narrow(est: Estimate) -> bool:
    """True when ``est`` has a figure resting on no audit and an interval wider than
    :data:`WIDE_INTERVAL`: answering a blind audit of about 30 windows would narrow it."""
    return (est.basis != "none" and "audit" not in est.basis
            and float(est.high) - float(est.low) > WIDE_INTERVAL)


def with_audit(cross_validation: Estimate, audit: Estimate | None, *, level: float = 0.95) -> Estimate:
    """The headline from cross-validation and an answered audit scored on other windows: the
    audit alone where cross-validation has no figure, both joined by :func:`combine` where it has
    one, cross-validation alone without an audit."""
    if audit is None or audit.basis == "none":
        return cross_validation
    if cross_validation.basis == "none":
        return audit
    return combine([cross_validation, audit], level=level)


def combine(estimates, *, level: float = 0.95) -> Estimate:
    """One headline from independent estimates of one accuracy: inverse-variance weights, the
    variance of each read off its interval (half-width / z). The note lists the sources."""
    z = normal_quantile(level)
    ok = [e for e in estimates if e is not None and e.basis != "none" and np.isfinite(e.value)]
    if not ok:
        notes = [e.note for e in estimates if e is not None and e.note]
        return Estimate(float("nan"), 0.0, 1.0, "none", 0,
                        note=notes[0] if notes else "no estimate yet: confirm windows of two classes")
    if len(ok) == 1:
        return ok[0]
    var = np.array([max(((e.high - e.low) / (2 * z)) ** 2, 1e-6) for e in ok])
    w = (1 / var) / (1 / var).sum()
    value = float(np.dot(w, [e.value for e in ok]))
    half = z * float(np.sqrt(1 / (1 / var).sum()))
    parts = [f"{e.basis} {e.value:.3f} on {e.n} window(s) (weight {wi:.2f}): {e.note}"
             for e, wi in zip(ok, w)]
    return Estimate(value, max(0.0, value - half), min(1.0, value + half),
                    " + ".join(e.basis for e in ok), int(sum(e.n for e in ok)), level=level,
                    ece=next((e.ece for e in ok if e.ece is not None), None),
                    note="combined by inverse-variance weights: " + "; ".join(parts),
                    details={"sources": [e.as_dict() for e in ok]})
