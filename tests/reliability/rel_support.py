"""Shared helpers of the reliability tests and benchmarks (not a conftest: nothing is registered).

- :func:`template_project` builds, once per process, a small project with two recordings and three
  classes; :func:`fresh_project` copies it for one test.
- :func:`check_project` opens a project file and checks every invariant the label history promises;
  it returns what it found, so a test can compare it with what writers acknowledged.
- :func:`file_state` hashes a project file and its -wal, to show a refused input changed nothing.
"""

from __future__ import annotations

import atexit
import hashlib
import os
import shutil
import sqlite3
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
CLASSES = ("sitting", "walking", "lifting")
_TEMPLATE: dict[str, Path] = {}


def sensor_table(n: int = 3000, rate: float = 50.0, seed: int = 0) -> pd.DataFrame:
    """Samples in the column convention: smooth test signals plus noise (values are arbitrary)."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) / rate
    data = {"time": t}
    for site in ("wrist", "hip"):
        for kind, scale in (("acc", 0.3), ("gyr", 40.0)):
            for k, axis in enumerate("xyz"):
                data[f"{site}_{kind}_{axis}"] = (scale * np.sin(2 * np.pi * (1 + k + seed) * t)
                                                 + rng.normal(0, scale / 10, n)
                                                 + (1.0 if kind == "acc" and axis == "z" else 0))
    return pd.DataFrame(data)


def template_project() -> Path:
    """A project file with two 60 s recordings (90 windows) and the classes of ``CLASSES``."""
    if "path" not in _TEMPLATE:
        from labeler.project import Project

        folder = Path(tempfile.mkdtemp(prefix="labeler-rel-"))
        atexit.register(shutil.rmtree, folder, True)
        paths = []
        for i in range(2):
            p = folder / f"worker{i + 1}.csv"
            sensor_table(3000, seed=i).to_csv(p, index=False)
            paths.append(p)
        proj = folder / "template.labeler"
        with Project.create(proj, annotator="builder") as p:
            p.add_recordings(paths)
            for c in CLASSES:
                p.add_class(c)
        _TEMPLATE["path"] = proj
        _TEMPLATE["folder"] = folder
    return _TEMPLATE["path"]


def template_recordings() -> list[Path]:
    template_project()
    return sorted(_TEMPLATE["folder"].glob("worker*.csv"))


def fresh_project(folder: Path, name: str = "project.labeler") -> Path:
    """A copy of the template project in ``folder`` (the template is closed, so one file is whole)."""
    src = template_project()
    dest = Path(folder) / name
    shutil.copyfile(src, dest)
    return dest


def file_state(path: Path) -> dict[str, str | None]:
    """sha256 of a project file and of its -wal (None when absent)."""
    out: dict[str, str | None] = {}
    for suffix in ("", "-wal"):
        p = Path(f"{path}{suffix}")
        out[suffix or "main"] = hashlib.sha256(p.read_bytes()).hexdigest() if p.exists() else None
    return out


def read_snapshot(conn: sqlite3.Connection) -> dict:
    """Everything the history invariants need, read with the given connection (the caller decides
    whether it runs inside one read transaction)."""
    batches = {r[0]: {"n_events": r[1], "action": r[2], "annotator": r[3]}
               for r in conn.execute("SELECT id, n_events, action, annotator FROM batches")}
    events: dict[str, list[tuple[int, int | None]]] = {}
    orphans = 0
    for bid, w, c in conn.execute("SELECT batch_id, window_id, class_id FROM events ORDER BY id"):
        events.setdefault(bid, []).append((w, c))
        if bid not in batches:
            orphans += 1
    ann_rows = conn.execute("SELECT window_id, annotator, class_id FROM annotations").fetchall()
    cur_rows = conn.execute("SELECT window_id, class_id FROM current_labels").fetchall()
    # replay from the events alone, through this connection (same read transaction as above)
    from storage.store import replay_events

    ann, current = replay_events(conn)
    return {
        "batches": batches,
        "events": events,
        "orphan_events": orphans,
        "partial": sorted(b for b, info in batches.items()
                          if len(events.get(b, [])) != info["n_events"]),
        "annotations_ok": {(w, who): c for w, who, c in ann_rows} == ann,
        "current_ok": dict(cur_rows) == current,
    }


def check_project(path: Path) -> dict:
    """Open a project as a user would (recovering a hot WAL) and check the history invariants.

    Returns the snapshot of :func:`read_snapshot` plus ``integrity`` and ``replay_ok`` (the tables
    equal :meth:`storage.Store.replay`).
    """
    from storage import Store

    store = Store.open(path)
    try:
        store.conn.execute("BEGIN")
        snap = read_snapshot(store.conn)
        ann, cur = store.replay()
        snap["replay_ok"] = (ann == {(w, who): c for w, who, c in store.annotations()}
                             and cur == {r[0]: r[1] for r in store.current_labels()})
        store.conn.execute("COMMIT")
        snap["integrity"] = store.integrity_check()
    finally:
        store.close()
    return snap


def class_ids(path: Path) -> dict[str, int]:
    conn = sqlite3.connect(str(path))
    try:
        return {n: i for i, n in conn.execute("SELECT id, name FROM classes")}
    finally:
        conn.close()


def worker_env() -> dict[str, str]:
    """Environment for helper processes: this package importable, one BLAS thread (they fork)."""
    env = dict(os.environ)
    root = str(HERE.parents[1])
    env["PYTHONPATH"] = os.pathsep.join([root, str(HERE)] + [p for p in
                                         env.get("PYTHONPATH", "").split(os.pathsep) if p])
    for k in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
        env[k] = "1"
    env["LABELER_ANNOTATOR"] = "writer"
    return env
