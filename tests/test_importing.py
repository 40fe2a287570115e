import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from hypothesis import given, settings, strategies as st

from labeler.cli import cli
from labeler.errors import InputError
from labeler.importing import windows_inside
from labeler.project import Project
from conftest import sensor_frame


def run(*args, who="cli-user"):
    return CliRunner().invoke(cli, [str(a) for a in args], env={"LABELER_ANNOTATOR": who})


def first_line(result):
    text = result.stderr if result.exit_code else result.stdout
    return text.strip().splitlines()[0] if text.strip() else ""


@pytest.fixture
def files(write_csv):
    return [write_csv(sensor_frame(3000, seed=1), "alpha.csv"),
            write_csv(sensor_frame(2000, seed=2), "beta.csv")]


@pytest.fixture
def project(tmp_path, files):
    p = Project.create(tmp_path / "p.labeler", annotator="ana")
    p.add_recordings(files)
    yield p
    p.close()


def by_position(p):
    """Current labels keyed by (recording, window number), which do not depend on window ids."""
    w = p.windows().set_index("id")
    return {(w.at[r.window_id, "recording"], int(w.at[r.window_id, "seq"])): r._1
            for r in p.labels()[["window_id", "class"]].itertuples(index=False)}


# ----------------------------------------------------------------------------- the window rule

@settings(max_examples=300, deadline=None)
@given(start=st.floats(0, 100), length=st.floats(0.5, 10), a=st.floats(-20, 120),
       width_factor=st.floats(0.5, 20))
def test_centre_rule_is_the_majority_rule_for_intervals_over_half_a_window(start, length, a,
                                                                          width_factor):
    # For an interval longer than half a window, the window's centre lies inside it exactly when
    # more than half the window does (an interval piece longer than half a window holds the
    # centre; elementary geometry, no source).
    b = a + width_factor * length
    if b - a <= length / 2:
        return
    overlap = max(0.0, min(start + length, b) - max(start, a))
    centre = start + length / 2
    if abs(overlap - length / 2) < 1e-9 or min(abs(centre - a), abs(centre - b)) < 1e-9:
        return  # exact ties: floating point decides, both rules give "neither" in exact arithmetic
    inside = bool(windows_inside([start], [start + length], a, b)[0])
    assert inside == (overlap > length / 2)


def test_straddling_windows_go_to_the_side_holding_most_of_them(project, tmp_path):
    f = tmp_path / "l.csv"
    # alpha windows start every 1.28 s and last 2.56 s. Boundary at 5.0 s: the window 2.56-5.12
    # has 2.44 s in the first interval; 3.84-6.40 has 1.24 s in it and 1.40 s in the second.
    f.write_text("recording,start,end,label\nalpha,0,5.0,sit\nalpha,5.0,12,walk\n")
    project.import_intervals(f)
    lab = by_position(project)
    assert [lab.get(("alpha", s)) for s in range(10)] == (
        ["sit"] * 3 + ["walk"] * 6 + [None])
    # a boundary at a window's centre splits it evenly: it goes to neither
    f.write_text("recording,start,end,label\nbeta,0,5.12,sit\nbeta,5.12,12,walk\n")
    project.import_intervals(f)
    lab = by_position(project)
    assert [lab.get(("beta", s)) for s in range(8)] == ["sit"] * 3 + [None] + ["walk"] * 4


# ----------------------------------------------------------------------------- round trip

def test_export_segments_then_import_gives_the_same_labels(tmp_path, files):
    src = Project.create(tmp_path / "src.labeler", annotator="ana")
    src.add_recordings(files)
    rng = np.random.default_rng(7)
    w = src.windows()
    # runs of random lengths (many single windows), random labels, unlabeled stretches between
    for rec in ("alpha", "beta"):
        ids = w.loc[w["recording"] == rec, "id"].to_numpy()
        i = 0
        while i < ids.size:
            n = int(rng.integers(1, 5))
            label = rng.choice(["sit", "walk", "lift", None], p=[0.3, 0.3, 0.2, 0.2])
            if label is not None:
                src.confirm(ids[i:i + n], str(label), create_class=True)
            i += n
    # an alternating stretch: every window its own segment, each next to a different label
    src.confirm(w.loc[(w["recording"] == "beta") & w["seq"].isin([10, 12, 14]), "id"], "sit")
    src.confirm(w.loc[(w["recording"] == "beta") & w["seq"].isin([11, 13, 15]), "id"], "walk")
    want = by_position(src)
    out = src.export(tmp_path / "out", confirmed_only=True)
    segs = pd.read_csv(out.files["segments"])
    assert (segs["windows"] == 1).sum() >= 6

    dst = Project.create(tmp_path / "dst.labeler", annotator="bo")
    dst.add_recordings(files)
    report = dst.import_intervals(out.files["segments"])
    assert report.intervals == len(segs) and report.windows == len(want)
    assert by_position(dst) == want
    assert set(dst.labels()["source"]) == {"import"}
    src.close()
    dst.close()


# ----------------------------------------------------------------------------- behaviour

def test_dry_run_writes_nothing_and_reports(project, tmp_path):
    project.confirm([1, 2], "walk", create_class=True)
    f = tmp_path / "l.csv"
    f.write_text("recording,start,end,label\nalpha,0,5.2,sit\nalpha,5.2,7,walk\n")
    before = len(project.history())
    r = project.import_intervals(f, dry_run=True)
    assert len(project.history()) == before and project.active_classes() == ["walk"]
    # alpha 0-5.2 s holds windows 0-3 (centres 1.28-5.12), two of which were walk and become sit;
    # 5.2-7 s holds window 4 (centre 6.4)
    assert r.windows == 4 + 1 and r.changes == 5 and r.relabels == 2
    assert r.new_classes == ["sit"] and r.batches == []


def test_annotator_column_gives_one_batch_each(project, tmp_path):
    f = tmp_path / "l.csv"
    f.write_text("recording,start,end,label,annotator\n"
                 "alpha,0,6,sit,cy\nalpha,0,6,walk,dee\nbeta,0,4,sit,\n")
    r = project.import_intervals(f)
    assert r.annotators == ["ana", "cy", "dee"] and len(r.batches) == 3
    ann = project.annotations()
    assert sorted(ann["annotator"].unique()) == ["ana", "cy", "dee"]
    # overlapping intervals of different annotators are allowed: double labeling
    assert len(project.disagreements()) == 4


def test_retired_class_refused(project, tmp_path):
    project.add_class("sit")
    project.retire_class("sit")
    f = tmp_path / "l.csv"
    f.write_text("recording,start,end,label\nalpha,0,6,Sit\n")
    with pytest.raises(InputError, match="class 'sit' is retired; it takes no new confirmations"):
        project.import_intervals(f)


# ----------------------------------------------------------------------------- CLI

def test_cli_import(tmp_path, files):
    proj = tmp_path / "p.labeler"
    run("new", proj)
    run("add", proj, *files)
    f = tmp_path / "l.csv"
    f.write_text("recording,start,end,label\nalpha,0,5.2,sit\nalpha,10,10.5,walk\n")
    r = run("import", proj, f, "--dry-run")
    assert r.exit_code == 0, r.output
    assert r.output.splitlines() == [
        "dry run: would confirm 5 window(s) from 2 interval(s) for cli-user: 5 change(s), 0 of them "
        "relabel(s)",
        "  would add class(es): sit, walk",
        "  nothing written",
    ]
    r = run("import", proj, f)
    assert r.exit_code == 0
    lines = r.output.splitlines()
    assert lines[0] == ("confirmed 5 window(s) from 2 interval(s) for cli-user: 5 change(s), 0 of "
                        "them relabel(s)")
    assert lines[1] == "  added class(es): sit, walk" and lines[2].startswith("  batch(es): ")
    f.write_text("recording,start,end,label\nalpha,10.3,10.6,walk\n")
    r = run("import", proj, f, "--dry-run")
    assert "  row 2: no window of alpha is centred in it; nothing labeled" in r.output.splitlines()


@pytest.mark.parametrize("body, message", [
    ("recording,start,end,label\nzeta,1,6,walk\n",
     "row 2, column 'recording': no recording 'zeta' in the project (recordings: alpha, beta); "
     "add it first or fix the name"),
    ("recording,start,end,label\nalpha,1,6,walk\nalpha,8,7.5,sit\n",
     "row 3: end 7.5 is not after start 8; swap them or fix the row"),
    ("recording,start,end,label\nalpha,1,6,walk\nalpha,5,9,sit\n",
     "rows 2 and 3 overlap (alpha 5-6 s) with different labels 'walk' and 'sit'; make them meet "
     "end to start"),
    ("recording,start,end,label,colour\nalpha,1,6,walk,red\n",
     "unknown column 'colour'; columns are recording, start, end, label[, annotator, note]"),
    ("recording,start,label\nalpha,1,walk\n",
     "missing column 'end'; the header must name recording,start,end,label"),
    ("recording,start,end,label\nalpha,one,6,walk\n",
     "row 2: start 'one' and end '6' must be seconds or ISO-8601 clock times"),
    ("recording,start,end,label\nalpha,1,6,\n",
     "row 2, column 'label': empty; give a class name"),
    ("recording,start,end,label\nalpha,100,106,walk\n",
     "row 2: start 100 s is past the end of alpha (60.00 s); fix the row"),
])
def test_cli_bad_import_files_one_line_exit_2(tmp_path, files, body, message):
    proj = tmp_path / "p.labeler"
    run("new", proj)
    run("add", proj, *files)
    f = tmp_path / "bad.csv"
    f.write_text(body)
    r = run("import", proj, f)
    assert r.exit_code == 2
    assert r.stderr.strip() == f"Error: {f}: {message}"
    assert "Traceback" not in r.output
