"""Small things the command line gets right: refused demos leave nothing, closed pipes end quietly."""

import pytest
from click.testing import CliRunner

from labeler.cli import cli
from labeler.errors import InputError


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], env={"LABELER_ANNOTATOR": "t"})


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
