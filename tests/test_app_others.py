"""An open page notices what other processes change (a confirmation from the command line, a new
class) and shows it; a write the file refuses (disk full) is one line in the page, and the page
keeps working once the fault is gone. Driven from Python on a fresh bokeh Document."""

from __future__ import annotations

import os
import shutil
import subprocess
import sys

import numpy as np
import pytest
from bokeh.document import Document

from test_app_document import base_project  # noqa: F401  (the module's project fixture)

from labeler.app.document import build_document


@pytest.fixture
def app(base_project, tmp_path):  # noqa: F811
    path = tmp_path / "p.labeler"
    shutil.copy(base_project, path)
    a = build_document(Document(), path, "ann", background=False)
    yield a
    a.close()


def _cli(*args) -> None:
    env = {**os.environ, "LABELER_ANNOTATOR": "shell"}
    res = subprocess.run([sys.executable, "-m", "labeler.cli", *map(str, args)], env=env,
                         capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr


def test_page_shows_a_confirmation_and_a_class_made_by_another_process(app):
    s = app.state
    assert not app.check_others()                                # nothing changed yet
    rows = np.flatnonzero(s.confirmed < 0)[:4]
    name = s.class_names[s.active_codes()[0]]
    counts = app.side.counts.text
    _cli("confirm", app.project.path, name, "--windows", ",".join(map(str, s.ids[rows])))
    assert app.check_others()
    code = s.class_code[name]
    assert [app.map.src.data["cf"][r] for r in rows] == [code] * len(rows)
    assert (s.confirmed[rows] == code).all()
    assert "4 window" in app.message and "elsewhere" in app.message
    if counts is not None:
        assert app.side.counts.text != counts
    assert not app.check_others()                                # seen once, not again
    _cli("class", "add", app.project.path, "resting")
    assert app.check_others()
    assert "resting" in s.class_names
    assert len(app.class_mapper.palette) == len(s.class_names)
    # the page's own confirmation is not news from elsewhere
    app.select_map(np.flatnonzero(s.confirmed < 0)[:2])
    app.press("1")
    assert not app.check_others()


def test_disk_full_is_one_line_in_the_page_and_the_page_works_once_space_is_back(app):
    s = app.state
    store = app.project.store
    pages = store.conn.execute("PRAGMA page_count").fetchone()[0]
    store.conn.execute(f"PRAGMA max_page_count = {pages}")      # SQLite's file-size limit: full
    rows = np.flatnonzero(s.confirmed < 0)[:200]
    n_before = int((s.confirmed >= 0).sum())
    refused = None
    for k in range(0, rows.size, 20):
        app.select_map(rows[k:k + 20])
        app.press("1")
        if "disk is full" in app.message:
            refused = app.message
            break
    assert refused is not None and "\n" not in refused and "nothing of this change" in refused
    acknowledged = int((s.confirmed >= 0).sum())
    store.conn.execute("PRAGMA max_page_count = 1073741823")    # space is back
    app.select_map(rows[-5:])
    app.press("1")
    assert "disk is full" not in app.message
    assert int((s.confirmed >= 0).sum()) >= acknowledged + 1 > n_before
    from labeler.project import Project

    with Project.open(app.project.path, readonly=True) as p:
        assert len(p.labels()) == int((s.confirmed >= 0).sum())
