"""`Project`: the one service layer under the CLI and the app.

A project is one SQLite file (see :mod:`storage.store`). `Project` is a thin facade: every use case
is a method here, carried out by one of the rooms in :mod:`labeler.service` (recordings and windows,
classes and labels, maps, proposals, audits, export). It holds no user interface and no SQL.
"""

from __future__ import annotations

import functools
import os
from typing import TYPE_CHECKING, Iterable, Sequence

import labeler
from labeler.errors import ProjectError
from labeler.results import (AccuracyReport, ExportReport, ImportReport, LabelBatch, MapRun,
                             ProjectStatus, ProposalRun, RemovedRecording, ReviewDraw)
from labeler.service.audits import Audits
from labeler.service.catalog import CHUNK_SECONDS, AddedRecording, Catalog
from labeler.service.context import Context, Progress, default_annotator
from labeler.service.ledger import PALETTE, SOURCES, Ledger
from labeler.service.maps import Maps
from labeler.service.proposals import Proposals
from labeler.windows import DEFAULT_LENGTH_S, DEFAULT_STEP_S, check_window_settings
from storage import Store, StoreError

if TYPE_CHECKING:  # pandas is imported by the use cases that hand back tables, when called
    import pandas as pd

    from labeler.preparing import PreparedRecording
    from labeler.recordings import Recording
    from labeler.service.export import Exporter

from labeler.deferred import numpy_when_used

np = numpy_when_used(globals())

__all__ = ["Project", "AddedRecording", "PALETTE", "SOURCES", "CHUNK_SECONDS", "Progress",
           "default_annotator"]


class Project:
    """An open project file.

    >>> p = Project.create("shift.labeler")                          # doctest: +SKIP
    >>> p.add_recordings(["picker01.csv"])                           # doctest: +SKIP
    >>> p.confirm([12, 13, 14], "walking")                           # doctest: +SKIP
    """

    def __init__(self, store: Store, annotator: str | None = None):
        self._ctx = Context(store, annotator)
        self.store = store
        self.path = store.path
        self.annotator = self._ctx.annotator
        self._catalog = Catalog(self._ctx)
        self._ledger = Ledger(self._ctx, self._catalog)
        self._maps = Maps(self._ctx, self._catalog)
        self._proposals = Proposals(self._ctx, self._catalog, self._ledger)
        self._audits = Audits(self._ctx, self._catalog, self._ledger, self._proposals)

    @functools.cached_property
    def _exporter(self) -> "Exporter":
        from labeler.service.export import Exporter

        return Exporter(self._ctx, self._catalog, self._ledger, self._proposals, self._audits)

    # ------------------------------------------------------------------ create / open
    @classmethod
    def create(cls, path: str | os.PathLike, *, window_length_s: float = DEFAULT_LENGTH_S,
               window_step_s: float = DEFAULT_STEP_S, annotator: str | None = None) -> "Project":
        from labeler import features as _features

        window_length_s, window_step_s = check_window_settings(window_length_s, window_step_s)
        settings = {"window_length_s": window_length_s, "window_step_s": window_step_s,
                    "feature_set_version": _features.FEATURE_SET_VERSION}
        return cls._with_store(lambda: Store.create(path, settings, tool_version=labeler.__version__),
                               annotator)

    @classmethod
    def open(cls, path: str | os.PathLike, *, annotator: str | None = None,
             readonly: bool = False) -> "Project":
        return cls._with_store(lambda: Store.open(path, readonly=readonly), annotator)

    @classmethod
    def _with_store(cls, make_store, annotator: str | None) -> "Project":
        try:
            store = make_store()
        except StoreError as exc:
            raise ProjectError(str(exc)) from None
        try:
            return cls(store, annotator)
        except BaseException:  # e.g. a bad annotator name: leave the file closed and as it was
            store.close()
            raise

    def close(self) -> None:
        self.store.close()

    def __enter__(self) -> "Project":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def checkpoint(self) -> bool:
        """Copy into the project file what the latest proposal run left in its write-ahead log
        (the run's commit does not wait for that copy; it is as durable without it). Call it
        when idle, e.g. once the proposals are shown; without it the next write copies it. True
        when there was something to copy."""
        return self.store.checkpoint()

    def reread(self) -> None:
        """Forget what this object has read from the file (windows, features, map, graph,
        proposals), so that the next call reads what other processes have written since. The
        window graph and what is made from it are kept with the key of what they were made from
        (recordings, feature set, window count, graph settings; the proposer also with its run)
        and used again only while the file still matches it."""
        self._ctx.reread()

    # ------------------------------------------------------------------ settings
    @property
    def window_length_s(self) -> float:
        return self._catalog.window_length_s

    @property
    def window_step_s(self) -> float:
        return self._catalog.window_step_s

    @property
    def feature_set_version(self) -> str:
        return self._catalog.feature_set_version

    # ------------------------------------------------------------------ recordings
    def add_recordings(self, paths: Sequence[str | os.PathLike], *,
                       progress: Progress | None = None, dry_run: bool = False,
                       person: str | None = None, **read_options) -> list[AddedRecording]:
        """Read, check and add recording files; all of them or none (one transaction).

        ``read_options`` go to :func:`labeler.recordings.read_recording` (rate, time_column,
        time_unit, time_format, tz, columns, skip_rows, acc_unit, gyr_unit; see
        :class:`labeler.profiles.ReadOptions`). Every file is read and checked before anything is
        written, so a bad file leaves the project as it was; ``dry_run`` stops there. ``person``
        says who wore the sensors (exported for grouped splits).

        A project holds one channel set: a recording that lacks some of the project's channels is
        refused; one with more keeps the project's (the rest left out, noted); columns in another
        order are put in the project's.
        """
        recs = self._catalog.read_files(paths, progress=progress, **read_options)
        return self._add(recs, progress, 0.5, dry_run, person)

    def add_recording_data(self, recordings: Sequence[Recording], *,
                           progress: Progress | None = None,
                           person: str | None = None) -> list[AddedRecording]:
        """Add already-read recordings (from :func:`read_recording` or a simulator)."""
        return self._add(recordings, progress, 0.0, person=person)

    def _add(self, recordings, progress, offset, dry_run=False, person=None
             ) -> list[AddedRecording]:
        added = self._catalog.add(recordings, progress=progress, offset=offset, dry_run=dry_run,
                                  person=person)
        if not dry_run:  # a project with a map keeps every window on it
            self._maps.place_new([a.id for a in added])
        return added

    def add_prepared(self, prepared: Sequence[PreparedRecording], *,
                     place_in_map: bool = True) -> list[AddedRecording]:
        """Store recordings prepared elsewhere (:func:`labeler.preparing.prepare_recording`, e.g.
        on workers) in one transaction: all of them or none. ``place_in_map=False`` leaves placing
        their windows into the map to :meth:`place_new_windows` (once after many single adds)."""
        added = self._catalog.add_prepared(prepared)
        if place_in_map:
            self.place_new_windows([a.id for a in added])
        return added

    def place_new_windows(self, recording_ids: Sequence[int] = ()) -> None:
        """Place windows missing from the latest map into it (after adds without placing)."""
        self._maps.place_new([int(r) for r in recording_ids])

    def refuse_own_file(self, path: str | os.PathLike) -> None:
        """InputError when ``path`` is this project's own file (or its -wal/-shm)."""
        self._ctx.refuse_own_file(path)

    def add_many(self, sources: Sequence[str | os.PathLike], *, workers: int | None = None,
                 scheduler: str | None = None, backend: str = "auto", all_or_none: bool = False,
                 progress: Progress | None = None, **read_options):
        """Add the recording files of ``sources`` (files, globs, folders) with one task per file
        on workers (a Dask LocalCluster, the cluster at ``scheduler``, or local processes), one
        transaction per file; refused files are reported and the rest go on unless
        ``all_or_none``. Returns a :class:`labeler.study.ingest.IngestReport`."""
        from labeler.study.ingest import ingest

        return ingest(self, sources, read_options=read_options, all_or_none=all_or_none,
                      progress=progress, workers=workers, scheduler=scheduler, backend=backend)

    def apply_to_study(self, sources: Sequence[str | os.PathLike], out: str | os.PathLike, *,
                       workers: int | None = None, scheduler: str | None = None,
                       backend: str = "auto", include_proposed: bool = False,
                       min_confidence: float = 0.9, fmt: str = "csv", overwrite: bool = False,
                       random_state: int = 0, progress: Progress | None = None, **read_options):
        """Train a calibrated model on this project's labeled windows and label every recording
        of ``sources`` the project lacks, writing windows, segments and a manifest to ``out``.
        Returns a :class:`labeler.study.apply.StudyReport`."""
        from labeler.study.apply import apply_to_study

        return apply_to_study(self, sources, out, include_proposed=include_proposed,
                              min_confidence=min_confidence, read_options=read_options, fmt=fmt,
                              overwrite=overwrite, random_state=random_state, progress=progress,
                              workers=workers, scheduler=scheduler, backend=backend)


    def recordings(self, include_removed: bool = False) -> pd.DataFrame:
        """The recordings: id, name, source_path, content_hash, rate, channels, units, n_samples,
        start_time, added_at, added_by, repairs, window_length, window_step, person (and, with
        ``include_removed``, removed ones with removed_at and removed_by)."""
        return self._catalog.recordings(include_removed)

    def remove_recording(self, recording: str | int) -> RemovedRecording:
        """Take a recording out of the project, in one transaction.

        Its signal and features are deleted from the file (overwritten; backups made before keep
        them). Its windows stay, marked removed, so the label history keeps every event, naming
        them. From then on its windows and their labels are out of everything else: windows,
        features, labels, proposals, the review queue, audits, the accuracy estimate, the map and
        exports; proposals already made for other windows stay until the next proposal run, which
        spreads without it. A file of the same content may be added again under another name.
        """
        rid = self._catalog.recording_id(recording)
        w = self._catalog.windows()
        mine = w.loc[w["recording_id"] == rid, "id"]
        confirmed = int(self._ledger.labels()["window_id"].isin(mine).sum())
        return self._catalog.remove(rid, confirmed)

    def window_names(self, window_ids: Iterable[int] | None = None) -> pd.Series | dict[int, str]:
        """"<recording>#<number>" of every window, those of removed recordings marked
        " (removed)", indexed by window id (what the label history names). Given ``window_ids``:
        a dict of just those windows (ids of no window left out), read without the rest."""
        if window_ids is None:
            return self._catalog.window_names()
        return self._catalog.names_of(window_ids)

    def set_person(self, recording: str | int, person: str | None) -> None:
        """Who wore the sensor of a recording (None: unknown); exported for grouped splits."""
        self._catalog.set_person(recording, person)

    def recording_id(self, name_or_id: str | int) -> int:
        return self._catalog.recording_id(name_or_id)

    def signal(self, recording: str | int, start_s: float | None = None,
               stop_s: float | None = None) -> tuple[np.ndarray, np.ndarray, list[str]]:
        """(time in s, signal (n, channels) float32 with NaN in gaps, channel names) of a span."""
        return self._catalog.signal(recording, start_s, stop_s)

    # ------------------------------------------------------------------ windows and features
    def windows(self) -> pd.DataFrame:
        """All windows: id, recording_id, recording, seq, start_sample, stop_sample, start_s, stop_s;
        ordered by id, which is also the row order of :meth:`features` and every per-window array."""
        return self._catalog.windows()

    @property
    def n_windows(self) -> int:
        return self._catalog.n_windows()

    def features(self) -> tuple[np.ndarray, list[str]]:
        """(X float32 (n_windows, n_features), names), rows in window-id order."""
        return self._catalog.features()

    def window_ids_in_span(self, recording: str | int, start_s: float, end_s: float,
                           rule: str = "majority") -> np.ndarray:
        """Windows of a recording inside [start_s, end_s] (rule: majority, inside or touch)."""
        return self._catalog.window_ids_in_span(recording, start_s, end_s, rule)

    # ------------------------------------------------------------------ map
    def compute_map(self, method: str = "pca", *, progress: Progress | None = None,
                    random_state: int = 0, n_jobs: int = 1, **params) -> MapRun:
        """Fit a map of every window ("pca" or "tsne") and store it as a run."""
        return self._maps.compute(method, progress=progress, random_state=random_state,
                                  n_jobs=n_jobs, **params)

    def change_mark(self) -> tuple[int, ...]:
        """A cheap mark that differs from an earlier one exactly when labels, classes or recordings
        changed since, in this process or another (an open page polls it every few seconds)."""
        return self.store.change_mark()

    def map_run_id(self) -> int | None:
        """Id of the run that made the latest map, or None when there is no map yet."""
        return self._maps.run_id()

    def map_method(self) -> str | None:
        """How the latest map was made ("pca" or "tsne"), or None when there is no map yet."""
        return self._maps.method()

    def map(self) -> pd.DataFrame:
        """Latest map: columns window_id, x, y (windows added since, if any, are placed)."""
        return self._maps.coordinates()

    # ------------------------------------------------------------------ classes
    def classes(self, include_retired: bool = True) -> pd.DataFrame:
        return self._ledger.classes(include_retired)

    def active_classes(self) -> list[str]:
        return self._ledger.active_classes()

    def add_class(self, name: str, colour: str | None = None) -> int:
        return self._ledger.add_class(name, colour)

    def class_id(self, name: str, *, create: bool = False, allow_retired: bool = False) -> int:
        return self._ledger.class_id(name, create=create, allow_retired=allow_retired)

    def class_name(self, class_id: int) -> str:
        return self._ledger.class_name(class_id)

    def rename_class(self, old: str, new: str) -> None:
        self._ledger.rename_class(old, new)

    def recolour_class(self, name: str, colour: str) -> None:
        """Give a class (active or retired) another #RRGGBB colour."""
        self._ledger.recolour_class(name, colour)

    def retire_class(self, name: str) -> None:
        self._ledger.retire_class(name)

    def merge_classes(self, source: str, target: str) -> LabelBatch:
        """Move every label of ``source`` to ``target`` (one batch), then retire ``source``
        (``batch_id`` None when no window carried the class)."""
        return self._ledger.merge_classes(source, target)

    # ------------------------------------------------------------------ labels
    def confirm(self, window_ids: Iterable[int], class_name: str, *, source: str = "api",
                note: str | None = None, create_class: bool = False) -> LabelBatch:
        """Confirm windows as one class: one batch of events."""
        return self._ledger.confirm(window_ids, class_name, source=source, note=note,
                                    create_class=create_class)

    def answer(self, window_ids: Iterable[int], answer: str, *, source: str = "api",
               note: str | None = None) -> LabelBatch:
        """Answer windows "mixed" (they span activities) or "unsure" (cannot tell): one batch
        of events, undone like any other. Such windows leave the review queue, proposals do not
        learn from them and the training set leaves them out (see :mod:`labeler.answers`)."""
        return self._ledger.answer(window_ids, answer, source=source, note=note)

    def answered(self) -> np.ndarray:
        """Ids of the windows whose current label is an answer (mixed, not sure)."""
        return self._ledger.answered()

    def withdraw(self, window_ids: Iterable[int], *, source: str = "api",
                 note: str | None = None) -> LabelBatch:
        """Withdraw this annotator's labels of the windows (one batch)."""
        return self._ledger.withdraw(window_ids, source=source, note=note)

    def undo(self, batch_id: str | None = None) -> LabelBatch:
        """Undo a batch (default: this annotator's last one not yet undone; an id or its first
        characters) by appending events; a window changed since keeps the later change."""
        return self._ledger.undo(batch_id)

    def find_batch(self, batch_id: str) -> str:
        """The full id of the batch whose id is or starts with ``batch_id``."""
        return self._ledger.find_batch(batch_id)

    def labels(self) -> pd.DataFrame:
        """Current label of every labeled window: window_id, class, class_id, annotator, at, source."""
        return self._ledger.labels()

    def label_vector(self) -> tuple[np.ndarray, list[str]]:
        """(y, class names): y[i] indexes class names, -1 when unlabeled; rows in window-id order."""
        return self._ledger.label_vector()

    def history(self, *, annotator: str | None = None, class_name: str | None = None,
                source: str | None = None, since: str | None = None,
                until: str | None = None, batch_id: str | None = None,
                as_frame: bool = True) -> pd.DataFrame | list[dict]:
        """Label events matching every filter given, oldest first (see :meth:`Ledger.history`);
        ``as_frame=False``: a list of dicts, one per event, with the same keys."""
        get = self._ledger.history if as_frame else self._ledger.history_rows
        return get(annotator=annotator, class_name=class_name, source=source, since=since,
                   until=until, batch_id=batch_id)

    def class_log(self, annotator: str | None = None) -> pd.DataFrame:
        """Changes of classes (add, rename, colour, merge, retire), oldest first."""
        return self._ledger.class_log(annotator)

    def import_intervals(self, path: str | os.PathLike, *, dry_run: bool = False,
                         create_classes: bool = True, tz: str | None = None) -> ImportReport:
        """Confirm the windows inside each interval of an interval-label file (source "import");
        one batch per annotator named in the file. ``dry_run`` writes nothing. Start and end may be
        clock times (``tz``: the zone of those written without one)."""
        return self._ledger.import_intervals(path, dry_run=dry_run, create_classes=create_classes,
                                             tz=tz)

    # ------------------------------------------------------------------ summaries
    def counts(self) -> pd.DataFrame:
        """Confirmed windows per class (all classes, retired ones included)."""
        return self._ledger.counts()

    def status(self) -> ProjectStatus:
        recs = self._catalog.recording_summaries()
        counts = self._ledger.class_counts()
        return ProjectStatus(
            path=str(self.path), annotator=self.annotator, recordings=len(recs),
            hours=sum(r.n_samples / r.rate for r in recs) / 3600,
            windows=self.n_windows, window_length_s=self.window_length_s,
            window_step_s=self.window_step_s, feature_set_version=self.feature_set_version,
            classes=self.active_classes(), confirmed=sum(c.confirmed for c in counts),
            annotators=self._ledger.label_annotators(), counts=counts, recording_list=recs)

    def backup(self, dest: str | os.PathLike) -> None:
        try:
            self.store.backup(dest)
        except StoreError as exc:
            raise ProjectError(str(exc)) from None

    # ------------------------------------------------------------------ export
    def export(self, folder: str | os.PathLike, *, fmt: str = "csv", confirmed_only: bool = False,
               min_confidence: float | None = None, classes: Sequence[str] | None = None,
               overwrite: bool = False, features: bool = False,
               signal: bool = False, include_answers: bool = False) -> ExportReport:
        """Write the training set to ``folder``: ``windows.<fmt>``, ``segments.<fmt>`` and
        ``manifest.json`` (see :mod:`labeler.exporting`), each file atomically, the manifest last.
        Window rows carry person, bout and recording_file for grouped splits; ``features`` adds
        one named column per feature, ``signal`` writes the window signals to ``signals.npz``.
        :func:`labeler.training.read_training_set` reads such a folder as (X, y, groups).
        Windows answered "mixed" or "not sure" are left out unless ``include_answers``.
        """
        return self._exporter.export(folder, fmt=fmt, confirmed_only=confirmed_only,
                                     min_confidence=min_confidence, classes=classes,
                                     overwrite=overwrite, features=features, signal=signal,
                                     include_answers=include_answers)

    # ------------------------------------------------------------------ proposals
    def refresh_proposals(self, *, alpha: float | None = None, n_neighbors: int = 10,
                          temporal_weight: float | None = None, pca_components: int | None = 30,
                          progress: Progress | None = None, estimate: bool = True) -> ProposalRun:
        """Spread the confirmed labels over the window graph; store the result as a run.
        Proposed labels are suggestions for a person to review.

        ``estimate``: also compute the run's accuracy estimate and store it with the run (the
        slow part: cross-validation), so that :meth:`accuracy_estimate` only reads it. False
        leaves it to the first :meth:`accuracy_estimate` (e.g. to show the proposals first)."""
        scaled = None if progress is None else (lambda f, msg: progress(0.7 * f, msg))
        run = self._proposals.refresh(alpha=alpha, n_neighbors=n_neighbors,
                                      temporal_weight=temporal_weight,
                                      pca_components=pca_components,
                                      progress=scaled if estimate else progress)
        if estimate and run.proposed:
            if progress:
                progress(0.7, "accuracy estimate")
            self._audits.accuracy_estimate()
            if progress:
                progress(1.0, "done")
        return run

    def proposals(self) -> pd.DataFrame:
        """Latest proposals: window_id, label, class_id, confidence, margin, support, conflict,
        confirmed (whether the window was confirmed at that run). Empty when none yet."""
        return self._proposals.table()

    def review_queue(self, n: int = 50, *, random_state=None,
                     as_frame: bool = True) -> pd.DataFrame | list[dict]:
        """Windows to look at next: window_id, reason (conflict, disagreement, uncertain,
        unexplored), score, proposed, confidence, recording, start_s. Windows drawn into an open
        audit are left out, so the audit stays blind. The windows are drawn at random, favouring
        high scores, and each one's probability of being drawn is kept for the accuracy
        estimate. ``as_frame=False``: a list of dicts, one per window, with the same keys."""
        get = self._proposals.review_queue if as_frame else self._proposals.review_rows
        return get(n, exclude=self._audits.open_windows(), random_state=random_state)

    def draw_review_queue(self, n: int = 50) -> ReviewDraw:
        """The review queue :meth:`review_queue` would give now, drawn ahead of showing it (e.g.
        in another process while the annotator looks at something else): nothing is kept until
        :meth:`show_review_draw` shows it."""
        return self._proposals.draw_review(n, exclude=self._audits.open_windows())

    def show_review_draw(self, drawn: ReviewDraw, n: int = 50) -> pd.DataFrame:
        """Show a queue drawn ahead (:meth:`draw_review_queue`): its table, its draws' probabilities
        kept now for the accuracy estimate, when the project is still in the state it was drawn
        in (same proposal run, no label event since, same open audit); else a queue of ``n``
        drawn now (:meth:`review_queue`)."""
        p = self._proposals
        if drawn.mark != p.queue_mark(self._audits.open_windows()):
            return self.review_queue(n)
        p.keep_draws(drawn)
        return p.queue_frame(drawn.rows)

    def proposals_run_id(self) -> int | None:
        """Id of the run that made the stored proposals (a small query), or None before any."""
        return self._proposals.run_id()

    def draw_audit(self, n: int = 30, *, random_state=None) -> pd.DataFrame:
        """Draw a random sample of proposed, unconfirmed windows (within bands of confidence) for
        a blind audit: window_id, position, recording, start_s. Confirm them with source
        "audit"."""
        return self._audits.draw(n, random_state=random_state)

    def audit_status(self) -> pd.DataFrame:
        """Every audited window: window_id, run_id, position, proposed, confidence, answer, correct."""
        return self._audits.status()

    def accuracy_estimate(self) -> AccuracyReport:
        """Accuracy of the latest proposals, with its interval, what it rests on and the
        calibration of the confidence (see :mod:`labeler.estimate`). Computed once per proposal
        run (by :meth:`refresh_proposals`, or here when it was not) and stored with it; later
        calls read it, with the answers of an audit given since."""
        return self._audits.accuracy_estimate()

    # ------------------------------------------------------------------ several annotators
    def annotations(self) -> pd.DataFrame:
        """Every annotator's current label of every window: window_id, annotator, class_id, label."""
        return self._ledger.annotations()

    def disagreements(self) -> np.ndarray:
        """Ids of windows whose annotators' current labels differ (for the review queue)."""
        return self._ledger.disagreements()

    def agreement(self) -> dict:
        """Pairwise confusion tables and Cohen's kappa, Fleiss' kappa (see :mod:`labeler.agreement`)."""
        return self._ledger.agreement()
