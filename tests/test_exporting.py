import hashlib
import json

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from labeler import exporting as ex
from labeler.cli import cli
from labeler.errors import InputError
from labeler.project import Project
from labeler.quality import Estimate
from labeler.results import AccuracyReport
from conftest import sensor_frame

START = "2026-05-01T08:00:00.000000Z"


def run(*args, who="cli-user"):
    return CliRunner().invoke(cli, [str(a) for a in args], env={"LABELER_ANNOTATOR": who})


def first_line(result):
    text = result.stderr if result.exit_code else result.stdout
    return text.strip().splitlines()[0] if text.strip() else ""


def clocked(frame):
    """The same samples with clock times (ISO-8601 UTC) in the time column."""
    f = frame.copy()
    t = pd.Timestamp(START) + pd.to_timedelta(f["time"], unit="s")
    f["time"] = t.dt.strftime("%Y-%m-%dT%H:%M:%S.%fZ")
    return f


@pytest.fixture
def files(write_csv):
    return [write_csv(sensor_frame(3000, seed=1), "alpha.csv"),
            write_csv(clocked(sensor_frame(2000, seed=2)), "beta.csv")]


@pytest.fixture
def project(tmp_path, files):
    p = Project.create(tmp_path / "p.labeler", annotator="ana")
    p.add_recordings(files)
    yield p
    p.close()


def win(p, rec, seq):
    w = p.windows()
    return int(w.loc[(w["recording"] == rec) & (w["seq"] == seq), "id"].iloc[0])


def read_manifest(out):
    return json.loads(open(out.files["manifest"], encoding="utf-8").read())


# ----------------------------------------------------------------------------- window rows

def test_window_rows_carry_provenance_and_utc(project, tmp_path):
    project.confirm([win(project, "alpha", s) for s in (0, 1, 2)], "walking", source="map",
                    create_class=True)
    project.confirm([win(project, "beta", 3)], "standing", source="queue", create_class=True)
    out = project.export(tmp_path / "out")
    t = pd.read_csv(out.files["windows"], keep_default_na=False)
    assert list(t.columns) == ex.WINDOW_COLUMNS + ex.GROUP_COLUMNS
    assert list(t["recording"]) == ["alpha"] * 3 + ["beta"]
    assert list(t["window"]) == [0, 1, 2, 3]
    # alpha has no clock time: UTC columns are empty; beta's first sample is at START
    assert list(t["start_utc"][:3]) == [""] * 3
    row = t.iloc[3]
    assert row["start_s"] == pytest.approx(3 * 1.28) and row["end_s"] == pytest.approx(3 * 1.28 + 2.56)
    assert row["start_utc"] == "2026-05-01T08:00:03.840000Z"
    assert row["end_utc"] == "2026-05-01T08:00:06.400000Z"
    assert row["label"] == "standing" and row["status"] == "confirmed" and row["source"] == "queue"
    assert row["annotator"] == "ana" and row["confidence"] == 1 and row["margin"] == ""
    at = project.labels().set_index("window_id").loc[win(project, "beta", 3), "at"]
    assert row["confirmed_at"] == at
    assert set(t["retired"]) == {False}


def test_window_table_proposals_and_selection():
    windows = pd.DataFrame({"id": [1, 2, 3, 4], "recording": ["r"] * 4, "seq": [0, 1, 2, 3],
                            "start_s": [0.0, 1.0, 2.0, 3.0], "stop_s": [2.0, 3.0, 4.0, 5.0]})
    labels = pd.DataFrame({"window_id": [2], "class": ["sit"], "annotator": ["ana"],
                           "at": ["2026-01-01T00:00:00.000000Z"], "source": ["map"]})
    proposals = pd.DataFrame({"window_id": [1, 2, 3], "label": ["sit", "walk", "walk"],
                              "confidence": [0.9, 0.4, 0.6], "margin": [0.8, 0.1, 0.3]})
    t = ex.window_table(windows, labels, proposals, {"r": None}, retired={"walk"})
    # window 4 has neither a confirmation nor a proposal: not a training row
    assert list(t["window_id"]) == [1, 2, 3]
    assert list(t["status"]) == ["proposed", "confirmed", "proposed"]
    # the confirmation overrides the proposal of its window
    assert list(t["label"]) == ["sit", "sit", "walk"]
    assert list(t["confidence"]) == [0.9, 1.0, 0.6]
    assert t["margin"].iloc[0] == 0.8 and np.isnan(t["margin"].iloc[1])
    assert list(t["retired"]) == [False, False, True]
    assert list(ex.select(t, confirmed_only=True)["window_id"]) == [2]
    assert list(ex.select(t, min_confidence=0.7)["window_id"]) == [1, 2]
    assert list(ex.select(t, classes=["WALK"])["window_id"]) == [3]


# ----------------------------------------------------------------------------- segments

def test_segments_merge_consecutive_windows_of_one_label():
    # windows of 2 s every 1 s; seq 5 missing (a gap in the recording), so 4 and 6 are not consecutive
    seqs = [0, 1, 2, 3, 4, 6, 7]
    t = pd.DataFrame({"recording": "r", "window": seqs, "start_s": [float(s) for s in seqs],
                      "label": ["a", "a", "b", "a", "a", "a", "a"],
                      "status": ["confirmed", "proposed", "proposed", "confirmed", "confirmed",
                                 "proposed", "proposed"],
                      "confidence": [1.0, 0.5, 0.7, 1.0, 1.0, 0.8, 0.6],
                      "start_utc": pd.NaT, "retired": False})
    t["start_utc"] = pd.to_datetime(t["start_utc"], utc=True)
    s = ex.segments(t, {"r": (2.0, 1.0)})
    assert list(s.columns) == ex.SEGMENT_COLUMNS
    assert list(s["label"]) == ["a", "b", "a", "a"]
    assert list(s["windows"]) == [2, 1, 2, 2]
    assert list(s["confirmed"]) == [1, 0, 2, 0]
    # each window stands for [centre - step/2, centre + step/2]; centre = start + 1
    assert list(s["start"]) == [0.5, 2.5, 3.5, 6.5]
    assert list(s["end"]) == [2.5, 3.5, 5.5, 8.5]
    assert list(s["confidence_min"]) == [0.5, 0.7, 1.0, 0.6]
    assert s["confidence_mean"].tolist() == pytest.approx([0.75, 0.7, 1.0, 0.7])
    assert s["start_utc"].isna().all()


def test_segments_file_with_utc(project, tmp_path):
    project.confirm([win(project, "beta", s) for s in (2, 3, 4)], "lifting", create_class=True)
    out = project.export(tmp_path / "out")
    s = pd.read_csv(out.files["segments"])
    assert len(s) == 1
    row = s.iloc[0]
    # windows 2..4 start at 2.56, 3.84, 5.12 s; centres +1.28; spans ±0.64
    assert row["start"] == pytest.approx(3.2) and row["end"] == pytest.approx(7.04)
    assert row["start_utc"] == "2026-05-01T08:00:03.200000Z"
    assert row["end_utc"] == "2026-05-01T08:00:07.040000Z"
    assert row["windows"] == 3 and row["confirmed"] == 3


# ----------------------------------------------------------------------------- manifest

def test_manifest(project, tmp_path, files):
    project.confirm([win(project, "alpha", s) for s in range(5)], "walking", source="map",
                    create_class=True)
    project.confirm([win(project, "alpha", s) for s in range(10, 13)], "standing",
                    source="timeline", create_class=True)
    out = project.export(tmp_path / "out", classes=["walking", "Standing"])
    m = read_manifest(out)
    assert m == out.manifest
    assert m["format"] == ex.MANIFEST_FORMAT and m["tool"]["version"] == "0.1.0"
    assert m["feature_set_version"] == project.feature_set_version
    assert m["windows"]["length_s"] == 2.56 and m["windows"]["step_s"] == 1.28
    # content hashes are SHA-256 of the recording files as read (hashlib, Python standard library)
    assert [r["content_hash"] for r in m["recordings"]] == [
        hashlib.sha256(open(f, "rb").read()).hexdigest() for f in files]
    assert m["recordings"][1]["start_time"] == START and m["recordings"][0]["start_time"] is None
    assert m["counts"]["by_class"] == {"standing": {"confirmed": 3, "proposed": 0},
                                       "walking": {"confirmed": 5, "proposed": 0}}
    assert m["counts"]["by_status"] == {"confirmed": 8, "proposed": 0}
    assert m["counts"]["by_confirmation_source"] == {"map": 5, "timeline": 3}
    assert m["selection"] == {"confirmed_only": False, "min_confidence": None,
                              "classes": ["walking", "standing"]}
    assert m["project"]["as_of_event"] == 8
    for kind in ("windows", "segments"):
        body = open(out.files[kind], "rb").read()
        assert m["files"][kind]["sha256"] == hashlib.sha256(body).hexdigest()
    assert m["files"]["segments"]["rows"] == 2
    assert "qualified person" in m["caution"]


def test_parquet_holds_the_same_rows(project, tmp_path):
    project.confirm([win(project, "beta", s) for s in range(4)], "walking", create_class=True)
    a = project.export(tmp_path / "csv")
    b = project.export(tmp_path / "pq", fmt="parquet")
    pq = pd.read_parquet(b.files["windows"])
    csv = pd.read_csv(a.files["windows"])
    assert list(pq.columns) == list(csv.columns)
    assert pq["start_utc"].dt.strftime(ex.ISO_UTC).tolist() == csv["start_utc"].tolist()
    pd.testing.assert_series_equal(pq["start_s"], csv["start_s"])
    assert pq["label"].tolist() == csv["label"].tolist()


# ----------------------------------------------------------------------------- writing

def test_write_atomic_leaves_old_file_when_writing_fails(tmp_path):
    target = tmp_path / "windows.csv"
    target.write_text("old\n")

    def half_then_fail(p):
        p.write_text("half a ta")
        raise OSError("disk full")

    with pytest.raises(OSError, match="disk full"):
        ex.write_atomic(target, half_then_fail)
    assert target.read_text() == "old\n"
    assert sorted(x.name for x in tmp_path.iterdir()) == ["windows.csv"]


def test_export_refuses_to_overwrite_and_bad_options(project, tmp_path):
    project.confirm([win(project, "alpha", 0)], "walking", create_class=True)
    project.export(tmp_path / "out")
    with pytest.raises(InputError, match=r"windows.csv: exists already; give another folder or "
                                          r"--overwrite"):
        project.export(tmp_path / "out")
    project.export(tmp_path / "out", overwrite=True)
    with pytest.raises(InputError, match="minimum confidence 1.5 is outside 0-1"):
        project.export(tmp_path / "o2", min_confidence=1.5)
    with pytest.raises(InputError, match="no class 'flying' to export; classes: walking"):
        project.export(tmp_path / "o2", classes=["flying"])
    (tmp_path / "afile").write_text("x")
    with pytest.raises(InputError, match="afile: is a file; give a folder for the export"):
        project.export(tmp_path / "afile")


# ----------------------------------------------------------------------------- through the CLI

def test_cli_export_and_class_management(tmp_path, files):
    proj = tmp_path / "p.labeler"
    assert run("new", proj).exit_code == 0
    assert run("add", proj, *files).exit_code == 0
    assert run("confirm", proj, "walk", "--windows", "1-4", "--new-class").exit_code == 0
    assert run("confirm", proj, "stand", "--windows", "5-6", "--new-class").exit_code == 0
    assert run("confirm", proj, "amble", "--windows", "7", "--new-class", who="bo").exit_code == 0
    assert run("confirm", proj, "carry", "--windows", "8", "--new-class", who="bo").exit_code == 0

    # rename: the label follows, old events show the new name
    r = run("class", "rename", proj, "walk", "walking")
    assert r.exit_code == 0 and r.output == "renamed walk to walking\n"
    # merge: amble's windows move to walking (their own batch); amble is retired, merged
    r = run("class", "merge", proj, "amble", "walking")
    assert r.exit_code == 0 and r.output == "merged amble into walking: 1 label(s) moved\n"
    # retire: no new confirmations, existing ones kept and marked
    r = run("class", "retire", proj, "carry")
    assert r.exit_code == 0 and r.output == "retired carry\n"
    r = run("confirm", proj, "carry", "--windows", "9")
    assert r.exit_code == 2
    assert first_line(r) == "Error: class 'carry' is retired; it takes no new confirmations"
    r = run("confirm", proj, "amble", "--windows", "9")
    assert first_line(r) == "Error: class 'amble' was merged into 'walking'; use 'walking'"

    r = run("export", proj, tmp_path / "out")
    assert r.exit_code == 0, r.output
    assert r.output.splitlines()[0] == (f"wrote 8 window(s) (8 confirmed, 0 proposed) and 4 "
                                        f"segment(s) to {tmp_path / 'out'}")
    t = pd.read_csv(tmp_path / "out" / "windows.csv")
    assert t["label"].tolist() == ["walking"] * 4 + ["stand"] * 2 + ["walking", "carry"]
    assert t["retired"].tolist() == [False] * 7 + [True]
    assert t["source"].tolist() == ["cli"] * 6 + ["class-merge", "cli"]
    # window 7 is still bo's label, moved by the merge batch
    assert t["annotator"].tolist() == ["cli-user"] * 6 + ["bo", "bo"]
    m = json.loads((tmp_path / "out" / "manifest.json").read_text())
    cls = {c["name"]: c for c in m["classes"]}
    assert cls["amble"]["retired"] and cls["amble"]["merged_into"] == "walking"
    assert cls["carry"]["retired"] and cls["carry"]["merged_into"] is None
    assert not cls["walking"]["retired"]
    # the history keeps window 7's first confirmation as amble, and the merge event after it
    with Project.open(proj) as p:
        h = p.history()
    seven = h[h["window_id"] == 7]
    assert seven["class"].tolist() == ["amble", "walking"]
    assert seven["source"].tolist() == ["cli", "class-merge"]

    r = run("export", proj, tmp_path / "out")
    assert r.exit_code == 2 and first_line(r) == (
        f"Error: {tmp_path / 'out' / 'windows.csv'}: exists already; give another folder or "
        "--overwrite")
    r = run("export", proj, tmp_path / "o2", "--min-confidence", "2")
    assert r.exit_code == 2 and first_line(r) == (
        "Error: Invalid value for '--min-confidence': 2.0 is not in the range 0.0<=x<=1.0; usage: "
        "cli export [OPTIONS] PROJECT FOLDER; see `cli export --help`")
    r = run("export", proj, tmp_path / "o3", "--confirmed-only", "--class", "stand",
            "--format", "parquet")
    assert r.exit_code == 0
    assert pd.read_parquet(tmp_path / "o3" / "windows.parquet")["label"].tolist() == ["stand"] * 2


def test_nothing_to_export(tmp_path, files):
    with Project.create(tmp_path / "e.labeler", annotator="ana") as p:
        p.add_recordings(files[:1])
        with pytest.raises(InputError, match="nothing to export: no window is confirmed or "
                                              "proposed yet; confirm some windows first"):
            p.export(tmp_path / "out")
        assert not (tmp_path / "out").exists()
        p.confirm([1], "walking", create_class=True)
        p.add_class("sitting")
        with pytest.raises(InputError, match="no labeled window passes the selection"):
            p.export(tmp_path / "out", classes=["sitting"])


def fixed_proposals(monkeypatch):
    """Fix the proposals and the accuracy estimate a project reports, to check how export uses
    them."""
    from labeler.service.audits import Audits
    from labeler.service.proposals import Proposals

    def table(self):
        w = self.catalog.windows()
        return pd.DataFrame({"window_id": w["id"], "label": ["walking"] * len(w),
                             "confidence": np.linspace(0.3, 0.9, len(w)),
                             "margin": np.linspace(0.0, 0.6, len(w))})

    def accuracy_estimate(self):
        return AccuracyReport(run_id=1, estimate=Estimate(0.8, 0.7, 0.9, "audit", 40, note="n"),
                              calibration={"confidence": [0.3, 0.9], "probability": [0.5, 0.95],
                                           "fitted_on": 40})

    monkeypatch.setattr(Proposals, "table", table)
    monkeypatch.setattr(Audits, "accuracy_estimate", accuracy_estimate)


def test_export_with_proposals(tmp_path, files, monkeypatch):
    with Project.create(tmp_path / "p.labeler", annotator="ana") as p:
        p.add_recordings(files[:1])
        p.confirm([1, 2], "sitting", create_class=True)
        p.add_class("walking")
    fixed_proposals(monkeypatch)
    p = Project.open(tmp_path / "p.labeler", annotator="ana")
    out = p.export(tmp_path / "out")
    t = pd.read_csv(out.files["windows"])
    assert len(t) == p.n_windows
    assert t["status"].tolist()[:3] == ["confirmed", "confirmed", "proposed"]
    assert t["label"].tolist()[:3] == ["sitting", "sitting", "walking"]
    conf = np.linspace(0.3, 0.9, p.n_windows)
    # the confidence column is the calibrated one: 0.3 -> 0.5, 0.9 -> 0.95, linear between
    calibrated = 0.5 + (conf - 0.3) / 0.6 * 0.45
    assert t["confidence"].iloc[2:].tolist() == pytest.approx(calibrated[2:].tolist())
    m = read_manifest(out)
    acc = m["accuracy_estimate"]
    assert (acc["value"], acc["low"], acc["high"], acc["basis"], acc["n"], acc["run_id"]) == \
        (0.8, 0.7, 0.9, "audit", 40, 1)
    assert acc["confidence_column"].startswith("calibrated")
    assert m["accuracy_estimate_absent"] is None
    assert m["counts"]["by_status"] == {"confirmed": 2, "proposed": p.n_windows - 2}
    keep = p.export(tmp_path / "o2", min_confidence=0.6)
    t2 = pd.read_csv(keep.files["windows"])
    assert (t2.loc[t2["status"] == "proposed", "confidence"] >= 0.6).all()
    assert (t2["status"] == "confirmed").sum() == 2
    p.close()
