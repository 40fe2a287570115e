"""Proposals through Project and the CLI: runs, cached graph, warm start, queue, audit, estimate."""

import numpy as np
import pytest
from click.testing import CliRunner

from labeler.cli import cli
from labeler.errors import InputError
from labeler.project import Project
from labeler.recordings import recording_from_frame
from labeler.synthetic import simulate_recording, window_truth


def _rec(seed, person, minutes=12):
    sim = simulate_recording(minutes * 60, seed=seed, person=person)
    rec = recording_from_frame(sim.frame, where=sim.name, content_hash=f"h{seed}-{person}",
                               name=sim.name)
    return rec, sim.truth


@pytest.fixture(scope="module")
def sims():
    return [_rec(5, 1), _rec(6, 2), _rec(7, 3, minutes=5)]


def truth_of(p, sims):
    w = p.windows()
    out = np.empty(len(w), dtype=object)
    for rec, truth in sims:
        sel = (w["recording"] == rec.name).to_numpy()
        if sel.any():
            out[sel] = window_truth(truth, w["start_s"][sel], w["stop_s"][sel])
    return out


@pytest.fixture
def project(tmp_path, sims):
    p = Project.create(tmp_path / "p.labeler", annotator="tester")
    p.add_recording_data([sims[0][0], sims[1][0]])
    yield p
    p.close()


def confirm_truth(p, ids, truth, source="api"):
    ids = np.asarray(ids)
    w = p.windows()["id"].to_numpy()
    pos = np.searchsorted(w, ids)
    for c in sorted(set(truth[pos])):
        p.confirm(ids[truth[pos] == c], c, source=source, create_class=True)


def test_refresh_stores_runs_caches_graph_and_warm_starts(project, sims):
    p = project
    with pytest.raises(InputError, match="no confirmed window"):
        p.refresh_proposals()
    truth = truth_of(p, sims)
    q = p.review_queue(40)
    assert set(q["reason"]) == {"unexplored"} and q["window_id"].is_unique
    confirm_truth(p, q["window_id"], truth)
    assert p.store.get_blob("proposals/graph") is not None  # the queue built and stored the graph
    s1 = p.refresh_proposals()
    assert not s1.graph_rebuilt and not s1.warm_start
    props = p.proposals()
    assert len(props) == p.n_windows
    lab = p.labels().set_index("window_id")["class"]
    got = props.set_index("window_id")["label"]
    assert (got.loc[lab.index] == lab).all()  # confirmed windows keep their label
    acc = (props["label"].to_numpy() == truth).mean()
    assert acc > 0.75, acc  # 40 confirmations of ~1100 windows
    # one more confirmation: same graph, warm start, a second run with parameters and summary
    extra = int(props.loc[~props["confirmed"], "window_id"].iloc[0])
    confirm_truth(p, [extra], truth)
    s2 = p.refresh_proposals()
    assert not s2.graph_rebuilt and s2.warm_start
    runs = p.store.runs("proposals")
    assert [r["id"] for r in runs] == [s1.run_id, s2.run_id]
    assert runs[-1]["params"]["alpha"] == 0.9 and runs[-1]["summary"]["confirmed"] == 41
    # a fresh process reads the same proposals
    with Project.open(p.path) as q2:
        again = q2.proposals()
        assert (again["label"] == p.proposals()["label"]).all()
        assert not q2.refresh_proposals().graph_rebuilt
    # a new recording changes the graph
    p.add_recording_data([sims[2][0]])
    s3 = p.refresh_proposals()
    assert s3.graph_rebuilt and s3.windows == p.n_windows


def test_queue_audit_and_accuracy_estimate(project, sims):
    p = project
    truth = truth_of(p, sims)
    with pytest.raises(InputError, match="no proposals yet"):
        p.draw_audit(5)
    confirm_truth(p, p.review_queue(40)["window_id"], truth)
    p.refresh_proposals()
    q = p.review_queue(15)
    assert len(q) == 15 and set(q["reason"]) <= {"uncertain", "unexplored", "conflict", "disagreement"}
    assert not q["window_id"].isin(p.labels()["window_id"]).any()
    a = p.draw_audit(10, random_state=1)
    assert "proposed" not in a.columns and "confidence" not in a.columns  # labeled blind
    assert not a["window_id"].isin(p.labels()["window_id"]).any()
    assert not p.review_queue(50)["window_id"].isin(a["window_id"]).any()  # open audit left alone
    b = p.draw_audit(25, random_state=2)
    assert not set(a["window_id"]) & set(b["window_id"])
    confirm_truth(p, a["window_id"], truth, source="audit")
    est = p.accuracy_estimate()
    assert est.basis == "cross-validation" and "biased" in est.note  # 10 audited < 30
    confirm_truth(p, b["window_id"], truth, source="audit")
    est = p.accuracy_estimate()
    st = p.audit_status()
    assert est.basis == "audit" and est.n == 35
    assert est.value == pytest.approx((st["correct"] == True).mean())  # noqa: E712
    assert est.low <= est.value <= est.high
    assert est.training_set.value >= est.value
    # the proposals at draw time were scored, not later ones
    props = p.proposals().set_index("window_id")
    assert set(st["window_id"]) <= set(props.index)


def test_a_conflict_is_raised_until_someone_looks_at_it_alone(project, sims):
    p = project
    truth = truth_of(p, sims)
    confirm_truth(p, p.review_queue(40)["window_id"], truth)
    props = p.refresh_proposals() and p.proposals()
    # a slip in a bulk pick: a confident, unconfirmed window confirmed as another class
    open_ = props[~props["confirmed"]].sort_values("confidence", ascending=False)
    wid = int(open_["window_id"].iloc[0])
    other = next(c for c in p.active_classes() if c != open_["label"].iloc[0])
    p.confirm([wid], other, source="map")
    p.refresh_proposals()
    q = p.review_queue(20)
    assert q.loc[q["window_id"] == wid, "reason"].tolist() == ["conflict"]
    # the annotator looks at it in the queue and keeps the label: it is not raised again
    p.confirm([wid], other, source="queue")
    p.refresh_proposals()
    assert wid not in p.review_queue(20)["window_id"].tolist()
    # a later bulk pick over it makes it a candidate again
    p.confirm([wid], other, source="map")
    p.refresh_proposals()
    assert wid in p.review_queue(20)["window_id"].tolist()


def run(*args):
    r = CliRunner().invoke(cli, [str(x) for x in args], env={"LABELER_ANNOTATOR": "cli-user"})
    return r


def test_cli_commands(project, sims):
    p = project
    path = p.path
    truth = truth_of(p, sims)
    r = run("queue", path, "-n", "5")
    assert r.exit_code == 0, r.output
    assert "unexplored" in r.output and len(r.output.strip().splitlines()) == 6
    r = run("propose", path)
    assert r.exit_code == 2 and "no confirmed window" in r.output
    confirm_truth(p, p.review_queue(30)["window_id"], truth)
    r = run("propose", path, "--neighbors", "8")
    assert r.exit_code == 0, r.output
    assert "proposed from 30 confirmed" in r.output and "suggestions" in r.output
    r = run("audit", path, "-n", "4", "--seed", "3")
    assert r.exit_code == 0 and r.output.count("  window ") == 4
    r = run("audit", path, "--status")
    assert "4 window(s) drawn, 0 answered" in r.output
    r = run("accuracy", path)
    assert r.exit_code == 0 and "cross-validation of 30" in r.output, r.output
    r = run("propose", path, "--alpha", "1.5")
    assert r.exit_code == 2 and "alpha" in r.output
    r = run("queue", path, "-n", "0")
    assert r.exit_code == 2 and "Invalid value for '-n'" in r.output
