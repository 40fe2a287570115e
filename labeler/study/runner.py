"""Where per-recording tasks run: a Dask cluster, or a local process pool when Dask is absent.

:func:`open_runner` gives a context manager with ``submit(fn, *args)``, ``share(obj)`` and
``as_completed(handles)``. The Dask runner starts a ``LocalCluster`` of ``workers`` processes (one
thread each, no dashboard, listening on 127.0.0.1 only) unless a scheduler address is given; then it
connects to that cluster and starts nothing. The process runner uses
:class:`concurrent.futures.ProcessPoolExecutor`. Local workers of either come from a fork server
(or are spawned), never forked from this process, so no worker shares the parent's open project
file.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import multiprocessing
import os
import sys
from typing import Any, Callable, Iterable, Iterator

from labeler.errors import InputError

BACKENDS = ("auto", "dask", "processes")


def dask_available() -> bool:
    try:
        import dask  # noqa: F401
        import distributed  # noqa: F401
    except ImportError:
        return False
    return True


def default_workers() -> int:
    return max(1, os.cpu_count() or 1)


class TaskFailed(Exception):
    """A task ended without a result (its worker died, or it raised past the task's own checks)."""


class ProcessRunner:
    """A local pool of processes, forked from a fork server where the platform has one (see
    :func:`local_worker_settings`), else spawned."""

    kind = "processes"

    def __init__(self, workers: int):
        self.workers = int(workers)
        self._pool: cf.ProcessPoolExecutor | None = None

    @property
    def description(self) -> str:
        return f"a local process pool of {self.workers} worker(s)"

    def __enter__(self) -> "ProcessRunner":
        method = start_method()
        context = multiprocessing.get_context(method)
        if method == "forkserver":  # as for a local Dask cluster (see local_worker_settings)
            context.set_forkserver_preload(worker_preload())
        self._pool = cf.ProcessPoolExecutor(max_workers=self.workers, mp_context=context)
        return self

    def __exit__(self, *exc) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None

    def share(self, obj: Any) -> Any:
        return obj

    def worker_cpu_seconds(self) -> float | None:
        """CPU seconds the workers have spent so far: not known for a process pool."""
        return None

    def submit(self, fn: Callable, *args) -> cf.Future:
        return self._pool.submit(fn, *args)

    def as_completed(self, handles: Iterable[cf.Future]) -> Iterator[tuple[cf.Future, Any]]:
        """(handle, result) as tasks finish; the result is a :class:`TaskFailed` when the task
        ended without one."""
        for fut in cf.as_completed(list(handles)):
            try:
                result = fut.result()
            except cf.process.BrokenProcessPool:
                result = TaskFailed("a worker process ended abruptly: out of memory, or a script "
                                    "that starts workers outside `if __name__ == '__main__':`")
            except Exception as exc:  # an unforeseen error: report, go on
                result = TaskFailed(f"{type(exc).__name__}: {exc}")
            yield fut, result


#: Environment variables a Dask nanny sets before it starts a worker that the local workers go
#: without: a small ``MALLOC_TRIM_THRESHOLD_`` turns off glibc's adaptive threshold for serving
#: large blocks from the heap, so every array of a few hundred kB becomes a fresh mapping whose
#: pages are faulted in and zeroed again; preparing a recording took about twice the CPU time.
DROPPED_WORKER_ENVIRON = ("MALLOC_TRIM_THRESHOLD_",)


#: Modules every task needs, loaded once in the process local workers are forked from.
WORKER_MODULES = ("distributed", "labeler.study.ingest")
#: Packages whose modules this process has loaded are loaded there too (see
#: :func:`worker_preload`); ``labeler.app`` (Bokeh) stays out.
SHARED_PACKAGES = ("labeler", "numpy", "pandas", "scipy", "sklearn", "pyarrow")


def start_method() -> str:
    """How a local cluster starts its worker processes: "forkserver" where the platform has it
    (Linux, macOS), else "spawn"."""
    return "forkserver" if "forkserver" in multiprocessing.get_all_start_methods() else "spawn"


def worker_preload() -> list[str]:
    """Modules the fork server loads before it forks the first worker: :data:`WORKER_MODULES`
    and the public modules of :data:`SHARED_PACKAGES` this process has loaded. A worker starts by
    loading the main module of this process again (as multiprocessing does); with these in place
    that costs a script which imports labeler, pandas or scikit-learn at its top almost nothing,
    where each spawned worker paid 0.5-1.7 s of CPU for it."""
    loaded = sorted(name for name in list(sys.modules)
                    if name.split(".")[0] in SHARED_PACKAGES
                    and not name.startswith("labeler.app")
                    and not any(part.startswith("_") for part in name.split(".")))
    return list(dict.fromkeys([*WORKER_MODULES, *loaded]))


@contextlib.contextmanager
def local_worker_settings() -> Iterator[None]:
    """Dask settings for the workers of a local cluster started inside: no
    :data:`DROPPED_WORKER_ENVIRON` in their environment (the one-thread limits of numerical
    libraries stay), no sampling profiler (a thread that looks at the task's stack every 10 ms),
    and workers forked from a fork server that has loaded :func:`worker_preload` once, rather
    than each worker loading them anew (:func:`start_method`). The fork server lives as long as
    this process and is started by the first local cluster, with that cluster's environment.
    The nannies write their variables into this process's ``os.environ`` before each start (and
    child processes inherit it): the dropped ones are taken out of it for the block, and it is put
    back as it was when the block ends."""
    import dask

    environ = {k: v for k, v in dask.config.get("distributed.nanny.pre-spawn-environ").items()
               if k not in DROPPED_WORKER_ENVIRON}
    saved = dict(os.environ)
    for key in DROPPED_WORKER_ENVIRON:  # left here by a nanny started earlier in this process
        os.environ.pop(key, None)
    method = start_method()
    try:
        with dask.config.set({"distributed.nanny.pre-spawn-environ": environ,
                              "distributed.worker.profile.enabled": False,
                              "distributed.worker.multiprocessing-method": method}):
            if method == "forkserver":
                from distributed.utils import get_mp_context

                # Dask names its own list the first time; ours replaces it until the server starts
                get_mp_context().set_forkserver_preload(worker_preload())
            yield
    finally:
        for key in set(os.environ) - set(saved):
            del os.environ[key]
        os.environ.update(saved)


def _process_cpu_seconds() -> float:
    """CPU seconds (user + system) of the calling process, all of its threads."""
    import resource

    use = resource.getrusage(resource.RUSAGE_SELF)
    return use.ru_utime + use.ru_stime


class DaskRunner:
    """A Dask LocalCluster (default) or an existing cluster's scheduler."""

    kind = "dask"

    def __init__(self, workers: int, scheduler: str | None = None):
        self.workers = int(workers)
        self.scheduler = scheduler
        self._client = None
        self._cluster = None

    @property
    def description(self) -> str:
        if self.scheduler:
            n = len(self._client.scheduler_info().get("workers", {})) if self._client else "?"
            return f"the Dask scheduler at {self.scheduler} ({n} worker(s))"
        return f"a Dask LocalCluster of {self.workers} worker(s)"

    def __enter__(self) -> "DaskRunner":
        import logging

        from distributed import Client, LocalCluster

        try:
            if self.scheduler:
                self._client = Client(self.scheduler, timeout="20s", set_as_default=False)
            else:
                with local_worker_settings():
                    self._cluster = LocalCluster(n_workers=self.workers, threads_per_worker=1,
                                                 processes=True, host="127.0.0.1",
                                                 dashboard_address="127.0.0.1:0",
                                                 scheduler_kwargs={"dashboard": False},
                                                 silence_logs=logging.ERROR)
                self._client = Client(self._cluster, set_as_default=False)
        except (OSError, TimeoutError) as exc:
            self.__exit__()
            where = self.scheduler or "a local cluster"
            raise InputError(f"cannot reach {where} ({exc}); check the address (e.g. "
                             "tcp://host:8786) or leave --scheduler out for a local cluster") from None
        return self

    def __exit__(self, *exc) -> None:
        if self._client is not None:
            self._client.close()
            self._client = None
        if self._cluster is not None:
            self._cluster.close()
            self._cluster = None

    def worker_cpu_seconds(self) -> float | None:
        """CPU seconds the workers of a local cluster have spent since they started, in all
        (tasks, start, runtime); None for a cluster given by its scheduler, whose workers may have
        worked for others too."""
        if self.scheduler or self._client is None:
            return None
        return float(sum(self._client.run(_process_cpu_seconds).values()))

    def share(self, obj: Any) -> Any:
        """Send an object to every worker once; tasks take the returned handle in its place."""
        return self._client.scatter(obj, broadcast=True, hash=False)

    def submit(self, fn: Callable, *args):
        return self._client.submit(fn, *args, pure=False)

    def as_completed(self, handles: Iterable) -> Iterator[tuple[Any, Any]]:
        from distributed import as_completed

        handles = list(handles)
        if not handles:
            return
        for fut in as_completed(handles, loop=self._client.loop):
            try:
                result = fut.result()
            except Exception as exc:  # a killed worker or an unforeseen error: report, go on
                result = TaskFailed(f"{type(exc).__name__}: {exc}")
            fut.release()
            yield fut, result


def open_runner(workers: int | None = None, scheduler: str | None = None,
                backend: str = "auto"):
    """A runner for per-recording tasks (use it as a context manager).

    ``backend``: "dask" (needs the ``scale`` extra), "processes" (a local process pool), or "auto":
    Dask when it is installed, else processes. A ``scheduler`` address needs Dask.
    """
    if backend not in BACKENDS:
        raise InputError(f"unknown backend {backend!r}; use one of {', '.join(BACKENDS)}")
    if workers is not None and (int(workers) != workers or workers < 1):
        raise InputError(f"--workers {workers}: give a whole number of at least 1")
    n = int(workers) if workers is not None else default_workers()
    have_dask = dask_available()
    if backend == "dask" or scheduler:
        if not have_dask:
            raise InputError("Dask is not installed; install it with `pip install "
                             "'labeler[scale]'` or leave out --scheduler to use local processes")
        return DaskRunner(n, scheduler)
    if backend == "auto" and have_dask:
        return DaskRunner(n)
    return ProcessRunner(n)
