"""Security checks of the package source and the backup of a project that is being written."""

from __future__ import annotations

import re
import subprocess
import sys
import time
from pathlib import Path

from click.testing import CliRunner

from rel_support import HERE, check_project, fresh_project, worker_env

ROOT = HERE.parents[1]
FORBIDDEN = re.compile(r"\bpickle\b|\beval\(|\bexec\(|yaml\.load\(|\bmarshal\.loads\(")


def test_no_pickle_eval_exec_in_package_source():
    hits = []
    for folder in ("labeler", "storage"):
        for path in sorted((ROOT / folder).rglob("*.py")):
            for n, line in enumerate(path.read_text(encoding="utf-8").splitlines(), 1):
                if FORBIDDEN.search(line.split("#", 1)[0]):  # code, not comments
                    hits.append(f"{path.relative_to(ROOT)}:{n}: {line.strip()}")
    assert hits == [], hits[0]


def test_open_binds_loopback_by_default():
    from labeler.cli import cli

    cmd = cli.commands.get("open")
    assert cmd is not None
    host = next(p for p in cmd.params if p.name == "host")
    assert host.default == "127.0.0.1"


def test_backup_while_another_process_writes(tmp_path):
    from labeler.cli import cli

    project = fresh_project(tmp_path)
    writer = subprocess.Popen([sys.executable, str(HERE / "writer.py"), "confirm", str(project), "5",
                               "300", "writer-0", "pure"], stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, env=worker_env())
    try:
        # wait until the writer has written some batches
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and len(check_project(project)["batches"]) < 20:
            time.sleep(0.1)
        copies = []
        for i in range(3):
            dest = tmp_path / f"copy{i}.labeler"
            r = CliRunner().invoke(cli, ["backup", str(project), str(dest)])
            assert r.exit_code == 0, r.output
            copies.append(dest)
            time.sleep(0.2)
    finally:
        out, err = writer.communicate(timeout=120)
    assert writer.returncode == 0, err.decode()[-500:]
    sizes = []
    for dest in copies:
        snap = check_project(dest)
        assert snap["integrity"] == "ok"
        assert snap["partial"] == [] and snap["orphan_events"] == 0
        assert snap["replay_ok"] and snap["annotations_ok"] and snap["current_ok"]
        sizes.append(len(snap["batches"]))
    assert sizes == sorted(sizes) and sizes[0] >= 20
    final = check_project(project)
    for dest in copies:  # each copy is a prefix of the source's history
        snap = check_project(dest)
        for bid, events in snap["events"].items():
            assert final["events"][bid] == events
