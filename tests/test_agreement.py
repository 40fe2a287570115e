import os
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from sklearn.metrics import cohen_kappa_score

from labeler.agreement import (agreement_report, cohen_kappa, cohen_kappa_from_confusion, confusion,
                               disagreeing, fleiss_kappa, rating_counts)
from labeler.cli import cli
from labeler.project import Project
from conftest import sensor_frame
from storage import Store

ROOT = Path(__file__).resolve().parents[1]


def run(*args, who="cli-user"):
    return CliRunner().invoke(cli, [str(a) for a in args], env={"LABELER_ANNOTATOR": who})


# ----------------------------------------------------------------------------- Cohen's kappa

@pytest.mark.parametrize("seed", range(6))
def test_cohen_kappa_matches_scikit_learn(seed):
    # Cohen, "A coefficient of agreement for nominal scales", 1960, as implemented by
    # sklearn.metrics.cohen_kappa_score (the reference library)
    rng = np.random.default_rng(seed)
    labels = ["sit", "walk", "lift", "carry"][: 2 + seed % 3]
    a = rng.choice(labels, 200)
    b = np.where(rng.random(200) < 0.6, a, rng.choice(labels, 200))
    assert cohen_kappa(a, b) == pytest.approx(cohen_kappa_score(a, b), abs=1e-12)
    assert cohen_kappa(a, b, labels=labels + ["unused"]) == pytest.approx(
        cohen_kappa_score(a, b, labels=labels + ["unused"]), abs=1e-12)


def test_cohen_kappa_by_hand():
    # hand-computed: 50 items, A says yes 25 times, B says yes 30 times, they agree on 20 yes
    # and 15 no. p_o = 35/50 = 0.7; p_e = 0.5 * 0.6 + 0.5 * 0.4 = 0.5; kappa = 0.2 / 0.5 = 0.4
    table = np.array([[20, 5], [10, 15]])
    assert cohen_kappa_from_confusion(table) == pytest.approx(0.4)
    a = ["yes"] * 25 + ["no"] * 25
    b = ["yes"] * 20 + ["no"] * 5 + ["yes"] * 10 + ["no"] * 15
    c = confusion(a, b, ["yes", "no"])
    assert c.to_numpy().tolist() == table.tolist()
    assert cohen_kappa(a, b) == pytest.approx(0.4)
    # both annotators used one class only: chance agreement is 1 and kappa undefined
    assert np.isnan(cohen_kappa(["x"] * 5, ["x"] * 5))


# ----------------------------------------------------------------------------- Fleiss' kappa

def test_fleiss_kappa_worked_example_from_memory():
    # The widely reproduced worked example of Fleiss' kappa (Fleiss, "Measuring nominal scale
    # agreement among many raters", 1971): 10 subjects, 14 raters, 5 categories, kappa = 0.210.
    # The table is written from memory; its column totals (20, 28, 39, 21, 32; 140 ratings) and
    # row totals (14 each) check that it was recalled consistently.
    table = np.array([
        [0, 0, 0, 0, 14],
        [0, 2, 6, 4, 2],
        [0, 0, 3, 5, 6],
        [0, 3, 9, 2, 0],
        [2, 2, 8, 1, 1],
        [7, 7, 0, 0, 0],
        [3, 2, 6, 3, 0],
        [2, 5, 3, 2, 2],
        [6, 5, 2, 1, 0],
        [0, 2, 2, 3, 7],
    ])
    assert table.sum(axis=1).tolist() == [14] * 10
    assert table.sum(axis=0).tolist() == [20, 28, 39, 21, 32]
    assert round(fleiss_kappa(table), 3) == 0.210


def test_fleiss_kappa_by_hand():
    # hand-computed: 4 items, 3 raters, 2 classes.
    # P_i = (sum_j n_ij^2 - 3) / (3 * 2): items [3,0] and [0,3] give (9 - 3) / 6 = 1,
    # items [2,1] and [1,2] give (4 + 1 - 3) / 6 = 1/3; P_bar = (1 + 1 + 1/3 + 1/3) / 4 = 2/3.
    # p_j = 6/12 each; P_e = 0.25 + 0.25 = 0.5; kappa = (2/3 - 1/2) / (1 - 1/2) = 1/3.
    table = [[3, 0], [0, 3], [2, 1], [1, 2]]
    assert fleiss_kappa(table) == pytest.approx(1 / 3)
    with pytest.raises(ValueError, match="same number of raters"):
        fleiss_kappa([[3, 0], [1, 1]])
    assert np.isnan(fleiss_kappa([[3, 0], [3, 0]]))


def test_fleiss_kappa_of_two_raters_is_near_cohen():
    # With two raters Fleiss' kappa is Scott's pi, which uses pooled class shares instead of each
    # rater's own; with similar shares it is close to Cohen's kappa (sklearn as the reference;
    # the reduction to Scott's pi is common practice, no source).
    rng = np.random.default_rng(3)
    a = rng.choice(["p", "q", "r"], 400)
    b = np.where(rng.random(400) < 0.7, a, rng.choice(["p", "q", "r"], 400))
    counts = rating_counts(pd.DataFrame({"a": a, "b": b}), ["p", "q", "r"])
    assert fleiss_kappa(counts) == pytest.approx(cohen_kappa_score(a, b), abs=0.01)


# ----------------------------------------------------------------------------- in a project

@pytest.fixture
def project(tmp_path, write_csv):
    p = Project.create(tmp_path / "p.labeler", annotator="ana")
    p.add_recordings([write_csv(sensor_frame(3000, seed=1), "alpha.csv")])
    for c in ("sit", "walk", "lift"):
        p.add_class(c)
    yield p
    p.close()


def test_project_agreement_and_disagreements(project):
    rng = np.random.default_rng(11)
    ids = project.windows()["id"].to_numpy()
    truth = rng.choice(["sit", "walk", "lift"], ids.size)
    given = {}
    for who, keep, noise in (("ana", 40, 0.1), ("bo", 35, 0.3), ("cy", 30, 0.2)):
        p = Project(project.store, annotator=who)
        chosen = np.sort(rng.choice(ids, keep, replace=False))
        labels = np.where(rng.random(keep) < noise, rng.choice(["sit", "walk", "lift"], keep),
                          truth[chosen - ids[0]])
        for c in ("sit", "walk", "lift"):
            sel = chosen[labels == c]
            if sel.size:
                p.confirm(sel, c)
        given[who] = dict(zip(chosen.tolist(), labels.tolist()))
    rep = project.agreement()
    assert rep["annotators"] == ["ana", "bo", "cy"]
    for pair in rep["pairs"]:
        both = sorted(set(given[pair["a"]]) & set(given[pair["b"]]))
        a = [given[pair["a"]][w] for w in both]
        b = [given[pair["b"]][w] for w in both]
        assert pair["windows"] == len(both)
        assert pair["kappa"] == pytest.approx(cohen_kappa_score(a, b))
        assert pair["confusion"].to_numpy().sum() == len(both)
    every = sorted(set(given["ana"]) & set(given["bo"]) & set(given["cy"]))
    assert rep["fleiss"]["windows"] == len(every)
    counts = np.zeros((len(every), 3), dtype=int)
    for i, w in enumerate(every):
        for who in given:
            counts[i, ["lift", "sit", "walk"].index(given[who][w])] += 1
    assert rep["fleiss"]["kappa"] == pytest.approx(fleiss_kappa(counts))
    differ = sorted(w for w in ids.tolist()
                    if len({given[who][w] for who in given if w in given[who]}) > 1)
    assert project.disagreements().tolist() == differ
    # the current label of a disputed window is the most recent confirmation
    w = differ[0]
    Project(project.store, annotator="bo").confirm([w], "lift")
    assert project.labels().set_index("window_id").at[w, "class"] == "lift"
    assert project.labels().set_index("window_id").at[w, "annotator"] == "bo"


def test_withdrawing_hands_the_window_back_and_disagreements_head_the_queue(project):
    ana, bo = project, Project(project.store, annotator="bo")
    ana.confirm([5, 6], "sit")
    bo.confirm([5], "walk")
    ana.confirm([6], "lift")  # ana changes her mind; bo never labeled window 6
    cur = lambda: project.labels().set_index("window_id")["class"].to_dict()  # noqa: E731
    assert cur()[5] == "walk" and cur()[6] == "lift"  # the most recent confirmation wins
    assert project.disagreements().tolist() == [5]
    q = project.review_queue(10)
    assert q["window_id"].iloc[0] == 5 and q["reason"].iloc[0] == "disagreement"
    bo.withdraw([5])  # back to ana's label, the most recent one left
    assert cur()[5] == "sit" and project.disagreements().tolist() == []
    assert "disagreement" not in set(project.review_queue(10)["reason"])
    ana.withdraw([6])  # nobody else labeled it: unlabeled again
    assert 6 not in cur()
    bo.confirm([5], "lift")
    ana.confirm([5], "walk")
    ana.withdraw([5])  # ana's older label "sit" was replaced, so bo's "lift" is what is left
    assert cur()[5] == "lift"


def test_agreement_report_without_double_labels():
    ann = pd.DataFrame({"window_id": [1, 2], "annotator": ["a", "b"], "label": ["x", "y"]})
    rep = agreement_report(ann)
    assert rep["pairs"] == [] and rep["double_labeled"] == 0 and rep["fleiss"] is None
    assert disagreeing(ann).tolist() == []


def test_cli_agreement(tmp_path, write_csv):
    proj = tmp_path / "p.labeler"
    run("new", proj)
    run("add", proj, write_csv(sensor_frame(600, seed=3), "gamma.csv"))
    r = run("agreement", proj)
    assert r.output == ("no window is labeled by two annotators yet; agreement needs "
                        "double-labeled windows\n")
    run("confirm", proj, "sit", "--windows", "1-4", "--new-class", who="ana")
    run("confirm", proj, "walk", "--windows", "5-8", "--new-class", who="ana")
    run("confirm", proj, "sit", "--windows", "1-3", who="bo")
    run("confirm", proj, "walk", "--windows", "4-8", who="bo")
    r = run("agreement", proj)
    assert r.exit_code == 0, r.output
    # 8 windows; agree on 7. p_o = 7/8; ana 4/8 sit, bo 3/8 sit; p_e = .5*.375 + .5*.625 = .5;
    # kappa = (0.875 - 0.5) / 0.5 = 0.75
    assert r.output.splitlines() == [
        "8 window(s) labeled by two or more of ana, bo; 1 with differing labels now",
        "",
        "ana (rows) vs bo (columns): 8 window(s), agreement 0.875, Cohen's kappa 0.750",
        "        sit  walk",
        "  sit     3     1",
        "  walk    0     4",
    ]


# ----------------------------------------------------------------------------- processes

WORKER = textwrap.dedent("""
    import sys, time, random
    from pathlib import Path
    from labeler.project import Project
    path, who, go, n = sys.argv[1], sys.argv[2], Path(sys.argv[3]), int(sys.argv[4])
    p = Project.open(path, annotator=who)
    rng = random.Random(who)
    while not go.exists():
        time.sleep(0.01)
    for i in range(n):
        ids = rng.sample(range(1, 9), 3)
        p.confirm(ids, rng.choice(["sit", "walk"]), source="map")
        if i % 4 == 3:
            p.undo()
    p.close()
""")


def test_several_processes_on_one_project(tmp_path, write_csv):
    path = tmp_path / "p.labeler"
    with Project.create(path, annotator="ana") as p:
        p.add_recordings([write_csv(sensor_frame(600, seed=3), "gamma.csv")])
        p.add_class("sit")
        p.add_class("walk")
    go = tmp_path / "go"
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    n = 12
    procs = [subprocess.Popen([sys.executable, "-c", WORKER, str(path), who, str(go), str(n)],
                              env=env, stderr=subprocess.PIPE) for who in ("ana", "bo", "cy")]
    time.sleep(0.5)
    go.touch()
    for proc in procs:
        _, err = proc.communicate(timeout=120)
        assert proc.returncode == 0, err.decode()[-2000:]
    with Store.open(path) as store:
        batches = store.batches()
        assert len(batches) == 3 * (n + n // 4)
        assert {b["annotator"] for b in batches} == {"ana", "bo", "cy"}
        ann = {(w, who): c for w, who, c in store.annotations()}
        cur = {w: c for w, c, *_ in store.current_labels()}
        assert (ann, cur) == store.replay()
        assert store.integrity_check() == "ok"
    with Project.open(path) as p:
        a = p.annotations()
        assert set(a["annotator"]) <= {"ana", "bo", "cy"}
        wide = a.pivot(index="window_id", columns="annotator", values="label")
        differ = sorted(w for w, row in wide.iterrows() if row.dropna().nunique() > 1)
        assert p.disagreements().tolist() == differ
