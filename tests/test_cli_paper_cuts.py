"""Small things the command line gets right: refused demos leave nothing, closed pipes end quietly."""

import pytest
from click.testing import CliRunner

from labeler.cli import cli
from labeler.errors import InputError


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], env={"LABELER_ANNOTATOR": "t"},
                              prog_name="labeler")


@pytest.mark.parametrize("args, message", [
    (["--minutes", "0"], "Error: --minutes 0: give the length of each simulated recording, 1 to 1440 "
                         "minutes"),
    (["--minutes", "nan"], "Error: --minutes nan: give the length of each simulated recording, 1 to "
                           "1440 minutes"),
    (["--people", "0"], "Error: --people 0: give how many pickers to simulate, 1 to 50"),
])
def test_a_refused_demo_is_one_line_and_leaves_nothing(tmp_path, args, message):
    r = run("demo", "--no-serve", "--dir", tmp_path / "d", *args)
    assert r.exit_code == 2 and r.stderr.strip() == message
    assert not (tmp_path / "d").exists()


def test_a_demo_failing_while_built_leaves_no_building_file(tmp_path, monkeypatch):
    from labeler import demo
    from labeler.project import Project

    def broken(self, *a, **k):
        raise InputError("recordings refused on purpose; nothing to fix")

    monkeypatch.setattr(Project, "import_intervals", broken)
    r = run("demo", "--no-serve", "--dir", tmp_path, "--minutes", "1", "--people", "1")
    assert r.exit_code == 2 and "refused on purpose" in r.stderr
    assert not list(tmp_path.glob(demo.PROJECT_NAME + "*"))


def test_a_closed_pipe_ends_quietly(tmp_path, write_csv):
    import os
    import subprocess
    import sys
    from pathlib import Path

    from labeler.project import Project
    from conftest import sensor_frame

    path = tmp_path / "p.labeler"
    with Project.create(path, annotator="ana") as p:
        p.add_recordings([write_csv(sensor_frame(3000), "alpha.csv")])
        ids = p.windows()["id"].to_numpy()
        for k in range(40):  # 1800 events: far more than a pipe holds
            p.confirm(ids, "walking" if k % 2 else "sitting", create_class=True)
    root = str(Path(__file__).resolve().parents[1])
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([root, os.environ.get("PYTHONPATH", "")]))
    proc = subprocess.Popen([sys.executable, "-m", "labeler.cli", "history", str(path)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
    first = proc.stdout.readline()
    proc.stdout.close()  # as `| head -1` does
    err = proc.stderr.read().decode()
    proc.wait(timeout=60)
    assert first.startswith(b"event")
    assert err == "" and proc.returncode in (0, 1)


def test_usage_errors_show_the_command_usage_on_one_line(tmp_path):
    r = run("add", tmp_path / "p.labeler")
    assert r.exit_code == 2
    assert r.stderr.strip() == ("Error: Missing argument 'FILES...'; usage: labeler add [OPTIONS] "
                                "PROJECT FILES...; see `labeler add --help`")
    r = run("queue", tmp_path / "p.labeler", "-n", "0")
    assert r.stderr.strip() == ("Error: Invalid value for '-n': 0 is not in the range "
                                "1<=x<=100000; usage: labeler queue [OPTIONS] PROJECT; see "
                                "`labeler queue --help`")


def test_history_takes_the_annotator_as_labels_were_made(tmp_path, write_csv):
    from labeler.project import Project
    from conftest import sensor_frame

    path = tmp_path / "p.labeler"
    with Project.create(path, annotator="ana") as p:
        p.add_recordings([write_csv(sensor_frame(1000), "alpha.csv")])
        p.confirm([1, 2], "walking", create_class=True)
    with Project.open(path, annotator="ben") as p:
        p.confirm([3], "walking")
    for flag in ("-a", "--annotator"):
        r = run("history", path, flag, "ben")
        assert r.exit_code == 0, r.output
        assert len(r.output.splitlines()) == 2 and " ben " in r.output.splitlines()[1]
    r = run("history", "--help")
    assert "-a, --annotator NAME" in r.output
