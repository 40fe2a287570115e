"""What every room of a project shares: the open store, the acting annotator and a cache."""

from __future__ import annotations

import getpass
import os
import re
from pathlib import Path
from typing import Callable

from labeler.errors import InputError, LabelerError
from storage import Store

#: progress callbacks get (fraction done 0-1, what is being done)
Progress = Callable[[float, str], None]
#: cache entries held as (value, key of what it was made from) or checked against the stored run
#: on every use: a reread keeps them (the window graph, the classifier's view of the features,
#: the proposer that made the latest run, the windows' columns with the recordings they belong to)
KEYED = ("graph", "classifier_features", "proposer", "window_arrays_kept")


def default_annotator() -> str:
    name = os.environ.get("LABELER_ANNOTATOR")
    if name:
        return name
    try:
        return getpass.getuser()
    except Exception:  # no user name on some systems
        return "annotator"


def check_annotator(name: str) -> str:
    name = str(name).strip()
    if not re.fullmatch(r"[^\x00-\x1f\x7f]{1,60}", name):
        raise LabelerError(f"annotator name {name!r} must be 1-60 printable characters")
    return name


class Context:
    """The open project file, who acts, and arrays read from the file (dropped on change).

    Cache keys: ``windows``, ``window_arrays``, ``features``, ``map``, ``graph``, ``proposals``,
    ``classifier_features``, ``proposer``, ``window_arrays_kept``.
    """

    def __init__(self, store: Store, annotator: str | None = None):
        self.store = store
        self.path = store.path
        self.annotator = check_annotator(annotator or default_annotator())
        self.cache: dict[str, object] = {}

    def refuse_own_file(self, path: str | os.PathLike) -> None:
        """Refuse the project file (or its -wal/-shm) given as input: reading it through a plain
        descriptor and closing that would drop this process's SQLite locks on it (stat() opens
        none)."""
        for suffix in ("", "-wal", "-shm"):
            own = Path(f"{self.path}{suffix}")
            try:
                same = os.path.samefile(path, own)
            except OSError:
                continue
            if same:
                raise InputError(f"{path}: is this project's own file, not an input; give a "
                                 "recording or interval file")

    def invalidate(self, *keys: str) -> None:
        """Forget cached arrays (all of them when no key is given)."""
        if not keys:
            self.cache.clear()
        for k in keys:
            self.cache.pop(k, None)

    def reread(self) -> None:
        """Forget what was read from the file, but for the entries held with the key of what
        they were made from (:data:`KEYED`: the window graph and what goes with it), which every
        use checks against the file again."""
        for k in list(self.cache):
            if k not in KEYED:
                del self.cache[k]
