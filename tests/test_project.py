import numpy as np
import pandas as pd
import pytest

from labeler.errors import InputError, ProjectError
from labeler.project import PALETTE, Project
from conftest import sensor_frame


@pytest.fixture
def project(tmp_path, write_csv):
    p = Project.create(tmp_path / "p.labeler", annotator="ana")
    p.add_recordings([write_csv(sensor_frame(3000, seed=1), "alpha.csv"),
                      write_csv(sensor_frame(2000, seed=2), "beta.csv")])
    yield p
    p.close()


def test_windows_and_features(project):
    w = project.windows()
    # 3000 samples at 50 Hz, windows of 128 every 64: floor((3000-128)/64)+1 = 45; 2000: 30
    assert (w["recording"] == "alpha").sum() == 45 and (w["recording"] == "beta").sum() == 30
    X, names = project.features()
    assert X.shape == (75, len(names)) and X.dtype == np.float32 and np.isfinite(X).all()
    assert len(set(names)) == len(names)


def test_add_all_or_nothing(tmp_path, write_csv, project):
    good = write_csv(sensor_frame(1000, seed=5), "gamma.csv")
    bad = write_csv(sensor_frame(1000, seed=6).assign(time=0.0), "delta.csv")
    with pytest.raises(InputError, match="delta.csv: row 3, column 'time': duplicate timestamp"):
        project.add_recordings([good, bad])
    assert list(project.recordings()["name"]) == ["alpha", "beta"]
    with pytest.raises(InputError, match="already in the project as recording 'alpha'"):
        project.add_recordings([tmp_path / "alpha.csv"])


def test_too_short_for_one_window(write_csv, project):
    with pytest.raises(InputError, match="holds no window of 2.56 s"):
        project.add_recordings([write_csv(sensor_frame(100, seed=9), "short.csv")])


def test_confirm_undo_history(project):
    b1 = project.confirm([1, 2, 3], "walking", create_class=True, source="cli")
    b2 = project.confirm([3, 4], "standing", create_class=True, source="map")
    lab = project.labels().set_index("window_id")["class"].to_dict()
    assert lab == {1: "walking", 2: "walking", 3: "standing", 4: "standing"}
    project.undo()  # undoes b2: window 3 back to walking, 4 unlabeled
    lab = project.labels().set_index("window_id")["class"].to_dict()
    assert lab == {1: "walking", 2: "walking", 3: "walking"}
    project.undo()  # undoes b1
    assert len(project.labels()) == 0
    with pytest.raises(InputError, match="nothing to undo for annotator 'ana'"):
        project.undo()
    hist = project.history()
    assert list(hist["action"]) == ["confirm"] * 5 + ["undo"] * 5
    assert set(hist["batch_id"][:3]) == {b1.batch_id}
    # nothing is deleted, and the tables equal the replay of events
    ann, current = project.store.replay()
    assert current == {} and ann == {}


def test_undo_leaves_later_changes(project):
    b1 = project.confirm([1, 2], "walking", create_class=True)
    project.confirm([2], "sitting", create_class=True)
    project.undo(b1.batch_id)
    lab = project.labels().set_index("window_id")["class"].to_dict()
    assert lab == {2: "sitting"}


def test_classes_rename_merge_retire(project):
    project.add_class("walk")
    project.add_class("carry")
    project.add_class("stand")
    assert list(project.classes()["colour"]) == list(PALETTE[:3])
    project.confirm([1, 2], "walk")
    project.confirm([3], "carry")
    project.rename_class("walk", "walking")
    assert project.labels().set_index("window_id")["class"].to_dict()[1] == "walking"
    project.merge_classes("carry", "walking")
    assert set(project.labels()["class"]) == {"walking"}
    with pytest.raises(InputError, match="was merged into 'walking'"):
        project.confirm([5], "carry")
    project.retire_class("stand")
    with pytest.raises(InputError, match="class 'stand' is retired"):
        project.confirm([5], "stand")
    with pytest.raises(InputError, match="exists already"):
        project.add_class("WALKING")
    # history kept: window 3 was carry, then merged
    h = project.history()
    assert list(h[h.window_id == 3]["class"]) == ["carry", "walking"]


def test_bad_window_ids(project):
    with pytest.raises(InputError, match="window 999 is not in the project"):
        project.confirm([999], "walking", create_class=True)
    with pytest.raises(InputError, match="no windows given"):
        project.confirm([], "walking", create_class=True)


def test_span_majority_rule(project):
    # windows of alpha start every 1.28 s and last 2.56 s; [1.0, 6.0] holds the majority of windows
    # starting at 0 (1.56 of 2.56 inside), 1.28, 2.56 and 3.84 (2.16 s inside): ids 1-4
    ids = project.window_ids_in_span("alpha", 1.0, 6.0)
    assert list(ids) == [1, 2, 3, 4]
    with pytest.raises(InputError, match="not after its start"):
        project.window_ids_in_span("alpha", 6.0, 1.0)
    with pytest.raises(InputError, match="no recording 'zeta'"):
        project.window_ids_in_span("zeta", 1.0, 6.0)


def test_signal_roundtrip(project, tmp_path):
    t, sig, channels = project.signal("alpha", 2.0, 4.0)
    frame = sensor_frame(3000, seed=1)
    assert sig.shape == (100, 12) and t[0] == pytest.approx(2.0)
    np.testing.assert_allclose(sig[:, 0], frame["wrist_acc_x"][100:200], rtol=1e-5, atol=1e-6)


def test_reopen_and_refusal(project, tmp_path):
    project.confirm([1], "walking", create_class=True)
    project.close()
    again = Project.open(project.path, annotator="bo")
    assert list(again.labels()["annotator"]) == ["ana"]
    again.close()
    (tmp_path / "junk.labeler").write_bytes(b"not a project")
    with pytest.raises(ProjectError, match="junk.labeler: not a labeler project file"):
        Project.open(tmp_path / "junk.labeler")


def test_import_intervals(project, tmp_path):
    f = tmp_path / "labels.csv"
    f.write_text("recording,start,end,label\nalpha,1.0,6.0,walking\nbeta,0,5.2,standing\n")
    dry = project.import_intervals(f, dry_run=True)
    # beta: windows at 0, 1.28, 2.56 lie inside 0-5.2 s; the one at 3.84 has 1.36 of 2.56 s inside
    assert dry.windows == 4 + 4 and dry.new_classes == ["standing", "walking"]
    assert len(project.labels()) == 0
    project.import_intervals(f)
    lab = project.labels()
    assert len(lab) == 8 and set(lab["source"]) == {"import"}
    f.write_text("recording,start,end,label\nalpha,1,6,walking\nalpha,5,9,sitting\n")
    with pytest.raises(InputError, match="rows 2 and 3 overlap"):
        project.import_intervals(f)
    f.write_text("recording,start,end,label\nzeta,1,6,walking\n")
    with pytest.raises(InputError, match="row 2, column 'recording': no recording 'zeta'"):
        project.import_intervals(f)


@pytest.mark.parametrize("length, step, option", [
    (float("inf"), 1.28, "--window inf"), (float("nan"), 1.28, "--window nan"),
    (0, 1.28, "--window 0"), (-1.0, 1.28, "--window -1"), ("long", 1.28, "--window long"),
    (None, 1.28, "--window None"), (2.56, float("inf"), "--step inf"),
    (2.56, float("nan"), "--step nan"), (2.56, -0.5, "--step -0.5"), (2.56, 3.0, "--step 3"),
])
def test_create_refuses_bad_window_settings(tmp_path, length, step, option):
    with pytest.raises(InputError) as info:
        Project.create(tmp_path / "p.labeler", window_length_s=length, window_step_s=step)
    msg = str(info.value)
    assert msg.startswith(f"{option}: ") and "give" in msg and "\n" not in msg
    assert list(tmp_path.iterdir()) == []


def test_writes_name_the_windows_they_changed(project, tmp_path):
    b1 = project.confirm([3, 1, 2, 2], "walking", create_class=True)
    assert b1.action == "confirm" and b1.window_ids.tolist() == [1, 2, 3] and b1.n_events == 3
    other = Project(project.store, annotator="bo")
    other.confirm([2], "sitting", create_class=True)
    w = project.withdraw([1])
    assert w.action == "withdraw" and w.window_ids.tolist() == [1]
    # undoing ana's first batch: window 1 moved on since (withdrawn) and stays; 2 and 3 go back
    u = project.undo(b1.batch_id[:8])
    assert u.undoes == b1.batch_id and u.window_ids.tolist() == [2, 3]
    assert project.history(batch_id=u.batch_id)["window_id"].tolist() == [2, 3]
    m = project.merge_classes("sitting", "walking")
    assert m.window_ids.tolist() == [2] and m.n_events == 1
    assert project.history(batch_id=m.batch_id)["by"].tolist() == ["ana"]
    assert project.history(batch_id=m.batch_id)["annotator"].tolist() == ["bo"]
    project.add_class("idle")
    assert project.merge_classes("idle", "walking").batch_id is None
    f = tmp_path / "iv.csv"
    f.write_text("recording,start,end,label\nbeta,0,6,walking\n")
    r = project.import_intervals(f)
    wins = project.windows()
    centre = (wins["start_s"] + wins["stop_s"]) / 2
    want = wins.loc[(wins["recording"] == "beta") & (centre > 0) & (centre < 6), "id"].tolist()
    assert r.window_ids.tolist() == want and r.windows == len(want)


def test_history_filters_and_class_log(project):
    project.confirm([1, 2], "walking", create_class=True, source="cli")
    project.confirm([3], "sitting", create_class=True, source="map")
    assert project.history(source="map")["window_id"].tolist() == [3]
    assert project.history(class_name="walking")["window_id"].tolist() == [1, 2]
    assert len(project.history(annotator="nobody")) == 0
    project.rename_class("sitting", "seated")
    log = project.class_log()
    assert log["action"].tolist() == ["add", "add", "rename"]
    assert log.iloc[-1]["class"] == "seated"
    assert log.iloc[-1]["detail"] == {"from": "sitting", "to": "seated"}
