"""Answers that are not an activity: mixed and not sure (labeler.answers, Project.answer)."""

import shutil

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from conftest import sensor_frame
from labeler.cli import cli
from labeler.errors import InputError
from labeler.project import Project

N_WINDOWS = 30  # 2000 samples at 50 Hz, windows of 128 every 64


@pytest.fixture(scope="module")
def template(tmp_path_factory):
    folder = tmp_path_factory.mktemp("answers")
    path = folder / "template.labeler"
    csv = folder / "rows.csv"
    sensor_frame(2000, seed=5).to_csv(csv, index=False)
    with Project.create(path, annotator="ana") as p:
        p.add_recordings([csv])
        p.add_class("sit")
        p.add_class("walk")
        assert p.n_windows == N_WINDOWS
    return path


@pytest.fixture
def project(template, tmp_path):
    path = tmp_path / "p.labeler"
    shutil.copy(template, path)
    with Project.open(path, annotator="ana") as p:
        yield p


def test_an_answer_is_a_batch_of_events_and_undo_takes_it_back(project):
    p = project
    p.confirm([3], "walk")
    b = p.answer([3, 4], "mixed", source="queue", note="arm moves while sitting down")
    assert b.action == "answer" and b.n_windows == 2
    h = p.history()
    last = h[h["batch_id"] == b.batch_id]
    assert list(last["window_id"]) == [3, 4]
    assert set(last["class"]) == {"(mixed)"} and set(last["source"]) == {"queue"}
    assert set(last["annotator"]) == {"ana"} and set(last["action"]) == {"answer"}
    assert list(p.answered()) == [3, 4]
    p.undo()
    lab = p.labels().set_index("window_id")["class"]
    assert lab[3] == "walk" and 4 not in lab.index
    assert list(p.answered()) == []
    p.answer([5], "unsure")
    assert p.labels().set_index("window_id")["class"][5] == "(not sure)"


def test_answers_are_not_classes(project):
    p = project
    p.answer([1], "mixed")
    assert p.active_classes() == ["sit", "walk"]
    for bad in ("(mixed)", "(other)"):
        with pytest.raises(InputError, match="parentheses"):
            p.add_class(bad)
    with pytest.raises(InputError, match="is an answer"):
        p.confirm([2], "(mixed)")
    with pytest.raises(InputError, match="cannot be renamed"):
        p.rename_class("(mixed)", "blend")
    with pytest.raises(InputError, match="cannot be retired"):
        p.retire_class("(mixed)")
    with pytest.raises(InputError, match="cannot be merged"):
        p.merge_classes("walk", "(mixed)")
    with pytest.raises(InputError, match="unknown answer 'maybe'"):
        p.answer([2], "maybe")


def test_answered_windows_leave_the_queue_and_proposals_do_not_learn_them(project):
    p = project
    q0 = p.review_queue(N_WINDOWS)
    assert len(q0) == N_WINDOWS
    p.confirm([1, 2], "sit")
    p.confirm([20, 21], "walk")
    p.answer([10, 11], "mixed")
    p.answer([12], "unsure")
    y, names = p.label_vector()
    assert names == ["sit", "walk"]
    ids = p.windows()["id"].to_numpy()
    assert (y[np.isin(ids, [10, 11, 12])] == -1).all()
    run = p.refresh_proposals()
    assert set(run.classes) == {"sit", "walk"}
    q = p.review_queue(N_WINDOWS)
    assert not set(q["window_id"]) & {1, 2, 10, 11, 12, 20, 21}
    assert len(q) == N_WINDOWS - 7


def test_the_training_set_leaves_answered_windows_out_unless_asked(project, tmp_path):
    p = project
    p.confirm([1, 2], "sit")
    p.confirm([20, 21], "walk")
    p.answer([10], "mixed")
    p.answer([11], "unsure")
    p.refresh_proposals()
    p.export(tmp_path / "out")
    w = pd.read_csv(tmp_path / "out" / "windows.csv")
    assert len(w) == N_WINDOWS - 2
    assert not w["label"].isin(["(mixed)", "(not sure)"]).any()
    p.export(tmp_path / "all", include_answers=True)
    w = pd.read_csv(tmp_path / "all" / "windows.csv")
    assert len(w) == N_WINDOWS
    assert sorted(w.loc[w["label"].str.startswith("("), "label"]) == ["(mixed)", "(not sure)"]


def test_an_audit_does_not_score_not_sure_and_counts_mixed_against_the_proposal(project):
    p = project
    p.confirm([1, 2], "sit")
    p.confirm([20, 21], "walk")
    p.refresh_proposals()
    d = p.draw_audit(3, random_state=0)
    a, b, c = (int(w) for w in d["window_id"])
    p.answer([a], "unsure", source="audit")
    p.answer([b], "mixed", source="audit")
    s = p.audit_status().set_index("window_id")
    assert s.loc[a, "answer"] == "(not sure)" and s.loc[a, "correct"] is None
    assert s.loc[b, "answer"] == "(mixed)" and s.loc[b, "correct"] == False  # noqa: E712
    assert s.loc[c, "answer"] is None or s.loc[c, "answer"] != s.loc[c, "answer"]


def run(*args, who="cli-user"):
    return CliRunner().invoke(cli, [str(a) for a in args], env={"LABELER_ANNOTATOR": who})


def test_answer_through_the_cli(template, tmp_path):
    path = tmp_path / "p.labeler"
    shutil.copy(template, path)
    r = run("answer", path, "mixed", "--windows", "3-4", "--note", "half sitting")
    assert r.exit_code == 0, r.output
    assert r.output.startswith("answered 2 window(s) mixed (batch ")
    r = run("answer", path, "unsure", "--windows", "5")
    assert r.exit_code == 0, r.output
    r = run("answer", path, "mixed")
    assert r.exit_code == 2 and "give either --windows IDS or --span" in r.stderr
    r = run("answer", path, "maybe", "--windows", "5")
    assert r.exit_code == 2 and "'maybe' is not one of 'mixed', 'unsure'" in r.stderr
    r = run("confirm", path, "(mixed)", "--windows", "6")
    assert r.exit_code == 2 and "is an answer, not a class" in r.stderr
    r = run("undo", path)
    assert r.exit_code == 0, r.output
    with Project.open(path) as p:
        assert list(p.answered()) == [3, 4]
        h = p.history()
        assert list(h["action"]) == ["answer", "answer", "answer", "undo"]


def test_answered_windows_are_not_drawn_into_an_audit_nor_smoothed_over_as_confirmed(project):
    p = project
    p.confirm([1, 2], "sit")
    p.confirm([20, 21], "walk")
    p.answer([5, 6, 7], "mixed")
    p.answer([8], "unsure")
    p.refresh_proposals()
    d = p.draw_audit(N_WINDOWS, random_state=0)  # every window left
    assert not set(d["window_id"]) & {1, 2, 5, 6, 7, 8, 20, 21}
    assert len(d) == N_WINDOWS - 8
    # answered windows get a proposal like any unconfirmed window; none is certain by fiat
    props = p.proposals().set_index("window_id")
    assert not props.loc[[5, 6, 7, 8], "confirmed"].any()
    assert (props.loc[[1, 2, 20, 21], "confidence"] == 1.0).all()
