"""Adding many recordings at once: one task per file on workers, one writer.

Each task reads, checks, windows and computes the features of one file
(:func:`prepare_file`) and returns a :class:`~labeler.preparing.PreparedRecording` or a
:class:`Refusal`. The calling process is the only writer: it stores each prepared recording in one
transaction of its own, in the order the files were given (so window ids do not depend on which
worker finished first), and reports refused files while the rest go on. With ``all_or_none`` the
results are gathered first and written in a single transaction, or nothing is written.
"""

from __future__ import annotations

import glob
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Sequence

from labeler.errors import InputError, LabelerError
from labeler.preparing import PreparedRecording, prepare_recording
from labeler.recordings import read_recording, recording_name
from labeler.study.runner import TaskFailed, open_runner

Progress = Callable[[float, str], None]
RECORDING_SUFFIXES = (".csv", ".csv.gz", ".parquet", ".pq", ".tsv", ".txt")


@dataclass
class Refusal:
    """A file that was not used, and why (one line naming the file and the fix)."""

    path: str
    reason: str


@dataclass
class IngestReport:
    added: list = field(default_factory=list)       # AddedRecording, in the order of the files
    refused: list[Refusal] = field(default_factory=list)
    runner: str = ""
    seconds: float = 0.0
    #: where the time went: opening the runner (0 when one was given), the tasks' own wall and
    #: CPU time on the workers (summed), and the single writer's wall and CPU time
    start_seconds: float = 0.0
    task_seconds: float = 0.0
    task_cpu_seconds: float = 0.0
    write_seconds: float = 0.0
    write_cpu_seconds: float = 0.0
    #: CPU seconds of the workers of a local cluster at the end, in all (tasks, start, runtime);
    #: None where the runner cannot tell (a process pool, a cluster given by its scheduler)
    worker_cpu_seconds: float | None = None

    @property
    def n_windows(self) -> int:
        return sum(a.n_windows for a in self.added)


def study_files(sources: Sequence[str | os.PathLike]) -> list[str]:
    """Recording files named by ``sources``: files, glob patterns, or folders (searched below for
    CSV and Parquet files). Sorted, each once."""
    out: list[str] = []
    for src in sources:
        src = str(src)
        if os.path.isdir(src):
            hits = sorted(str(p) for p in Path(src).rglob("*")
                          if p.is_file() and not p.name.startswith(".")
                          and p.name.lower().endswith(RECORDING_SUFFIXES))
            if not hits:
                raise InputError(f"{src}: holds no CSV or Parquet recording; give another folder")
        elif os.path.exists(src):
            hits = [src]
        elif glob.has_magic(src):
            hits = sorted(glob.glob(src))
            if not hits:
                raise InputError(f"{src}: matches no file; check the pattern")
        else:
            raise InputError(f"{src}: no such file or folder; check the path")
        out.extend(hits)
    seen: set[str] = set()
    unique = []
    for p in out:
        key = os.path.realpath(p)
        if key not in seen:
            seen.add(key)
            unique.append(p)
    return unique


def prepare_file(path: str, read_options: dict, length_s: float, step_s: float,
                 added_by: str, version: str | None = None) -> PreparedRecording | Refusal:
    """Read, check, window and compute features (feature set ``version``, default the newest)
    of one file (runs on a worker)."""
    try:
        rec = read_recording(path, **read_options)
        if version is None:
            return prepare_recording(rec, length_s, step_s, added_by)
        return prepare_recording(rec, length_s, step_s, added_by, version)
    except LabelerError as exc:
        return Refusal(str(path), str(exc))
    except MemoryError:
        return Refusal(str(path), f"{path}: too large for a worker's memory; give the workers "
                                  "more memory or split the recording")


def timed_prepare_file(*args) -> tuple[PreparedRecording | Refusal, float, float]:
    """:func:`prepare_file` on a worker, with its wall and CPU time (the worker process's CPU
    time, all of its threads)."""
    w0, c0 = time.perf_counter(), time.process_time()
    res = prepare_file(*args)
    return res, time.perf_counter() - w0, time.process_time() - c0


def ingest(project, sources: Sequence[str | os.PathLike], runner=None, *,
           read_options: dict | None = None, all_or_none: bool = False,
           progress: Progress | None = None, **runner_options) -> IngestReport:
    """Add the recording files of ``sources`` (files, glob patterns, folders) to ``project`` with
    one task per file on ``runner`` (an open runner of
    :func:`labeler.study.runner.open_runner`; when None, one is opened with ``runner_options``:
    workers, scheduler, backend). Returns what was added and what was refused."""
    t0 = time.perf_counter()
    paths = study_files(sources)
    if not paths:
        raise InputError("no recording files given; pass one or more CSV or Parquet files")
    if runner is None:
        with open_runner(**runner_options) as opened:
            started = time.perf_counter() - t0
            report = ingest(project, paths, opened, read_options=read_options,
                            all_or_none=all_or_none, progress=progress)
            report.start_seconds = started
            report.seconds += started
            return report
    report = IngestReport(runner=runner.description)
    # a name taken in the project or twice in the list is refused before any work is spent on it
    names = {r: None for r in project.recordings()["name"]}
    todo: list[int] = []
    early: dict[int, Refusal] = {}
    seen: dict[str, str] = {}
    for i, p in enumerate(paths):
        name = recording_name(p)
        try:
            project.refuse_own_file(p)
        except InputError as exc:
            early[i] = Refusal(p, str(exc))
            continue
        if name in names:
            early[i] = Refusal(p, f"{p}: a recording named {name!r} is already in the project; "
                                  "rename the file")
        elif name in seen:
            early[i] = Refusal(p, f"{p}: gives the recording name {name!r} as {seen[name]} does; "
                                  "rename one of the files")
        else:
            seen[name] = p
            todo.append(i)
    if all_or_none and early:
        first = next(iter(early.values()))
        raise InputError(f"{first.reason}; nothing added ({len(early)} file(s) refused)")
    options = dict(read_options or {})
    handles = {}
    for i in todo:
        fut = runner.submit(timed_prepare_file, paths[i], options, project.window_length_s,
                            project.window_step_s, project.annotator, project.feature_set_version)
        handles[id(fut)] = (i, fut)
    results: dict[int, PreparedRecording | Refusal] = dict(early)
    added_ids: list[int] = []
    next_i = 0
    done = len(early)

    def write(prepared: list[PreparedRecording]) -> list:
        w0, c0 = time.perf_counter(), time.process_time()
        try:
            return project.add_prepared(prepared, place_in_map=False)
        finally:
            report.write_seconds += time.perf_counter() - w0
            report.write_cpu_seconds += time.process_time() - c0

    def write_ready() -> None:
        nonlocal next_i
        while next_i in results:
            res = results.pop(next_i)
            if isinstance(res, Refusal):
                report.refused.append(res)
            elif not all_or_none:
                try:
                    got = write([res])
                except LabelerError as exc:
                    report.refused.append(Refusal(res.source_path, str(exc)))
                else:
                    report.added.extend(got)
                    added_ids.extend(a.id for a in got)
            else:
                gathered.append(res)
            next_i += 1

    gathered: list[PreparedRecording] = []
    if progress:
        progress(done / len(paths), f"{runner.description}: {len(todo)} file(s) to read")
    for fut, res in runner.as_completed([f for _, f in handles.values()]):
        i, _ = handles.pop(id(fut))
        if isinstance(res, TaskFailed):
            res = Refusal(paths[i], f"{paths[i]}: the task failed ({res}); try the file alone "
                                    "with `labeler add`")
        else:
            res, wall, cpu = res
            report.task_seconds += wall
            report.task_cpu_seconds += cpu
        results[i] = res
        done += 1
        if progress:
            progress(done / len(paths), f"{Path(paths[i]).name} done")
        write_ready()
    write_ready()
    if all_or_none:
        if report.refused:
            first = report.refused[0]
            raise InputError(f"{first.reason}; nothing added ({len(report.refused)} file(s) "
                             "refused)")
        report.added = write(gathered)
        added_ids = [a.id for a in report.added]
    report.worker_cpu_seconds = runner.worker_cpu_seconds()
    if added_ids:
        project.place_new_windows(added_ids)
    report.seconds = time.perf_counter() - t0
    return report
