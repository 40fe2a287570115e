"""Before serving: make sure a project has a map and proposals, through Project methods.

The PCA map and the proposals are computed before the page opens (seconds); a t-SNE map, slower, in
a background thread whose result sessions opened later pick up.
"""

from __future__ import annotations

import threading
import time
from pathlib import Path
from typing import Callable

from labeler.errors import LabelerError


def _has_map(p, kind: str) -> bool:
    getter = getattr(p, "map", None)
    if not callable(getter):
        return False
    try:
        got = getter(kind)
    except (LabelerError, TypeError, KeyError, ValueError):
        return False
    return got is not None


def _compute_map(p, kind: str) -> None:
    fn = getattr(p, "compute_map")
    try:
        fn(kind)
    except TypeError:
        fn(method=kind)


def prepare(project_path: str | Path, annotator: str | None = None, *, tsne: bool = True,
            echo: Callable[[str], None] = print) -> threading.Thread | None:
    """Compute what the app shows when the project lacks it; return the t-SNE thread, if any."""
    from labeler.project import Project

    with Project.open(project_path, annotator=annotator) as p:
        if callable(getattr(p, "compute_map", None)) and not _has_map(p, "pca"):
            t0 = time.perf_counter()
            _compute_map(p, "pca")
            echo(f"PCA map of {p.n_windows} windows in {time.perf_counter() - t0:.1f} s")
        if callable(getattr(p, "refresh_proposals", None)) and len(p.labels()):
            t0 = time.perf_counter()
            p.refresh_proposals()
            echo(f"proposals for {p.n_windows} windows in {time.perf_counter() - t0:.1f} s")
        want_tsne = tsne and callable(getattr(p, "compute_map", None)) and not _has_map(p, "tsne")
    if not want_tsne:
        return None

    def work():
        try:
            with Project.open(project_path, annotator=annotator) as q:
                t0 = time.perf_counter()
                _compute_map(q, "tsne")
                echo(f"t-SNE map ready in {time.perf_counter() - t0:.0f} s; reload the page to "
                     "see it")
        except Exception as exc:  # the PCA map stays; say why t-SNE is missing
            echo(f"t-SNE map not made ({exc}); the PCA map stays")

    t = threading.Thread(target=work, name="labeler-tsne", daemon=True)
    t.start()
    echo("computing the t-SNE map in the background")
    return t
