"""Proposals off the page: read the stored proposals and the accuracy estimate, and recompute them in
a process of its own (:class:`ProposalWorker`) over a second Project on the same file.

No Bokeh here. Results go to a ``deliver`` function; the document hands them to the session's next
tick, so a callback never waits on the spreading.
"""

from __future__ import annotations

import json
import threading
import time
import traceback
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np

from labeler.app.state import (NamedProposals, SessionState, read_named_proposals,
                               read_proposals, shared_proposals)
from labeler.errors import LabelerError
from labeler.results import AccuracyReport, ReviewDraw


@dataclass
class EstimateUpdate:
    """The accuracy estimate, computed after the proposals it is of have been delivered, or the
    one line saying why there is none."""

    estimate: AccuracyReport | None
    absent: str | None = None


def proposals_current(project, state: SessionState) -> bool:
    """True when the stored proposals were spread from exactly the current confirmations."""
    got = shared_proposals(project, state._layout)
    if got is None or got.confirmed is None or got.label.size != state.n:
        return False
    if not np.array_equal(got.confirmed, state.learned()):
        return False
    rows = np.flatnonzero(got.confirmed)
    names = np.asarray(list(got.names) + [None], dtype=object)
    stored = names[got.label[rows]]                  # -1 (nothing) takes the last: None
    return bool((stored == np.asarray(state.class_names, dtype=object)[state.confirmed[rows]])
                .all())


def estimate_of(project) -> EstimateUpdate:
    """Project.accuracy_estimate(), or why there is none (slow: call it off the page)."""
    try:
        return EstimateUpdate(project.accuracy_estimate())
    except LabelerError as exc:
        return EstimateUpdate(None, str(exc))


# ---------------------------------------------------------------------------- background proposals

def spread_and_estimate(project, class_code: dict[str, int] | None, n: int, refresh: bool,
                        deliver: Callable[[object], None], *,
                        on_start: Callable[[], None] | None = None,
                        more_waiting: Callable[[], bool] = lambda: False) -> None:
    """One run: spread the confirmations again (``refresh``) and hand the :class:`Proposals` to
    ``deliver`` (:class:`NamedProposals` when ``class_code`` is None); then, unless
    ``more_waiting()``, the review queue drawn ahead of showing it (:class:`ReviewDraw`, see
    :func:`draw_ahead`) and the accuracy estimate as an :class:`EstimateUpdate`."""
    t0 = time.perf_counter()
    project.reread()
    if refresh:
        if on_start:
            on_start()
        project.refresh_proposals(estimate=False)  # the estimate after the proposals are shown
        got = (read_named_proposals(project) if class_code is None
               else read_proposals(project, class_code, n))
        if got is not None:
            got.note = f"{time.perf_counter() - t0:.1f} s"
        deliver(got)
        project.checkpoint()  # what the run's commit left for later, now that the page has it
        if got is None:
            return
    if not more_waiting():
        drawn = draw_ahead(project)
        if drawn is not None:
            deliver(drawn)
    if not more_waiting():
        deliver(estimate_of(project))


def draw_ahead(project) -> ReviewDraw | None:
    """The review queue the page would draw when the annotator asks for it, drawn now (off the
    page); None without proposals or when it cannot be drawn (the page then draws it itself and
    says why). Nothing is kept until the page shows it (``Project.show_review_draw``)."""
    if project.proposals_run_id() is None:
        return None
    try:
        return project.draw_review_queue()
    except LabelerError:
        return None


# what travels between the page's process and the worker: a JSON header per message
# (Connection.send_bytes, nothing unpickled), the proposals' three arrays as raw bytes after theirs

def put(conn, head: dict, *arrays: np.ndarray) -> None:
    """Send one message: its JSON header, then each array's bytes."""
    conn.send_bytes(json.dumps(head).encode("utf-8"))
    for a in arrays:
        conn.send_bytes(np.ascontiguousarray(a).tobytes())


def encode(got) -> tuple[dict, tuple[np.ndarray, ...]]:
    """A worker's result (NamedProposals, ReviewDraw, EstimateUpdate, None or an exception) as a
    header and arrays for :func:`put`."""
    if isinstance(got, NamedProposals):
        return ({"kind": "proposals", "names": list(got.names), "note": got.note},
                (got.label.astype(np.int32), got.confidence.astype(np.float32),
                 got.support.astype(np.float32)))
    if isinstance(got, EstimateUpdate):
        return ({"kind": "estimate", "absent": got.absent,
                 "report": None if got.estimate is None else got.estimate.as_dict()}, ())
    if isinstance(got, ReviewDraw):
        return {"kind": "queue", "draw": got.as_dict()}, ()
    if got is None:
        return {"kind": "none"}, ()
    return {"kind": "error", "text": f"{type(got).__name__}: {got}"
            if not isinstance(got, LabelerError) else str(got)}, ()


def take(conn) -> object:
    """Receive one result sent by :func:`put` (of :func:`encode`): the result, or
    ("started",) / ("idle", seq)."""
    head = json.loads(conn.recv_bytes().decode("utf-8"))
    kind = head["kind"]
    if kind == "proposals":
        label = np.frombuffer(conn.recv_bytes(), np.int32)
        conf = np.frombuffer(conn.recv_bytes(), np.float32)
        support = np.frombuffer(conn.recv_bytes(), np.float32)
        return NamedProposals(head["names"], label, conf, support, head.get("note", ""))
    if kind == "estimate":
        rep = head["report"]
        return EstimateUpdate(None if rep is None else AccuracyReport.from_dict(rep),
                              head.get("absent"))
    if kind == "queue":
        return ReviewDraw.from_dict(head["draw"])
    if kind == "none":
        return None
    if kind == "error":
        return RuntimeError(head["text"])
    if kind == "idle":
        return ("idle", int(head["seq"]))
    return ("started",)


def serve_requests(requests, results, path: str) -> None:
    """The worker process's loop: each request ``{"seq", "refresh", "annotator"}`` becomes one run
    of :func:`spread_and_estimate` over a Project of its own on ``path``; requests waiting together
    fold into one run. Sends "started", the proposals (or none), the review queue drawn ahead, the
    estimate or an error (see
    :func:`encode`) and, when nothing waits, "idle" with the last request's number. Ends on a
    ``{"stop": true}`` request or when the serving process has gone (the pipe closed)."""
    from labeler.project import Project

    project = None

    def ask() -> dict:
        return json.loads(requests.recv_bytes().decode("utf-8"))

    def send(got) -> None:
        head, arrays = encode(got)
        put(results, head, *arrays)

    try:
        while True:
            msg = ask()
            if msg.get("stop"):
                return
            seq, refresh = int(msg["seq"]), bool(msg["refresh"])
            while requests.poll():                 # fold what waits into this run
                more = ask()
                if more.get("stop"):
                    return
                seq, refresh = int(more["seq"]), refresh or bool(more["refresh"])
            try:
                if project is None:
                    project = Project.open(path, annotator=msg["annotator"])
                spread_and_estimate(project, None, 0, refresh, send,
                                    on_start=lambda: put(results, {"kind": "started"}),
                                    more_waiting=requests.poll)
            except (EOFError, OSError):
                raise
            except Exception as exc:  # reported in the status line, never lost silently
                traceback.print_exc()
                send(exc)
            if not requests.poll():
                put(results, {"kind": "idle", "seq": seq})
    except (EOFError, OSError):
        return
    finally:
        if project is not None:
            try:
                project.close()
            except Exception:
                pass


def worker_main(requests_fd: int, results_fd: int, path: str) -> None:
    """The worker process's entry (see :meth:`_WorkerProcess._start`)."""
    from multiprocessing.connection import Connection

    serve_requests(Connection(requests_fd, writable=False), Connection(results_fd, readable=False),
                   path)


class _WorkerProcess:
    """One process recomputing the proposals of one project file for every page open on it.

    Spawned on the first request (a fresh interpreter: it shares neither the serving process's
    SQLite connection nor its interpreter lock); what it sends back goes to every subscribed
    :class:`ProposalWorker` from a reader thread. Stopped when its last page closes."""

    def __init__(self, path: str):
        self.path = path
        self.lock = threading.Condition()
        self.handles: list[ProposalWorker] = []
        self.process = None
        self.send = None
        self.sent = 0              # requests sent
        self.handled = 0           # the last request the process has finished with

    def request(self, refresh: bool, annotator: str) -> None:
        with self.lock:
            if self.process is None:
                self._start()
            self.sent += 1
            try:
                put(self.send, {"seq": self.sent, "refresh": bool(refresh),
                                "annotator": annotator})
            except (OSError, ValueError) as exc:
                self.handled = self.sent
                self._broadcast(RuntimeError(f"the proposal worker is gone ({exc})"))

    def _start(self) -> None:
        """A fresh interpreter (not a fork: no copy of the page's SQLite connection) running
        :func:`worker_main`, the pipes' ends passed as file descriptors."""
        import os
        import subprocess
        import sys
        from multiprocessing.connection import Connection

        import labeler

        req_r, req_w = os.pipe()
        res_r, res_w = os.pipe()
        home = str(Path(labeler.__file__).resolve().parent.parent)
        env = dict(os.environ)
        env["PYTHONPATH"] = os.pathsep.join([home] + [p for p in env.get("PYTHONPATH", "")
                                                      .split(os.pathsep) if p])
        try:
            process = subprocess.Popen(
                [sys.executable, "-c", "import sys; from labeler.app.worker import worker_main; "
                 "worker_main(int(sys.argv[1]), int(sys.argv[2]), sys.argv[3])",
                 str(req_r), str(res_w), self.path],
                pass_fds=(req_r, res_w), stdin=subprocess.DEVNULL, env=env, close_fds=True)
        finally:
            os.close(req_r)
            os.close(res_w)
        self.process, self.handled = process, self.sent
        self.send = Connection(req_w, readable=False)
        threading.Thread(target=self._read, args=(Connection(res_r, writable=False), process),
                         daemon=True, name="labeler-proposals-reader").start()

    def _broadcast(self, got) -> None:
        for h in list(self.handles):
            h._receive(got)

    def _read(self, conn, process) -> None:
        try:
            while True:
                try:
                    msg = take(conn)
                except (EOFError, OSError):
                    break
                if msg == ("started",):
                    for h in list(self.handles):
                        h._started()
                elif isinstance(msg, tuple) and msg[0] == "idle":
                    with self.lock:
                        self.handled = max(self.handled, int(msg[1]))
                        self.lock.notify_all()
                else:
                    self._broadcast(msg)
        finally:
            conn.close()
            with self.lock:
                if self.process is process:            # gone: nothing more will come
                    if self.handled < self.sent:
                        self._broadcast(RuntimeError(
                            f"the proposal worker stopped (exit code {process.wait()}); the "
                            "next change starts another"))
                    self.handled = self.sent
                    self.process = self.send = None
                self.lock.notify_all()

    def wait(self, timeout: float) -> None:
        end = time.monotonic() + timeout
        with self.lock:
            while self.handled < self.sent and time.monotonic() < end:
                self.lock.wait(end - time.monotonic())

    def stop(self) -> None:
        with self.lock:
            send, self.send = self.send, None
            self.process = None
            self.handled = self.sent
            self.lock.notify_all()
        if send is not None:
            try:
                put(send, {"stop": True})          # ends after the run it is in, if any
            except (OSError, ValueError):
                pass
            send.close()


_PROCESSES: dict[str, _WorkerProcess] = {}
_PROCESSES_LOCK = threading.Lock()


class ProposalWorker:
    """One page's handle on the proposal worker of its project file (:class:`_WorkerProcess`,
    shared by every page open on the file in this process).

    ``request()`` returns at once; requests that arrive while a run is going fold into one more run.
    A run delivers the proposals as soon as they are spread, then the accuracy estimate (slower:
    cross-validation) as an :class:`EstimateUpdate`, unless newer confirmations are waiting, which
    are spread first. ``request(refresh=False)`` asks for the estimate only.
    ``deliver(result_or_exception)`` is called from the reader thread, with the proposals in this
    page's class codes (``class_code()``); the document passes a function that hands it to the
    session's next tick. Every page on the file hears of every run.
    """

    def __init__(self, path, annotator: str, class_code: Callable[[], dict[str, int]], n: int,
                 deliver: Callable[[object], None], on_start: Callable[[], None] | None = None):
        self.path, self.annotator = str(path), annotator
        self._class_code, self._n = class_code, n
        self._deliver, self._on_start = deliver, on_start
        self._closed = False
        with _PROCESSES_LOCK:
            self._shared = _PROCESSES.setdefault(self.path, _WorkerProcess(self.path))
            with self._shared.lock:
                self._shared.handles.append(self)

    def request(self, refresh: bool = True) -> None:
        if not self._closed:
            self._shared.request(refresh, self.annotator)

    def _started(self) -> None:
        if self._on_start and not self._closed:
            self._on_start()

    def _receive(self, got) -> None:
        if self._closed:
            return
        if isinstance(got, NamedProposals):
            if got.label.size != self._n:
                got = RuntimeError("recordings were added or removed: reload the page")
            else:
                got = got.coded(self._class_code())
        self._deliver(got)

    def wait(self, timeout: float = 60.0) -> None:
        """Until the worker has finished every request sent so far (or ``timeout`` seconds)."""
        self._shared.wait(timeout)

    def busy(self) -> bool:
        return self._shared.handled < self._shared.sent

    def close(self) -> None:
        """Leave the worker; the last page to leave stops it."""
        if self._closed:
            return
        self._closed = True
        shared = self._shared
        with _PROCESSES_LOCK:
            with shared.lock:
                if self in shared.handles:
                    shared.handles.remove(self)
                last = not shared.handles
            if last and _PROCESSES.get(self.path) is shared:
                del _PROCESSES[self.path]
        if last:
            shared.stop()
