"""The real app in headless Chromium keeps every confirmation while other processes use the file,
and shows what they change within a few seconds.

The app server runs in a process of its own (`labeler open`), holding the project with two
connections (the page's and the proposal worker's). Between confirmations made with keys in the
page, other processes run `labeler status`, `propose`, `export` and `backup` on the same file; at the
end the file holds every confirmation the page acknowledged (its counts line), whole, and `PRAGMA
integrity_check` says ok. Closing a plain descriptor of the file in the app's process once let
another process delete the -wal under the app (SQLite documentation, "How To Corrupt An SQLite
Database File", section 2.2).
"""

from __future__ import annotations

import re
import shutil
import socket
import sqlite3
import subprocess
import sys
import time

import pytest

from test_app_browser import _confirmed_line, _div_text, _key, _open, _wait, driver  # noqa: F401

from labeler.project import Project

pytestmark = [pytest.mark.browser, pytest.mark.slow]


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture
def app_process(tmp_path):
    from test_app_document import make_project

    path = make_project(tmp_path)
    port = _free_port()
    proc = subprocess.Popen([sys.executable, "-m", "labeler.cli", "open", str(path), "--port",
                             str(port), "--no-browser", "--annotator", "page"],
                            stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    try:
        deadline = time.time() + 120
        while time.time() < deadline:
            line = proc.stdout.readline()
            if not line or "labeler app: http" in line:
                break
        assert proc.poll() is None, "the app server stopped"
        yield f"http://127.0.0.1:{port}/", path
    finally:
        proc.terminate()
        try:
            proc.wait(30)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def _cli(*args) -> None:
    res = subprocess.run([sys.executable, "-m", "labeler.cli", *map(str, args)],
                         capture_output=True, text=True, timeout=300,
                         env={**__import__("os").environ, "LABELER_ANNOTATOR": "shell"})
    assert res.returncode == 0, f"labeler {args[0]}: {res.stderr.strip()[-400:]}"


def _confirmed_in_page(driver) -> int:
    return int(re.match(r"(\d+) of", _confirmed_line(_div_text(driver, "counts"))).group(1))


def _in_file(path) -> tuple[int, int, str]:
    """(labeled windows, events, integrity) read by a fresh connection."""
    conn = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    try:
        labeled = conn.execute("SELECT count(*) FROM current_labels").fetchone()[0]
        events = conn.execute("SELECT count(*) FROM events").fetchone()[0]
        return labeled, events, conn.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        conn.close()


def test_page_confirmations_survive_other_processes_using_the_file(driver, app_process,  # noqa: F811
                                                                   tmp_path):
    url, path = app_process
    with Project.open(path, readonly=True) as p:
        confirmed = set(p.labels()["window_id"])
        ids = p.windows()["id"].tolist()
        name = p.active_classes()[0]
    free = [r for r, w in enumerate(ids) if w not in confirmed]
    _open(driver, url)
    driver.execute_script("document.activeElement && document.activeElement.blur()")
    others = [("status", path), ("propose", path), ("export", path, tmp_path / "out"),
              ("backup", path, tmp_path / "copy.labeler"), ("status", path)]
    shown = _confirmed_in_page(driver)
    _, events0, _ = _in_file(path)
    picked = 0
    for k, other in enumerate(others):
        rows = free[3 * k:3 * k + 3]
        driver.execute_script(
            f"Bokeh.documents[0].get_model_by_name('map_source').selected.indices = {rows};")
        _wait(lambda: "3 windows" in _div_text(driver, "selection") or None, 30,
              "the pick to reach the app")
        _key(driver, str(1 + k % 2))
        before = shown
        shown = _wait(lambda: (lambda n: n if n != before else None)(_confirmed_in_page(driver)),
                      30, "the page to acknowledge the confirmation")
        picked += len(rows)
        _cli(*other)
    labeled, events, integrity = _in_file(path)
    assert labeled == shown, f"the page showed {shown} confirmed windows, the file holds {labeled}"
    assert events == events0 + picked
    assert integrity == "ok"
    # another process confirms four windows: the open page shows them within a few seconds
    rows = free[3 * len(others):3 * len(others) + 4]
    _cli("confirm", path, name, "--windows", ",".join(str(ids[r]) for r in rows))
    before = shown
    shown = _wait(lambda: (lambda n: n if n >= before + 4 else None)(_confirmed_in_page(driver)),
                  15, "the page to show the confirmation made elsewhere")
    assert "elsewhere" in _div_text(driver, "message")
    assert _in_file(path)[0] == shown
