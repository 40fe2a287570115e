"""numpy imported on first use (labeler.deferred): the commands that only read tables start without
it, and a module's ``np`` becomes numpy itself once used. Each check runs in a new interpreter,
where nothing has imported numpy yet."""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _run(code: str) -> str:
    res = subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True,
                         text=True, cwd=ROOT, timeout=120)
    assert res.returncode == 0, res.stderr
    return res.stdout.strip()


def test_a_stand_in_becomes_numpy_on_first_use_in_every_module_that_asked():
    out = _run("""
        import sys
        import labeler.windows as w
        import labeler.results as r
        assert "numpy" not in sys.modules, "imported early"
        assert type(w.np).__name__ == "_Deferred" and w.np is r.np
        starts = w.cut_windows([True] * 10, 4, 2)  # the first use imports numpy
        import numpy
        assert w.np is numpy and r.np is numpy
        print(starts.tolist())
    """)
    assert out == "[0, 2, 4, 6]"


def test_any_attribute_of_a_stand_in_imports_numpy():
    out = _run("""
        import labeler.quality as q
        version = q.np.__version__
        import numpy
        print(version == numpy.__version__, q.np is numpy)
    """)
    assert out == "True True"


def test_numpy_already_imported_is_bound_at_once():
    out = _run("""
        import numpy
        import labeler.project as p
        print(p.np is numpy)
    """)
    assert out == "True"


@pytest.mark.parametrize("command", ["status", "history"])
def test_commands_that_read_tables_do_not_import_numpy(tmp_path, command):
    from conftest import sensor_frame
    from labeler.project import Project
    from labeler.recordings import recording_from_frame

    path = tmp_path / "p.labeler"
    project = Project.create(path, annotator="ana")
    rec = recording_from_frame(sensor_frame(3000), where="r.csv", content_hash="h", name="r")
    project.add_recording_data([rec])
    project.add_class("walking")
    project.confirm(project.window_ids_in_span("r", 0.0, 10.0), "walking")
    project.close()
    out = _run(f"""
        import sys
        from click.testing import CliRunner
        from labeler.cli import cli
        res = CliRunner().invoke(cli, [{command!r}, {str(path)!r}])
        assert res.exit_code == 0, res.output
        print("numpy" in sys.modules)
    """)
    assert out == "False"
