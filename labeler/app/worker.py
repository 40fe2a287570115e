"""Proposals off the page: read the stored proposals and the accuracy estimate, and recompute them in
a thread of its own (:class:`ProposalWorker`) over a second Project on the same file.

No Bokeh here. Results go to a ``deliver`` function; the document hands them to the session's next
tick, so a callback never waits on the spreading.
"""

from __future__ import annotations

import threading
import time
import traceback
from dataclasses import dataclass
from typing import Callable

import numpy as np
import pandas as pd

from labeler.app.state import SessionState, read_proposals, stored_proposals
from labeler.errors import LabelerError
from labeler.results import AccuracyReport


@dataclass
class EstimateUpdate:
    """The accuracy estimate, computed after the proposals it is of have been delivered, or the
    one line saying why there is none."""

    estimate: AccuracyReport | None
    absent: str | None = None


def proposals_current(project, state: SessionState) -> bool:
    """True when the stored proposals were spread from exactly the current confirmations."""
    df = stored_proposals(project)
    if df is None or len(df) != state.n or "confirmed" not in df:
        return False
    pos = state.index.get_indexer(df["window_id"].to_numpy())
    if (pos < 0).any():
        return False
    was = np.zeros(state.n, bool)
    was[pos] = df["confirmed"].to_numpy(bool)
    if not np.array_equal(was, state.learned()):
        return False
    names = np.asarray(state.class_names, dtype=object)
    rows = np.flatnonzero(was)
    stored = pd.Series(df["label"].to_numpy(object), index=pos).loc[rows].to_numpy(object)
    return bool((stored == names[state.confirmed[rows]]).all())


def estimate_of(project) -> EstimateUpdate:
    """Project.accuracy_estimate(), or why there is none (slow: call it off the page)."""
    try:
        return EstimateUpdate(project.accuracy_estimate())
    except LabelerError as exc:
        return EstimateUpdate(None, str(exc))


# ---------------------------------------------------------------------------- background proposals

def spread_and_estimate(project, class_code: dict[str, int], n: int, refresh: bool,
                        deliver: Callable[[object], None], *,
                        on_start: Callable[[], None] | None = None,
                        more_waiting: Callable[[], bool] = lambda: False) -> None:
    """One run: spread the confirmations again (``refresh``) and hand the :class:`Proposals` to
    ``deliver``; then, unless ``more_waiting()``, the accuracy estimate as an
    :class:`EstimateUpdate`."""
    t0 = time.perf_counter()
    project.reread()
    if refresh:
        if on_start:
            on_start()
        project.refresh_proposals()
        got = read_proposals(project, class_code, n)
        if got is not None:
            got.note = f"{time.perf_counter() - t0:.1f} s"
        deliver(got)
        if got is None:
            return
    if not more_waiting():
        deliver(estimate_of(project))


class ProposalWorker:
    """Recomputes proposals in a thread of its own, over a Project opened on the same file.

    ``request()`` returns at once; requests that arrive while a run is going fold into one more run.
    A run delivers the proposals as soon as they are spread, then the accuracy estimate (slower:
    cross-validation) as an :class:`EstimateUpdate`, unless newer confirmations are waiting, which
    are spread first. ``request(refresh=False)`` asks for the estimate only.
    ``deliver(result_or_exception)`` is called from the worker thread; the document passes a function
    that hands it to the session's next tick.
    """

    def __init__(self, path, annotator: str, class_code: Callable[[], dict[str, int]], n: int,
                 deliver: Callable[[object], None], on_start: Callable[[], None] | None = None):
        self.path, self.annotator = path, annotator
        self._class_code, self._n = class_code, n
        self._deliver, self._on_start = deliver, on_start
        self._wanted = threading.Event()
        self._lock = threading.Lock()
        self._thread: threading.Thread | None = None
        self._closed = False
        self._project = None
        self._refresh = False

    def request(self, refresh: bool = True) -> None:
        if self._closed:
            return
        self._refresh = self._refresh or refresh
        self._wanted.set()
        with self._lock:
            if self._thread is None or not self._thread.is_alive():
                self._thread = threading.Thread(target=self._run, name="labeler-proposals",
                                                daemon=True)
                self._thread.start()

    def _run(self) -> None:
        from labeler.project import Project

        while self._wanted.is_set() and not self._closed:
            self._wanted.clear()
            refresh, self._refresh = self._refresh, False
            try:
                if self._project is None:
                    self._project = Project.open(self.path, annotator=self.annotator)
                # newer confirmations waiting: spread them first, estimate after them
                spread_and_estimate(self._project, self._class_code(), self._n, refresh,
                                    self._deliver, on_start=self._on_start,
                                    more_waiting=lambda: self._wanted.is_set() and self._refresh)
            except Exception as exc:  # reported in the status line, never lost silently
                traceback.print_exc()
                self._deliver(exc)
        if self._closed:
            self._close_project()

    def wait(self, timeout: float = 60.0) -> None:
        t = self._thread
        if t is not None:
            t.join(timeout)

    def busy(self) -> bool:
        return self._thread is not None and self._thread.is_alive()

    def close(self) -> None:
        self._closed = True
        if not self.busy():
            self._close_project()

    def _close_project(self) -> None:
        if self._project is not None:
            try:
                self._project.close()
            except Exception:
                pass
            self._project = None
