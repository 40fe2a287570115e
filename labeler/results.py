"""What `Project`'s use cases hand back: small typed records, the same for the CLI, the app and
the Python API.

Writes of labels return a :class:`LabelBatch` naming the windows whose labels it set, so a caller
that shows per-window arrays patches those rows instead of reading every label again.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass, field
from typing import Any

from labeler.quality import Estimate

from labeler.deferred import numpy_when_used

np = numpy_when_used(globals())


@dataclass(frozen=True)
class LabelBatch:
    """One user action on labels: a batch of events (confirm, withdraw, undo, merge, import).

    ``batch_id`` is None when the action had nothing to change (merging a class no window
    carried). ``window_ids``: the windows the batch wrote an event for, sorted, without repeats;
    ``n_events``: how many events (a window counts once per annotator whose label changed).
    ``undoes``: the batch an undo reverted.
    """
    batch_id: str | None
    action: str
    window_ids: np.ndarray
    n_events: int = 0
    undoes: str | None = None

    @property
    def n_windows(self) -> int:
        return int(self.window_ids.size)


def label_batch(batch_id: str | None, action: str, changes, *,
                undoes: str | None = None) -> LabelBatch:
    """A :class:`LabelBatch` from the (window id, class id) changes a batch wrote."""
    ids = np.unique(np.asarray([int(w) for w, _ in changes], dtype=np.int64))
    return LabelBatch(batch_id, action, ids, len(changes), undoes)


@dataclass(frozen=True)
class MapRun:
    """A stored map: a fit of every window, or new windows placed into an earlier map."""
    run_id: int
    method: str
    n_windows: int
    n_fitted: int
    n_placed: int
    seconds: float | None = None
    placed_into_run: int | None = None
    placed_recordings: tuple[int, ...] = ()


@dataclass(frozen=True)
class ProposalRun:
    """One label-spreading run over the window graph and its summary."""
    run_id: int
    confirmed: int
    windows: int
    classes: dict[str, int]        # confirmed windows per class at the run
    proposed: int
    mean_confidence: float | None  # over proposed windows; None when every window is confirmed
    low_support: int               # proposed windows that little label mass reached
    conflicts: int                 # confirmed windows whose neighbourhood disagrees
    iterations: int
    warm_start: bool
    graph_rebuilt: bool
    graph_edges: int
    seconds: float

    def as_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class ReviewDraw:
    """A review queue drawn and not shown yet: its rows (as :meth:`Project.review_queue` gives
    them with ``as_frame=False``), the random draws among them as (window_id, probability, pool),
    the proposal run it was drawn from and the state of the project it was drawn in (``mark``).
    The draws are kept for the accuracy estimate only when the queue is shown
    (:meth:`Project.show_review_draw`), and only while the project is still in that state."""
    rows: tuple[dict, ...]
    draws: tuple[tuple[int, float, int], ...]
    run_id: int | None
    mark: str

    def as_dict(self) -> dict[str, Any]:
        return {"rows": [dict(r) for r in self.rows], "draws": [list(d) for d in self.draws],
                "run_id": self.run_id, "mark": self.mark}

    @classmethod
    def from_dict(cls, d: dict) -> "ReviewDraw":
        return cls(rows=tuple(dict(r) for r in d["rows"]),
                   draws=tuple((int(w), float(q), int(m)) for w, q, m in d["draws"]),
                   run_id=None if d.get("run_id") is None else int(d["run_id"]),
                   mark=str(d["mark"]))


@dataclass
class AccuracyReport:
    """How accurate the latest proposals are and what that rests on.

    ``estimate``: of the proposed windows (see :mod:`labeler.estimate`); ``training_set``: the
    same for the exported set, confirmed windows counted as right (None when there is nothing to
    export); ``run_id``: the proposal run it is about; ``audit_runs``: the runs an audit drew from.
    ``calibration``: the map from the spreading's confidence to the probability that a proposal
    is right (``confidence`` and ``probability`` knots, see :func:`labeler.estimate.calibrate`),
    None without a figure; ``expected_wrong``: proposed windows expected to be wrong (sum of one
    minus the calibrated confidence); ``likely_wrong``: proposed windows more likely wrong than
    right; ``needs_audit``: there is no figure, and a blind audit (about 30 answers) would give
    one; ``audit_advised``: there is a figure, resting on no audit, whose interval is wide
    (:func:`labeler.quality.audit_would_narrow`), and a blind audit would narrow it. Cross-validation is computed once per proposal run and stored with it; the answered audit
    joins when the report is asked for.
    """
    run_id: int
    estimate: Estimate
    training_set: Estimate | None = None
    audit_runs: tuple[int, ...] = ()
    calibration: dict | None = None
    expected_wrong: float | None = None
    likely_wrong: int | None = None
    needs_audit: bool = False
    audit_advised: bool = False

    @classmethod
    def from_dict(cls, d: dict) -> "AccuracyReport":
        """The inverse of :meth:`as_dict` (as stored with the run)."""
        fields = ("value", "low", "high", "basis", "n", "scope", "level", "ece", "note")
        def est(e):
            kw = {k: e.get(k) for k in fields}
            for k in ("value", "low", "high"):
                kw[k] = float("nan") if kw[k] is None else float(kw[k])
            return Estimate(**kw, details=e.get("details") or {})
        return cls(run_id=int(d["run_id"]), estimate=est(d),
                   training_set=est(d["training_set"]) if d.get("training_set") else None,
                   audit_runs=tuple(d.get("audit_runs") or ()), calibration=d.get("calibration"),
                   expected_wrong=d.get("expected_wrong"), likely_wrong=d.get("likely_wrong"),
                   needs_audit=bool(d.get("needs_audit", False)),
                   audit_advised=bool(d.get("audit_advised", False)))

    @property
    def value(self) -> float | None:
        return _finite(self.estimate.value)

    @property
    def low(self) -> float | None:
        return _finite(self.estimate.low)

    @property
    def high(self) -> float | None:
        return _finite(self.estimate.high)

    @property
    def basis(self) -> str:
        return self.estimate.basis

    @property
    def n(self) -> int:
        return self.estimate.n

    @property
    def level(self) -> float:
        return self.estimate.level

    @property
    def note(self) -> str:
        return self.estimate.note

    @property
    def ece(self) -> float | None:
        return self.estimate.ece

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready (the export manifest): the estimate's fields, non-finite values as None,
        the training-set estimate and the run."""
        out = self.estimate.as_dict()
        for k in ("value", "low", "high"):
            out[k] = _finite(out[k])
        if self.training_set is not None:
            out["training_set"] = self.training_set.as_dict()
            for k in ("value", "low", "high"):
                out["training_set"][k] = _finite(out["training_set"][k])
        out["run_id"] = self.run_id
        out["audit_runs"] = list(self.audit_runs)
        out["calibration"] = self.calibration
        out["expected_wrong"] = self.expected_wrong
        out["likely_wrong"] = self.likely_wrong
        out["needs_audit"] = self.needs_audit
        out["audit_advised"] = self.audit_advised
        return out


def _finite(v) -> float | None:
    return float(v) if v is not None and np.isfinite(v) else None


@dataclass(frozen=True)
class ImportRow:
    row: int
    recording: str
    label: str
    windows: int


@dataclass
class ImportReport:
    """What an interval import did (or, on a dry run, would do)."""
    intervals: int
    windows: int                 # (window, annotator) labels the file sets
    changes: int                 # ... of them that change a label
    relabels: int                # ... of those that replace another label
    new_classes: list[str]
    rows: list[ImportRow]
    annotators: list[str]
    dry_run: bool
    batches: list[LabelBatch] = field(default_factory=list)

    @property
    def window_ids(self) -> np.ndarray:
        """Windows whose labels the import wrote (empty on a dry run)."""
        if not self.batches:
            return np.empty(0, np.int64)
        return np.unique(np.concatenate([b.window_ids for b in self.batches]))


@dataclass(frozen=True)
class RemovedRecording:
    """A recording taken out of a project: its windows' labels stay in the history."""
    id: int
    name: str
    windows: int                 # windows it had
    confirmed: int               # of them with a current label (kept, no longer used)


@dataclass
class ExportReport:
    """Files an export wrote, their row counts and the manifest as written."""
    files: dict[str, str]        # kind (windows, segments, manifest) -> path
    windows: int
    segments: int
    manifest: dict[str, Any]


@dataclass(frozen=True)
class ClassCount:
    """How many windows carry a class as their current label."""
    name: str
    confirmed: int
    retired: bool


@dataclass(frozen=True)
class RecordingSummary:
    """One recording in a project's status: its name, length, rate, start and wearer."""
    name: str
    n_samples: int
    rate: float
    start_time: str | None       # ISO-8601 UTC, or None when the clock time is unknown
    person: str | None

    @property
    def minutes(self) -> float:
        return self.n_samples / self.rate / 60


@dataclass
class ProjectStatus:
    """What is in a project: recordings, windows, settings, classes and confirmations."""
    path: str
    annotator: str
    recordings: int
    hours: float
    windows: int
    window_length_s: float
    window_step_s: float
    feature_set_version: str
    classes: list[str]           # active classes
    confirmed: int               # windows with a current label
    annotators: list[str]        # who set the current labels
    counts: list[ClassCount]     # every class, retired ones included
    recording_list: list[RecordingSummary] = field(default_factory=list)
