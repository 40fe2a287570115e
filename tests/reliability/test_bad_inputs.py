"""Bad input: every malformed file or option gets one clear line and leaves the project untouched.

Through click's CliRunner, each case must end with exit code 2 and exactly one line on stderr that
starts with "Error: ", names the file (and the row or column where the corpus case says so), says what
to do (a clause after "; ", or the rule it broke: "must be ...") and holds no traceback. The project file (and its -wal, if any) is
byte-identical before and after. Repairable inputs (a byte-order mark, semicolons, tabs) must instead
succeed and report the repair.

Cases: recording files and interval-label files come from ``bad_inputs/make_corpus.py`` (generated
into a temporary folder); project files and command-line options are built here.
"""

from __future__ import annotations

import json
import re
import shutil
import sqlite3
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

from rel_support import HERE, file_state, fresh_project

sys.path.insert(0, str(HERE / "bad_inputs"))
from make_corpus import build  # noqa: E402

from labeler.cli import cli  # noqa: E402

_CORPUS: dict[str, object] = {}
# what to do: a clause after "; " (the convention), or a line that states the rule to follow
ADVICE = re.compile(r"; |\b(must|give|use)\b")


def corpus(tmp_root: Path) -> tuple[Path, list[dict]]:
    if "cases" not in _CORPUS:
        folder = tmp_root / "corpus"
        _CORPUS["cases"] = build(folder)
        _CORPUS["folder"] = folder
    return _CORPUS["folder"], _CORPUS["cases"]


@pytest.fixture(scope="module")
def corpus_dir(tmp_path_factory):
    folder, cases = corpus(tmp_path_factory.mktemp("bad"))
    return folder, cases


def _case_ids():
    import tempfile

    folder = Path(tempfile.mkdtemp(prefix="labeler-corpus-ids-"))
    try:
        return [c["file"] for c in build(folder)]
    finally:
        shutil.rmtree(folder, ignore_errors=True)


FILE_CASES = _case_ids()


def invoke(args, annotator="tester"):
    return CliRunner().invoke(cli, [str(a) for a in args], env={"LABELER_ANNOTATOR": annotator})


def check_one_line_error(result, must_name: list[str]) -> str:
    """The checks every refused input must pass; returns the line."""
    assert result.exit_code == 2, (result.exit_code, result.output, result.exception)
    assert not isinstance(result.exception, Exception) or isinstance(result.exception, SystemExit), \
        repr(result.exception)
    err = result.stderr
    assert "Traceback" not in err and "Traceback" not in result.output
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1, f"expected one line on stderr, got {len(lines)}: {err!r}"
    line = lines[0]
    assert line.startswith("Error: "), line
    for word in must_name:
        assert word in line, f"{word!r} not in {line!r}"
    assert ADVICE.search(line), f"no advice in {line!r}"
    return line


@pytest.mark.parametrize("case_file", FILE_CASES)
def test_corpus_file(case_file, corpus_dir, tmp_path):
    folder, cases = corpus_dir
    case = next(c for c in cases if c["file"] == case_file)
    project = fresh_project(tmp_path)
    path = folder / case["file"]
    before = file_state(project)
    if case["kind"] == "recording":
        args = ["add", project, path, *case["args"]]
    else:
        args = ["import", project, path, *case["args"]]
    result = invoke(args)
    if case["expect"] == "repaired":
        assert result.exit_code == 0, (result.output, result.exception)
        for word in case["mentions"]:
            assert word in result.output, f"repair {word!r} not reported: {result.output!r}"
        return
    check_one_line_error(result, [str(path)] + case["mentions"])
    assert file_state(project) == before, "a refused input changed the project file"


# ------------------------------------------------------------------ project files

def _newer_schema(p: Path):
    conn = sqlite3.connect(str(p))
    conn.execute("UPDATE meta SET value = '999' WHERE key = 'schema_version'")
    conn.commit()
    conn.close()


def _foreign_sqlite(p: Path):
    p.unlink()
    conn = sqlite3.connect(str(p))
    conn.execute("CREATE TABLE invoices (id INTEGER PRIMARY KEY, amount REAL)")
    conn.execute("INSERT INTO invoices (amount) VALUES (12.5)")
    conn.commit()
    conn.close()


def _our_id_no_meta(p: Path):
    p.unlink()
    conn = sqlite3.connect(str(p))
    conn.execute("PRAGMA application_id = 1279413330")  # 0x4C424C52, a labeler project's mark
    conn.execute("CREATE TABLE other (x)")
    conn.commit()
    conn.close()


def _truncate(fraction):
    def cut(p: Path):
        data = p.read_bytes()
        p.write_bytes(data[: int(len(data) * fraction)])
    return cut


def _text(p: Path):
    p.write_text("this is a note, not a project\n")


def _empty(p: Path):
    p.write_bytes(b"")


def _zero_pages(p: Path):
    data = bytearray(p.read_bytes())
    page = int.from_bytes(data[16:18], "big") or 65536
    for k in range(2, len(data) // page):
        data[k * page:(k + 1) * page] = bytes(page)
    p.write_bytes(bytes(data))


PROJECT_CASES = {
    "truncated_header": _truncate(0.0005),
    "truncated_half": _truncate(0.5),
    "truncated_most": _truncate(0.9),
    "not_sqlite": _text,
    "empty_file": _empty,
    "newer_schema": _newer_schema,
    "foreign_sqlite": _foreign_sqlite,
    "labeler_mark_no_meta": _our_id_no_meta,
    "zeroed_pages": _zero_pages,
}


@pytest.mark.parametrize("name", sorted(PROJECT_CASES))
@pytest.mark.parametrize("command", ["status", "confirm"])
def test_bad_project_file(name, command, tmp_path):
    project = fresh_project(tmp_path, f"{name}.labeler")
    PROJECT_CASES[name](project)
    before = file_state(project)
    args = ["status", project] if command == "status" else \
        ["confirm", project, "walking", "--windows", "1-3"]
    line = check_one_line_error(invoke(args), [str(project)])
    assert file_state(project) == before, "opening a bad project file changed it"
    assert "Traceback" not in line


def test_project_given_as_folder(tmp_path):
    check_one_line_error(invoke(["status", tmp_path]), [str(tmp_path)])


# ------------------------------------------------------------------ command-line options

def option_cases(project: Path, rec: Path, tmp: Path) -> dict[str, tuple[list, list[str]]]:
    """name: (arguments, words the line must hold)."""
    return {
        "window_not_number": (["new", tmp / "n1.labeler", "--window", "abc"], ["--window", "abc"]),
        "window_infinite": (["new", tmp / "n2.labeler", "--window", "inf"], ["window"]),
        "window_negative": (["new", tmp / "n3.labeler", "--window", "-1"], ["window"]),
        "step_nan": (["new", tmp / "n4.labeler", "--step", "nan"], ["step"]),
        "step_longer_than_window": (["new", tmp / "n5.labeler", "--window", "1", "--step", "2"],
                                    ["step"]),
        "new_existing_file": (["new", project], [str(project)]),
        "new_in_missing_folder": (["new", tmp / "nowhere" / "p.labeler"], ["nowhere"]),
        "add_missing_files": (["add", project], ["FILES"]),
        "add_missing_everything": (["add"], ["PROJECT"]),
        "add_rate_not_number": (["add", project, rec, "--rate", "fast"], ["--rate", "fast"]),
        "add_rate_infinite": (["add", project, rec, "--rate", "inf"], ["rate"]),
        "add_bad_unit_choice": (["add", project, rec, "--acc-unit", "furlong"], ["--acc-unit"]),
        "add_no_such_file": (["add", project, tmp / "missing.csv"], ["missing.csv"]),
        "add_glob_no_match": (["add", project, str(tmp / "*.nothing")], ["*.nothing"]),
        "add_folder": (["add", project, tmp], [str(tmp)]),
        "add_same_recording_again": (["add", project, rec], ["already in the project"]),
        "add_profile_missing": (["add", project, rec, "--profile", tmp / "nope.json"],
                                ["nope.json"]),
        "add_profile_not_json": (["add", project, rec, "--profile", tmp / "broken.json"],
                                 ["broken.json", "line 1", "JSON"]),
        "add_profile_not_a_profile": (["add", project, rec, "--profile", tmp / "other.json"],
                                      ["other.json", "labeler_device_profile"]),
        "add_profile_unknown_key": (["add", project, rec, "--profile", tmp / "colour.json"],
                                    ["colour.json", "'colour'"]),
        "add_profile_bad_zone": (["add", project, rec, "--profile", tmp / "zone.json"],
                                 ["zone.json", "'tz'", "Nowhere/City"]),
        "add_profile_bad_channel": (["add", project, rec, "--profile", tmp / "channel.json"],
                                    ["channel.json", "ax=wrist_acc_q", "axis"]),
        "add_column_without_equals": (["add", project, rec, "--column", "accel_x"],
                                      ["--column", "accel_x"]),
        "add_column_unknown_kind": (["add", project, rec, "--column", "accel_x=wrist_speed_x"],
                                    ["--column", "accel_x=wrist_speed_x", "speed"]),
        "add_column_twice_to_one_channel": (["add", project, rec, "--column",
                                             "accel_x=wrist_acc_x,accel_y=wrist_acc_x"],
                                            ["--column", "wrist_acc_x"]),
        "add_tz_unknown": (["add", project, rec, "--tz", "Mars/Olympus"], ["--tz", "Mars/Olympus"]),
        "add_time_unit_unknown": (["add", project, rec, "--time-unit", "fortnight"],
                                  ["--time-unit", "fortnight"]),
        "add_time_format_without_field": (["add", project, rec, "--time-format", "dd/mm/yyyy"],
                                          ["--time-format", "dd/mm/yyyy"]),
        "add_skip_rows_negative": (["add", project, rec, "--skip-rows", "-1"], ["--skip-rows"]),
        "add_save_profile_missing_folder": (["add", project, rec, "--save-profile",
                                             tmp / "nowhere" / "d.json"], ["nowhere"]),
        "add_person_control_char": (["add", project, rec, "--person", "p\x07"], ["person"]),
        "recording_remove_unknown": (["recording", "remove", project, "nobody", "--yes"],
                                     ["nobody"]),
        "recording_remove_without_yes": (["recording", "remove", project, "worker1"],
                                         ["worker1", "--yes"]),
        "recording_person_too_long": (["recording", "person", project, "worker1", "x" * 80],
                                      ["person"]),
        "demo_minutes_zero": (["demo", "--no-serve", "--dir", tmp / "demo", "--minutes", "0"],
                              ["--minutes"]),
        "demo_people_zero": (["demo", "--no-serve", "--dir", tmp / "demo", "--people", "0"],
                             ["--people"]),
        "queue_n_zero": (["queue", project, "-n", "0"], ["-n"]),
        "audit_n_zero": (["audit", project, "-n", "0"], ["-n"]),
        "propose_neighbors_zero": (["propose", project, "--neighbors", "0"], ["--neighbors"]),
        "propose_alpha_one": (["propose", project, "--alpha", "1"], ["--alpha"]),
        "export_min_confidence_above_one": (["export", project, tmp / "out", "--min-confidence",
                                             "1.5"], ["--min-confidence"]),
        "history_last_negative": (["history", project, "--last", "-3"], ["--last"]),
        "import_tz_unknown": (["import", project, rec, "--tz", "Atlantis/Capital"],
                              ["--tz", "Atlantis/Capital"]),
        "add_save_profile_over_the_project": (["add", project, rec, "--dry-run", "--save-profile",
                                               project], ["--save-profile", "project's own file"]),
        "confirm_no_windows_option": (["confirm", project, "walking"], ["--windows"]),
        "confirm_bad_id": (["confirm", project, "walking", "--windows", "1,x"], ["'x'"]),
        "confirm_huge_id": (["confirm", project, "walking", "--windows", "99999999999999999999999"],
                            ["99999999999999999999999"]),
        "confirm_huge_range": (["confirm", project, "walking", "--windows", "1-99999999999"],
                               ["1-99999999999"]),
        "confirm_backwards_range": (["confirm", project, "walking", "--windows", "9-3"], ["9-3"]),
        "confirm_negative_id": (["confirm", project, "walking", "--windows", "-4"], ["-4"]),
        "confirm_unknown_window": (["confirm", project, "walking", "--windows", "5000"], ["5000"]),
        "confirm_unknown_class": (["confirm", project, "flying", "--windows", "1"], ["flying"]),
        "confirm_span_not_number": (["confirm", project, "walking", "--span", "worker1", "a", "5"],
                                    ["--span"]),
        "confirm_span_unknown_recording": (["confirm", project, "walking", "--span", "nobody", "0",
                                            "5"], ["nobody"]),
        "confirm_span_reversed": (["confirm", project, "walking", "--span", "worker1", "9", "2"],
                                  ["9"]),
        "confirm_span_nan": (["confirm", project, "walking", "--span", "worker1", "nan", "5"],
                             ["span"]),
        "confirm_bad_class_name": (["confirm", project, "x" * 80, "--windows", "1", "--new-class"],
                                   ["class"]),
        "undo_unknown_batch": (["undo", project, "--batch", "zzzz"], ["zzzz"]),
        "class_add_existing": (["class", "add", project, "walking"], ["walking"]),
        "class_rename_missing_arg": (["class", "rename", project, "walking"], ["NEW"]),
        "class_merge_into_itself": (["class", "merge", project, "walking", "walking"], ["walking"]),
        "backup_to_missing_folder": (["backup", project, tmp / "nowhere" / "b.labeler"],
                                     ["nowhere"]),
        "backup_over_existing": (["backup", project, rec], [str(rec)]),
        "import_missing_file": (["import", project, tmp / "labels.csv"], ["labels.csv"]),
        "import_missing_arg": (["import", project], ["FILE"]),
        "unknown_command": (["frobnicate", project], ["frobnicate"]),
        "unknown_option": (["status", project, "--colour", "red"], ["--colour"]),
        "annotator_control_char": (["confirm", project, "walking", "--windows", "1", "--annotator",
                                    "bad\x07name"], ["annotator"]),
    }


def write_profiles(tmp: Path) -> None:
    """The device profiles the option cases name."""
    (tmp / "broken.json").write_text('{"labeler_device_profile": 1, columns: }', encoding="utf-8")
    (tmp / "other.json").write_text('{"a": 1}', encoding="utf-8")
    (tmp / "colour.json").write_text('{"labeler_device_profile": 1, "colour": "red"}',
                                     encoding="utf-8")
    (tmp / "zone.json").write_text('{"labeler_device_profile": 1, "tz": "Nowhere/City"}',
                                   encoding="utf-8")
    (tmp / "channel.json").write_text(
        '{"labeler_device_profile": 1, "columns": {"ax": "wrist_acc_q"}}', encoding="utf-8")


OPTION_NAMES = sorted(option_cases(Path("p"), Path("r"), Path("t")))


@pytest.mark.parametrize("name", OPTION_NAMES)
def test_bad_option(name, tmp_path):
    from rel_support import template_recordings

    project = fresh_project(tmp_path)
    rec = tmp_path / "worker1.csv"
    shutil.copyfile(template_recordings()[0], rec)
    args, words = option_cases(project, rec, tmp_path)[name]
    write_profiles(tmp_path)
    before = file_state(project)
    check_one_line_error(invoke(args), words)
    assert file_state(project) == before, "a refused option changed the project file"


def test_corpus_is_large_enough(corpus_dir):
    _folder, cases = corpus_dir
    errors = [c for c in cases if c["expect"] == "error"]
    repaired = [c for c in cases if c["expect"] == "repaired"]
    total = len(errors) + len(PROJECT_CASES) + len(OPTION_NAMES)
    assert total >= 40 and len(repaired) >= 3
    assert {c["kind"] for c in cases} == {"recording", "intervals"}


def test_cases_json_matches_build(corpus_dir):
    folder, cases = corpus_dir
    assert json.loads((folder / "cases.json").read_text(encoding="utf-8")) == cases
