"""Before serving: make sure a project has a map and proposals, through Project methods.

The PCA map and the proposals are computed before the page opens (seconds); a t-SNE map, slower, in
a background thread; open pages switch to it when it is stored (LabelerApp.check_map).
"""

from __future__ import annotations

import threading
import time
from pathlib import Path
from typing import Callable


def prepare(project_path: str | Path, annotator: str | None = None, *, tsne: bool = True,
            echo: Callable[[str], None] = print) -> threading.Thread | None:
    """Compute what the app shows when the project lacks it; return the t-SNE thread, if any."""
    from labeler.project import Project

    with Project.open(project_path, annotator=annotator) as p:
        method = p.map_method()
        if method is None:
            t0 = time.perf_counter()
            p.compute_map("pca")
            echo(f"PCA map of {p.n_windows} windows in {time.perf_counter() - t0:.1f} s")
        if len(p.labels()):
            t0 = time.perf_counter()
            p.refresh_proposals()
            echo(f"proposals for {p.n_windows} windows in {time.perf_counter() - t0:.1f} s")
        want_tsne = tsne and method != "tsne"
    if not want_tsne:
        return None

    def work():
        try:
            with Project.open(project_path, annotator=annotator) as q:
                t0 = time.perf_counter()
                q.compute_map("tsne")
                echo(f"t-SNE map ready in {time.perf_counter() - t0:.0f} s; open pages switch "
                     "to it within seconds")
        except Exception as exc:  # the PCA map stays; say why t-SNE is missing
            echo(f"t-SNE map not made ({exc}); the PCA map stays")

    t = threading.Thread(target=work, name="labeler-tsne", daemon=True)
    t.start()
    echo("computing the t-SNE map in the background")
    return t
