"""A process holding the project file (as the app does) loses nothing while others use the file.

One process opens the project twice, as the app does (the page's connection and the proposal
worker's), and confirms batches. Between its batches other processes run `labeler status`,
`labeler propose`, `labeler export` and `labeler backup` on the same file, each opening and closing
it. Every confirmation the holder acknowledged must be in the file (count and content) while the
holder still runs and after it closed, and `PRAGMA integrity_check` must say ok.

The hazard: closing any plain descriptor of a SQLite file drops every POSIX advisory lock the
process holds on it, including those of its open connections; another process then takes itself
for the last user, checkpoints and deletes the -wal, and the holder's later commits go into a
deleted file (SQLite documentation, "How To Corrupt An SQLite Database File", section 2.2).
"""

from __future__ import annotations

import json
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path

from rel_support import HERE, fresh_project, read_snapshot, worker_env

WRITER = str(HERE / "writer.py")


class Holder:
    """The holding process, driven line by line."""

    def __init__(self, project: Path, env: dict, seed: int = 5):
        self.proc = subprocess.Popen([sys.executable, WRITER, "holder", str(project), str(seed)],
                                     stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                                     stderr=subprocess.PIPE, env=env)
        self.items: list[dict] = []
        self.cond = threading.Condition()
        threading.Thread(target=self._pump, daemon=True).start()
        self.wait(lambda o: "ready" in o)

    def _pump(self):
        for raw in iter(self.proc.stdout.readline, b""):
            try:
                obj = json.loads(raw)
            except ValueError:
                continue
            with self.cond:
                self.items.append(obj)
                self.cond.notify_all()

    def wait(self, pred, count: int = 1, timeout: float = 120.0) -> None:
        end = time.monotonic() + timeout
        with self.cond:
            while sum(1 for o in self.items if pred(o)) < count:
                errors = [o["error"] for o in self.items if "error" in o]
                assert not errors, errors[0]
                left = end - time.monotonic()
                if left <= 0 or self.proc.poll() is not None:
                    raise AssertionError(f"holder stopped or timed out: "
                                         f"{self.proc.stderr.read().decode()[-2000:]}")
                self.cond.wait(min(left, 0.5))

    def send(self, line: str) -> None:
        self.proc.stdin.write((line + "\n").encode())
        self.proc.stdin.flush()

    def acks(self) -> list[dict]:
        with self.cond:
            return [o for o in self.items if "ack" in o]


def found(project: Path) -> dict:
    """Batches and events in the file, read by a fresh connection in one read transaction."""
    conn = sqlite3.connect(f"file:{project}?mode=ro", uri=True, isolation_level=None)
    try:
        conn.execute("BEGIN")
        snap = read_snapshot(conn)
        conn.execute("COMMIT")
        snap["integrity"] = conn.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        conn.close()
    return snap


def missing(acks: list[dict], snap: dict) -> list[str]:
    """Acknowledged batches not in the file exactly as asked."""
    return [a["ack"] for a in acks
            if [list(e) for e in snap["events"].get(a["ack"], [])] != a["events"]]


def cli(args: list, env: dict) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "labeler.cli", *map(str, args)], env=env,
                          capture_output=True, text=True, timeout=300)


def _counted(acks: list[dict], snap: dict) -> dict:
    return {"acknowledged": len(acks), "found": len(acks) - len(missing(acks, snap)),
            "partial": len(snap["partial"]), "integrity": snap["integrity"],
            "replay_ok": snap["annotations_ok"] and snap["current_ok"]}


def run_held(folder: Path, rounds: int = 4) -> dict:
    """The holder confirms ``rounds`` batches before each other command and once more after them.

    Returns acknowledged vs found while the holder still has the file open ("during"), after it
    closed (the figures at the top level) and for the backup made in between ("backup")."""
    project = fresh_project(folder)
    env = worker_env()
    holder = Holder(project, env)
    others = [["status", project], ["propose", project], ["export", project, folder / "out"],
              ["backup", project, folder / "copy.labeler"], ["status", project]]
    try:
        for k, args in enumerate(others, start=1):
            holder.send(f"confirm {rounds}")
            holder.wait(lambda o: "round" in o, count=k)
            res = cli(args, env)
            assert res.returncode == 0, f"labeler {args[0]}: {res.stderr.strip()[-500:]}"
        holder.send(f"confirm {rounds}")
        holder.wait(lambda o: "round" in o, count=len(others) + 1)
        acks = holder.acks()
        # while the holder still has the file open: another process sees every acknowledged batch
        during = _counted(acks, found(project))
        holder.send("quit")
        holder.wait(lambda o: "closed" in o)
        assert holder.proc.wait(60) == 0
    finally:
        if holder.proc.poll() is None:
            holder.proc.kill()
            holder.proc.wait()
    out = _counted(acks, found(project))
    out["during"] = during
    backup = found(folder / "copy.labeler")
    out["backup"] = {"integrity": backup["integrity"], "partial": len(backup["partial"])}
    return out


def test_confirmations_survive_other_processes_opening_the_file(tmp_path):
    r = run_held(tmp_path)
    assert r["acknowledged"] == 4 * 6
    for stage in (r["during"], r):
        assert stage["found"] == stage["acknowledged"], (
            f"{stage['acknowledged'] - stage['found']} of {stage['acknowledged']} acknowledged "
            "batches not in the file")
        assert stage["partial"] == 0 and stage["integrity"] == "ok" and stage["replay_ok"]
    assert r["backup"] == {"integrity": "ok", "partial": 0}


def test_the_project_file_given_as_input_is_refused_before_it_is_read(tmp_path):
    import pytest

    from labeler.errors import InputError
    from labeler.project import Project

    project = fresh_project(tmp_path)
    with Project.open(project, annotator="t") as p:
        for call in (lambda: p.add_recordings([project]), lambda: p.import_intervals(project),
                     lambda: p.add_recordings([Path(f"{project}-wal")])):
            with pytest.raises(InputError, match="this project's own file"):
                call()
        assert p.store.integrity_check() == "ok"
