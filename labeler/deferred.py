"""numpy imported where it is first used rather than where a module names it.

``labeler status`` and ``labeler history`` read the project through SQL and use no array, yet
the modules they pass through (the project, its rooms, the result types, the window and feature
definitions) name numpy at their top, and importing numpy costs about 0.15-0.2 s of CPU, most of
what those two commands cost. Such a module writes, after its imports::

    from labeler.deferred import numpy_when_used
    np = numpy_when_used(globals())

and uses ``np`` as usual. When numpy is already imported (the app, the tests, a worker, any
command that computed something) ``np`` is numpy itself. Otherwise ``np`` is a stand-in: the first
attribute read from it imports numpy and puts numpy itself in place of the stand-in in the
globals of every module that asked, so the stand-in costs one call, once. Type annotations are
not evaluated (every such module has ``from __future__ import annotations``), so naming
``np.ndarray`` in a signature imports nothing.
"""

from __future__ import annotations

import importlib
import sys
import threading


class _Deferred:
    """Stands for a module not imported yet (see the module docstring)."""

    def __init__(self, name: str):
        self._name = name
        self._homes: list[tuple[dict, str]] = []
        self._lock = threading.Lock()

    def bind(self, home: dict, alias: str):
        module = sys.modules.get(self._name)
        if module is not None:
            return module
        with self._lock:
            self._homes.append((home, alias))
        return self

    def _load(self):
        module = importlib.import_module(self._name)
        with self._lock:
            homes, self._homes = self._homes, []
        for home, alias in homes:
            if home.get(alias) is self:
                home[alias] = module
        return module

    def __getattr__(self, attr: str):
        return getattr(self._load(), attr)

    def __repr__(self) -> str:
        return f"<{self._name}, imported on first use>"


_NUMPY = _Deferred("numpy")


def numpy_when_used(home: dict, alias: str = "np"):
    """numpy, or a stand-in that imports it on first use (module docstring); ``home`` is the
    calling module's ``globals()`` and ``alias`` the name it keeps numpy under."""
    return _NUMPY.bind(home, alias)
