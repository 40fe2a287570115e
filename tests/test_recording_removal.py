"""Recordings as first-class: list, remove (history kept), one channel set per project."""

import shutil

import numpy as np
import pytest
from click.testing import CliRunner

from labeler.cli import cli
from labeler.errors import InputError
from labeler.project import Project
from conftest import sensor_frame


def run(*args):
    return CliRunner().invoke(cli, [str(a) for a in args], env={"LABELER_ANNOTATOR": "ana"})


@pytest.fixture
def project(tmp_path, write_csv):
    files = [write_csv(sensor_frame(3000, seed=1), "alpha.csv"),
             write_csv(sensor_frame(3000, seed=2), "beta.csv")]
    p = Project.create(tmp_path / "p.labeler", annotator="ana")
    p.add_recordings(files)
    w = p.windows()
    a = w[w["recording"] == "alpha"]["id"].to_numpy()
    b = w[w["recording"] == "beta"]["id"].to_numpy()
    p.confirm(a[:5], "walking", create_class=True)
    p.confirm(a[20:25], "sitting", create_class=True)
    p.confirm(b[:5], "sitting")
    p.confirm(b[20:25], "walking")
    p.compute_map("pca")
    p.refresh_proposals()
    yield p
    p.close()


def test_removal_keeps_the_history_and_leaves_the_rest_working(project, tmp_path):
    p = project
    n_events = len(p.history())
    beta = set(p.windows().query("recording == 'beta'")["id"])
    out = p.remove_recording("beta")
    assert out.name == "beta" and out.windows == len(beta) and out.confirmed == 10
    assert list(p.recordings()["name"]) == ["alpha"]
    assert list(p.recordings(include_removed=True)["name"]) == ["alpha", "beta"]
    w = p.windows()
    assert set(w["recording"]) == {"alpha"}
    X, _ = p.features()
    assert X.shape[0] == len(w)
    assert not beta & set(p.labels()["window_id"])
    y, names = p.label_vector()
    assert len(y) == len(w) and (y >= 0).sum() == 10
    # history: every event kept, those of the removed recording included
    h = p.history()
    assert len(h) == n_events and beta & set(h["window_id"])
    # what was computed before the removal shows the recording no more
    assert not beta & set(p.proposals()["window_id"])
    assert not beta & set(p.map()["window_id"])
    assert len(p.review_queue(10)) > 0
    p.refresh_proposals()
    rep = p.export(tmp_path / "out")
    assert rep.windows > 0
    assert p.status().recordings == 1
    with pytest.raises(InputError) as err:
        p.remove_recording("beta")
    assert str(err.value).startswith("no recording 'beta' in the project")


def test_a_removed_recording_can_come_back_under_another_name(project, tmp_path):
    p = project
    src = p.recordings().set_index("name").loc["beta", "source_path"]
    p.remove_recording("beta")
    with pytest.raises(InputError) as err:
        p.add_recordings([src])
    assert str(err.value) == (f"{src}: a recording named 'beta' was removed from the project; "
                              "rename the file to add it again; nothing added")
    again = tmp_path / "beta_again.csv"
    shutil.copyfile(src, again)
    added = p.add_recordings([again])
    assert added[0].name == "beta_again"
    assert len(p.labels()) == 10  # the old labels stay with the removed windows


def test_cli_list_and_remove(project):
    path = project.path
    project.close()
    r = run("recording", "list", path)
    assert r.exit_code == 0, r.output
    assert r.output.splitlines()[0].split() == ["recording", "minutes", "rate", "windows",
                                                "confirmed", "person", "start", "file"]
    assert [ln.split()[0] for ln in r.output.splitlines()[1:]] == ["alpha", "beta"]
    r = run("recording", "remove", path, "beta")
    assert r.exit_code == 2
    assert r.stderr.strip().startswith("Error: removing beta deletes its signal and features from "
                                       "the project file")
    assert "--yes" in r.stderr
    r = run("recording", "remove", path, "beta", "--yes")
    assert r.exit_code == 0, r.output
    assert r.output.splitlines()[0] == ("removed beta: 45 window(s), 10 confirmed; its label events "
                                        "stay in the history")
    r = run("recording", "list", path, "--removed")
    assert "beta" in r.output and "removed" in r.output
    r = run("status", path)
    assert "alpha" in r.output and "beta" not in r.output
    r = run("history", path)
    assert r.exit_code == 0 and "beta#0 (removed)" in r.output


def test_one_channel_set_per_project(tmp_path, write_csv):
    p = Project.create(tmp_path / "c.labeler", annotator="ana")
    p.add_recordings([write_csv(sensor_frame(1000, seed=1), "full.csv")])
    wrist_only = write_csv(sensor_frame(1000, seed=2, sites=("wrist",)), "wrist.csv")
    with pytest.raises(InputError) as err:
        p.add_recordings([wrist_only])
    assert str(err.value) == (f"{wrist_only}: lacks the project's channels hip_acc_x, hip_acc_y, "
                              "hip_acc_z, hip_gyr_x, hip_gyr_y, hip_gyr_z; map its columns to them "
                              "with --column, or add it to a project of its own")
    more = sensor_frame(1000, seed=3, sites=("wrist", "hip", "ankle"))
    added = p.add_recordings([write_csv(more, "more.csv")])
    assert added[0].notes[-1] == ("left out channels the project does not have: ankle_acc_x, "
                                  "ankle_acc_y, ankle_acc_z, ankle_gyr_x, ankle_gyr_y, ankle_gyr_z")
    shuffled = sensor_frame(1000, seed=4)
    cols = ["time"] + list(reversed(shuffled.columns[1:]))
    p.add_recordings([write_csv(shuffled[cols], "shuffled.csv")])
    reference = Project.create(tmp_path / "r.labeler", annotator="ana")
    reference.add_recordings([write_csv(shuffled, "ordered.csv")])
    X, names = p.features()
    Xr, names_r = reference.features()
    assert names == names_r
    np.testing.assert_array_equal(X[-len(Xr):], Xr)
    assert len(p.windows()) == X.shape[0]
    p.close()
    reference.close()
