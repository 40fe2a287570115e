"""Faults a project must survive: every confirmation acknowledged before or after the fault is in the
file, whole; a refused change leaves nothing behind and says why in one line; the project keeps
working once the fault is gone.

- the disk fills up while confirming (a small tmpfs when this process may mount one, and always the
  file-size limit SQLite offers, ``PRAGMA max_page_count``, which fails the same way: SQLITE_FULL);
- the project's folder is read-only (a read-only mount when this process may mount, else a folder
  without write permission when not running as root);
- another process holds the write lock for longer than the retry bound;
- the app's process is killed with SIGKILL mid-batch (see ``writer.py app``);
- two app processes confirm on one file at once.

Each scenario returns what was acknowledged and what was found, so benchmarks/bench_reliability.py
prints the same figures.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest

from rel_support import HERE, check_project, fresh_project, worker_env
from test_crash import Lines

from labeler.errors import LabelerError
from labeler.project import Project
from storage import BusyError, DiskFullError, ReadOnlyError
from storage import store as store_mod

WRITER = str(HERE / "writer.py")


# --------------------------------------------------------------------------- helpers

@contextlib.contextmanager
def scratch_mount(size_kb: int):
    """A fresh tmpfs of ``size_kb`` KiB, or None when this process may not mount one."""
    if os.geteuid() != 0 or not shutil.which("mount"):
        yield None
        return
    folder = tempfile.mkdtemp(prefix="labeler-mnt-")
    made = subprocess.run(["mount", "-t", "tmpfs", "-o", f"size={size_kb}k,mode=0755", "tmpfs",
                           folder], capture_output=True)
    if made.returncode != 0:
        os.rmdir(folder)
        yield None
        return
    try:
        yield Path(folder)
    finally:
        subprocess.run(["umount", "-l", folder], capture_output=True)
        with contextlib.suppress(OSError):
            os.rmdir(folder)


def _remount(folder: Path, mode: str) -> bool:
    return subprocess.run(["mount", "-o", f"remount,{mode}", str(folder)],
                          capture_output=True).returncode == 0


def found_batches(path: Path, acked: list[dict]) -> dict:
    """How many acknowledged batches are in the file exactly as asked, and the file's checks."""
    snap = check_project(path)
    ok = [a for a in acked if [list(e) for e in snap["events"].get(a["ack"], [])] == a["events"]]
    return {"acknowledged": len(acked), "found": len(ok), "partial": len(snap["partial"]),
            "integrity": snap["integrity"], "replay_ok": snap["replay_ok"]}


def _confirm(p: Project, rng, acked: list[dict], cid: dict[str, int]) -> str:
    ids = p.windows()["id"].to_numpy()
    pick = sorted(int(w) for w in rng.choice(ids, size=int(rng.integers(5, 30)), replace=False))
    c = p.active_classes()[int(rng.integers(len(p.active_classes())))]
    bid = p.confirm(pick, c, source="map").batch_id
    acked.append({"ack": bid, "events": [[w, cid[c]] for w in pick]})
    return bid


def _class_ids(p: Project) -> dict[str, int]:
    return {str(n): int(i) for i, n in zip(p.classes()["id"], p.classes()["name"])}


def _one_line(exc: Exception, *words: str) -> None:
    text = str(exc)
    assert isinstance(exc, LabelerError) and "\n" not in text, repr(exc)
    for w in words:
        assert w in text, text


# --------------------------------------------------------------------------- disk full

def run_disk_full(folder: Path, how: str, seed: int = 3) -> dict:
    """Confirm until the disk is full, check, give the space back, confirm again.

    ``how``: "tmpfs" (``folder`` is a small mounted file system) or "page-limit"."""
    path = fresh_project(folder)
    rng = np.random.default_rng(seed)
    acked: list[dict] = []
    filler = folder / "filler.bin"
    p = Project.open(path, annotator="full")
    cid = _class_ids(p)
    _confirm(p, rng, acked, cid)  # the -wal and -shm exist before the disk fills
    if how == "tmpfs":
        st = os.statvfs(folder)
        free = st.f_bavail * st.f_frsize
        with open(filler, "wb") as fh:  # not a project file: no lock of ours on it
            fh.write(b"\0" * max(0, free - 160 * 1024))
    else:
        pages = p.store.conn.execute("PRAGMA page_count").fetchone()[0]
        p.store.conn.execute(f"PRAGMA max_page_count = {pages + 6}")
    refused = None
    for _ in range(400):
        try:
            _confirm(p, rng, acked, cid)
        except DiskFullError as exc:
            refused = exc
            break
    during = found_batches(path, acked)
    if how == "tmpfs":
        filler.unlink()
    else:
        p.store.conn.execute("PRAGMA max_page_count = 1073741823")
    for _ in range(3):
        _confirm(p, rng, acked, cid)  # the project keeps working once space is back
    p.close()
    after = found_batches(path, acked)
    return {"refused": refused, "during": during, "after": after}


@pytest.mark.parametrize("how", ["page-limit", "tmpfs"])
def test_disk_full_while_confirming(how, tmp_path):
    with contextlib.ExitStack() as stack:
        folder = tmp_path
        if how == "tmpfs":
            folder = stack.enter_context(scratch_mount(4096))
            if folder is None:
                pytest.skip("cannot mount a small tmpfs here (needs root); the page-limit case "
                            "simulates the full disk")
        r = run_disk_full(folder, how)
    assert r["refused"] is not None, "the disk never filled"
    _one_line(r["refused"], "disk is full", "nothing of this change was written", "project.labeler")
    for stage in ("during", "after"):
        s = r[stage]
        assert s["found"] == s["acknowledged"], (stage, s)
        assert s["partial"] == 0 and s["integrity"] == "ok" and s["replay_ok"], (stage, s)


# --------------------------------------------------------------------------- read-only folder

@contextlib.contextmanager
def read_only_folder(tmp_path: Path):
    """A folder holding a project that cannot be written, or None when none can be made here."""
    if os.geteuid() == 0:
        with scratch_mount(8192) as folder:
            if folder is None:
                yield None
                return
            path = fresh_project(folder)
            yield path, lambda: _remount(folder, "ro"), lambda: _remount(folder, "rw")
        return
    path = fresh_project(tmp_path)
    yield (path, lambda: tmp_path.chmod(0o555) or True, lambda: tmp_path.chmod(0o755) or True)


def run_read_only_folder(path: Path, make_ro, make_rw, seed: int = 4) -> dict:
    rng = np.random.default_rng(seed)
    acked: list[dict] = []
    with Project.open(path, annotator="ro") as p:
        cid = _class_ids(p)
        for _ in range(3):
            _confirm(p, rng, acked, cid)
    assert make_ro()
    try:
        refused = None
        try:
            with Project.open(path, annotator="ro") as p:
                _confirm(p, rng, acked, cid)
        except LabelerError as exc:
            refused = exc
        with Project.open(path, readonly=True) as p:  # looking still works
            shown = int(p.status().confirmed)
    finally:
        assert make_rw()
    during = found_batches(path, acked)
    with Project.open(path, annotator="ro") as p:
        _confirm(p, rng, acked, cid)
    return {"refused": refused, "shown": shown, "during": during,
            "after": found_batches(path, acked)}


def test_read_only_folder(tmp_path):
    with read_only_folder(tmp_path) as made:
        if made is None:
            pytest.skip("cannot make a read-only folder here")
        r = run_read_only_folder(*made)
    assert r["refused"] is not None
    _one_line(r["refused"], "read-only", "project.labeler")
    assert r["shown"] > 0
    for stage in ("during", "after"):
        s = r[stage]
        assert s["found"] == s["acknowledged"] and s["integrity"] == "ok", (stage, s)


# --------------------------------------------------------------------------- busy

_HOLD_LOCK = """
import sqlite3, sys, time
c = sqlite3.connect(sys.argv[1], isolation_level=None)
c.execute("BEGIN IMMEDIATE")
print("holding", flush=True)
sys.stdin.readline()
c.execute("ROLLBACK")
c.close()
"""


def run_busy(path: Path, bound_s: float = 0.5, seed: int = 5) -> dict:
    rng = np.random.default_rng(seed)
    acked: list[dict] = []
    p = Project.open(path, annotator="busy")
    cid = _class_ids(p)
    _confirm(p, rng, acked, cid)
    holder = subprocess.Popen([sys.executable, "-c", _HOLD_LOCK, str(path)],
                              stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    refused, waited = None, 0.0
    try:
        assert holder.stdout.readline().strip() == "holding"
        old = store_mod.BUSY_TIMEOUT_S
        store_mod.BUSY_TIMEOUT_S = bound_s
        t0 = time.perf_counter()
        try:
            _confirm(p, rng, acked, cid)
        except BusyError as exc:
            refused = exc
        finally:
            waited = time.perf_counter() - t0
            store_mod.BUSY_TIMEOUT_S = old
        during = found_batches(path, acked)
    finally:
        holder.communicate("\n", timeout=30)
    _confirm(p, rng, acked, cid)  # the lock is free again: the same connection writes
    p.close()
    return {"refused": refused, "waited_s": waited, "during": during,
            "after": found_batches(path, acked)}


def test_file_busy_longer_than_the_retry_bound(tmp_path):
    r = run_busy(fresh_project(tmp_path))
    assert r["refused"] is not None
    _one_line(r["refused"], "busy", "try again", "project.labeler")
    assert 0.4 < r["waited_s"] < 10
    for stage in ("during", "after"):
        s = r[stage]
        assert s["found"] == s["acknowledged"] and s["integrity"] == "ok", (stage, s)


# --------------------------------------------------------------------------- the app's process

def _start_app(path: Path, seed: int, annotator: str, n: int = 0) -> tuple[subprocess.Popen, Lines]:
    proc = subprocess.Popen([sys.executable, WRITER, "app", str(path), str(seed), str(n),
                             annotator], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            env=worker_env())
    return proc, Lines(proc.stdout)


def _acks(lines: Lines) -> list[dict]:
    with lines.cond:
        return [o for o in lines.items if "ack" in o]


def run_app_kills(path: Path, kills: int = 3, seed: int = 11) -> dict:
    """Kill the app's process with SIGKILL at random moments while it confirms."""
    rng = np.random.default_rng(seed)
    acked: list[dict] = []
    for k in range(kills):
        proc, lines = _start_app(path, seed + k, "app")
        try:
            lines.wait_for(lambda o: "ready" in o or "error" in o, 300)
            errors = [o["error"] for o in lines.items if "error" in o]
            assert not errors, errors[0]
            want = len(_acks(lines)) + int(rng.integers(1, 6))
            lines.wait_for(lambda o, w=want: len(_acks(lines)) >= w, 300)
            time.sleep(float(rng.uniform(0, 0.3)))  # land anywhere in the next batch
            proc.send_signal(signal.SIGKILL)
            proc.wait(30)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.wait()
        lines.thread.join(10)
        acked += _acks(lines)
    return found_batches(path, acked)


@pytest.mark.slow
def test_app_process_killed_mid_batch(tmp_path):
    r = run_app_kills(fresh_project(tmp_path), kills=3)
    assert r["acknowledged"] >= 3
    assert r["found"] == r["acknowledged"] and r["partial"] == 0, r
    assert r["integrity"] == "ok" and r["replay_ok"]


def run_two_apps(path: Path, n: int = 12, seed: int = 21) -> dict:
    """Two app processes confirm on one file at once; each reports what it saw of the other."""
    procs = [_start_app(path, seed + k, f"app-{k}", n) for k in range(2)]
    acked, errors, seen = [], [], []
    for proc, lines in procs:
        try:
            proc.wait(600)
        finally:
            if proc.poll() is None:
                proc.kill()
                proc.wait()
        lines.thread.join(10)
        acked += _acks(lines)
        errors += [o["error"] for o in lines.items if "error" in o]
        seen += [o["done"] for o in lines.items if "done" in o]
    r = found_batches(path, acked)
    r["errors"] = errors
    r["done"] = seen
    return r


@pytest.mark.slow
def test_two_app_processes_on_one_file(tmp_path):
    r = run_two_apps(fresh_project(tmp_path))
    assert r["errors"] == [], r["errors"][0]
    assert r["acknowledged"] == 24
    assert r["found"] == r["acknowledged"] and r["partial"] == 0, r
    assert r["integrity"] == "ok" and r["replay_ok"]
