import pytest

from click.testing import CliRunner

from labeler.cli import cli
from conftest import sensor_frame


def run(*args, env=None):
    result = CliRunner().invoke(cli, [str(a) for a in args], env=env or {"LABELER_ANNOTATOR": "cli-user"})
    return result


def first_line(result):
    text = result.stderr if result.exit_code else result.stdout
    return text.strip().splitlines()[0] if text.strip() else ""


def test_end_to_end(tmp_path, write_csv):
    proj = tmp_path / "p.labeler"
    assert run("new", proj).exit_code == 0
    a = write_csv(sensor_frame(3000, seed=1), "alpha.csv")
    r = run("add", proj, str(tmp_path / "*.csv"))
    assert r.exit_code == 0, r.output
    assert "added alpha: 1.0 min at 50 Hz, 45 windows" in r.output
    r = run("confirm", proj, "walking", "--windows", "1-3,7", "--new-class")
    assert r.exit_code == 0 and "confirmed 4 window(s) as walking" in r.output
    r = run("confirm", proj, "standing", "--span", "alpha", "10", "20", "--new-class")
    assert r.exit_code == 0, r.output
    r = run("status", proj)
    assert "1 recording(s)" in r.output and "45 windows" in r.output
    assert "walking" in r.output and "cli-user" in r.output
    r = run("undo", proj)
    assert r.exit_code == 0 and r.output.startswith("undid batch")
    r = run("class", "list", proj)
    assert "walking  #E69F00  4 confirmed" in r.output
    r = run("backup", proj, tmp_path / "copy.labeler")
    assert r.exit_code == 0 and (tmp_path / "copy.labeler").exists()


def test_errors_are_one_line_exit_2(tmp_path, write_csv):
    proj = tmp_path / "p.labeler"
    run("new", proj)
    bad = write_csv(sensor_frame(300).assign(time=1.0), "bad.csv")
    r = run("add", proj, bad)
    assert r.exit_code == 2
    assert first_line(r) == f"Error: {bad}: row 3, column 'time': duplicate timestamp 1; remove repeated rows"
    r = run("confirm", proj, "walking", "--windows", "1")
    assert r.exit_code == 2 and first_line(r) == (
        f"Error: {proj}: the project has no windows yet; add recordings first with `labeler add`")
    run("add", proj, write_csv(sensor_frame(600), "ok.csv"))
    r = run("confirm", proj, "walking", "--windows", "1")
    assert r.exit_code == 2 and first_line(r).startswith("Error: no class 'walking'; classes: none yet")
    r = run("confirm", proj, "walking", "--windows", "x")
    assert r.exit_code == 2 and first_line(r) == "Error: --windows: 'x' is not a window id; write ids like 12,13,20-25"
    r = run("confirm", proj, "walking")
    assert r.exit_code == 2 and first_line(r) == "Error: give either --windows IDS or --span RECORDING START END"
    r = run("status", tmp_path / "nope.labeler")
    assert r.exit_code == 2 and first_line(r) == (
        f"Error: {tmp_path / 'nope.labeler'}: no such project file; create one with "
        f"`labeler new {tmp_path / 'nope.labeler'}`")
    r = run("new", proj)
    assert r.exit_code == 2 and "exists" in first_line(r)
    r = run("add", proj, str(tmp_path / "*.nothing"))
    assert r.exit_code == 2 and first_line(r).endswith("matches no file; check the pattern")
    r = run("undo", proj)
    assert r.exit_code == 2 and first_line(r) == "Error: nothing to undo for annotator 'cli-user'"
    for result in (r,):
        assert "Traceback" not in result.output


_WINDOW = ("--window {}: the window length must be a number of seconds > 0 and at most 3600; "
           "give e.g. --window 2.56")
_STEP = ("--step {}: the step between windows must be a number of seconds > 0 and at most 3600; "
         "give e.g. --step 1.28")


@pytest.mark.parametrize("args, message", [
    *[(["--window", v], _WINDOW.format(v)) for v in ("inf", "nan", "0", "-2")],
    *[(["--step", v], _STEP.format(v)) for v in ("inf", "nan", "0")],
    (["--window", "2", "--step", "3"], "--step 3: longer than the window (2 s), so samples between "
                                       "windows would never be labeled; give a step of at most 2"),
])
def test_new_refuses_bad_window_settings(tmp_path, args, message):
    proj = tmp_path / "p.labeler"
    r = run("new", proj, *args)
    assert r.exit_code == 2
    assert first_line(r) == f"Error: {message}"
    assert len(r.stderr.strip().splitlines()) == 1
    assert list(tmp_path.iterdir()) == []  # nothing written, not even a temporary file


def test_new_accepts_step_equal_to_window(tmp_path):
    r = run("new", tmp_path / "p.labeler", "--window", "2", "--step", "2")
    assert r.exit_code == 0 and r.output == f"created {tmp_path / 'p.labeler'} (windows 2 s, step 2 s)\n"
