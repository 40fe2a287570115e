"""Proposals through Project and the CLI: runs, cached graph, warm start, queue, audit, estimate."""

from pathlib import Path

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


def first_run(p, sims):
    """The project's truth per window, and its first proposal run (no estimate) after 30 queue
    windows confirmed with their truth."""
    truth = truth_of(p, sims)
    confirm_truth(p, p.review_queue(30)["window_id"], truth)
    return truth, p.refresh_proposals(estimate=False)


def answer_an_audit(p, truth):
    """40 queue windows confirmed, proposals, then a blind audit of 12 drawn and answered."""
    confirm_truth(p, p.review_queue(40)["window_id"], truth)
    p.refresh_proposals()
    a = p.draw_audit(12, random_state=3)
    confirm_truth(p, a["window_id"], truth, source="audit")


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
    e1 = p.accuracy_estimate()
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
    confirm_truth(p, b["window_id"], truth, source="audit")
    st = p.audit_status()
    assert st["stratum"].notna().all() and (st["stratum_size"] >= 1).all()
    # answers count at once, scored against the proposals they were drawn from (Cochran's
    # stratified estimator; tests/test_estimate.py checks it on a worked example)
    run1 = p.store.latest_run("proposals")["id"]
    assert e1.run_id == run1 and not e1.audit_runs
    from labeler.estimate import audit_accuracy
    props = p.proposals()
    ref, _ = audit_accuracy((st["correct"] == True).to_numpy(), st["confidence"].to_numpy(float),  # noqa: E712
                            st["stratum"].to_numpy(int), st["stratum_size"].to_numpy(int),
                            props.loc[~props["confirmed"], "confidence"].to_numpy(float),
                            random_state=int(run1))

    def audit_part(e):
        return [s for s in e.estimate.details.get("sources", [e.estimate.as_dict()])
                if s["basis"] == "audit"][0]

    now = p.accuracy_estimate()
    assert now.run_id == run1 and now.audit_runs == (run1,) and "audit" in now.basis
    assert audit_part(now)["value"] == pytest.approx(ref.value) and audit_part(now)["n"] == 35
    assert (audit_part(now)["low"], audit_part(now)["high"]) == pytest.approx((ref.low, ref.high))
    assert f"scored against proposal run {run1}" in now.note and "hidden" not in now.note
    # the next proposals learned from the answers: each is scored by proposals made without it
    p.refresh_proposals()
    est = p.accuracy_estimate()
    run2 = p.store.latest_run("proposals")["id"]
    assert est.audit_runs == (run1,) and "audit" in est.basis
    assert f"scored against proposal run {run2} (35 of them hidden from it in turn" in est.note
    assert audit_part(est)["n"] == 35
    assert est.low <= est.value <= est.high
    assert est.training_set.value >= est.value
    assert p.accuracy_estimate().as_dict() == est.as_dict()  # the same when asked again
    props = props.set_index("window_id")
    assert set(st["window_id"]) <= set(props.index)


def test_estimate_is_stored_once_per_run_and_shared_by_cli_and_export(project, sims, tmp_path):
    import json

    p = project
    truth = truth_of(p, sims)
    confirm_truth(p, p.review_queue(60, random_state=0)["window_id"], truth, source="queue")
    # the queue's random draws keep their probability for the estimate's weights
    draws = p.store.queue_draws()
    assert len(draws) >= 50 and all(0 < d["probability"] <= 1 and d["pool"] > 1 for d in draws)
    run = p.refresh_proposals()
    # computed with the run: the blob is there before anyone asks, and asking only reads it
    stored = p.store.get_blob("proposals/estimate")
    assert stored is not None and stored[1]["run_id"] == run.run_id
    computed = []
    real = p._audits.compute
    p._audits.compute = lambda r: computed.append(r) or real(r)
    e = p.accuracy_estimate()
    assert e.run_id == run.run_id and computed == []
    assert p.accuracy_estimate().as_dict() == e.as_dict()  # read back, not computed again
    p._audits.compute = real
    # a run that leaves it to the first reader
    later = p.refresh_proposals(estimate=False)
    assert p.store.get_blob("proposals/estimate")[1]["run_id"] != later.run_id
    assert p.accuracy_estimate().run_id == later.run_id
    assert p.store.get_blob("proposals/estimate")[1]["run_id"] == later.run_id
    e = p.accuracy_estimate()
    path = p.path
    p.close()
    r = CliRunner().invoke(cli, ["accuracy", str(path)])
    assert r.exit_code == 0, r.output
    if e.basis == "none":
        assert e.note in r.output.replace("\n", " ") or "no estimate" in r.output
    else:
        assert f"{e.value:.3f}" in r.output and f"proposals run {e.run_id}" in r.output
        assert e.expected_wrong is not None and e.calibration is not None
    with Project.open(path) as p2:
        out = p2.export(tmp_path / "out")
        m = json.loads((tmp_path / "out" / "manifest.json").read_text())
        assert m["accuracy_estimate"]["run_id"] == e.run_id
        assert m["accuracy_estimate"]["value"] == (None if e.value is None else pytest.approx(e.value))
        assert m["accuracy_estimate"]["note"] == e.note
        import pandas as pd
        t = pd.read_csv(out.files["windows"])
        prop = p2.proposals().set_index("window_id")
        tp = t[t["status"] == "proposed"]
        if e.calibration:
            from labeler.estimate import calibrate
            want = calibrate(prop.loc[tp["window_id"], "confidence"].to_numpy(), e.calibration)
            assert tp["confidence"].to_numpy() == pytest.approx(want, abs=1e-6)
            assert m["accuracy_estimate"]["confidence_column"].startswith("calibrated")
        # an export with no proposed window carries no proposal accuracy
        p2.export(tmp_path / "conf", confirmed_only=True)
        m2 = json.loads((tmp_path / "conf" / "manifest.json").read_text())
        assert m2["accuracy_estimate"] is None and "no proposed window" in m2["accuracy_estimate_absent"]


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
    assert "expected wrong" in r.output or "  no figure yet: time-blocked" in r.output
    assert "far from any confirmation" not in r.output
    r = run("audit", path, "-n", "4", "--seed", "3")
    assert r.exit_code == 0 and r.output.count("  window ") == 4
    r = run("audit", path, "--status")
    assert "4 window(s) drawn, 0 answered" in r.output
    r = run("accuracy", path)
    e = p.accuracy_estimate()  # the one the command printed, stored with the run
    assert r.exit_code == 0, r.output
    if e.basis == "none":
        assert "no figure yet" in r.output and "stretch" in r.output
        assert e.needs_audit
        assert f"for a figure now: `labeler audit {path} -n 30`, then label each" in r.output
    else:
        assert f"{e.value:.3f}" in r.output and "cross-validation of 30 confirmed" in r.output
    r = run("propose", path, "--alpha", "1.5")
    assert r.exit_code == 2 and "alpha" in r.output
    r = run("queue", path, "-n", "0")
    assert r.exit_code == 2 and "Invalid value for '-n'" in r.output


def test_without_a_figure_the_app_says_how_to_get_one():
    from labeler.app import words
    from labeler.quality import Estimate
    from labeler.results import AccuracyReport

    none = Estimate(float("nan"), 0.0, 1.0, "none", 0, note="no figure yet: walking (1 stretch)")
    text = words.estimate(AccuracyReport(run_id=3, estimate=none, needs_audit=True))
    assert "No accuracy figure yet" in text and "press <b>Audit</b>" in text
    assert "press" not in words.estimate(AccuracyReport(run_id=3, estimate=none))
    back = AccuracyReport.from_dict(AccuracyReport(run_id=3, estimate=none, needs_audit=True).as_dict())
    assert back.needs_audit


def test_a_queue_drawn_ahead_is_the_queue_of_its_state_and_kept_only_when_shown(project, sims,
                                                                                tmp_path):
    """A review queue drawn ahead of showing it (the app draws it off the page) is the queue
    drawn in place in the same state, and its draws' probabilities are kept only when it is
    shown, and only while nothing changed since; a stale one gives way to a queue drawn then
    (the estimate weighs queue answers by the probabilities their draws had when shown: common
    practice, no source)."""
    import shutil

    p = project
    truth = truth_of(p, sims)
    confirm_truth(p, p.review_queue(40, random_state=1)["window_id"], truth)
    p.refresh_proposals(estimate=False)
    before = {d["window_id"]: d["probability"] for d in p.store.queue_draws()}
    ahead = p.draw_review_queue()
    assert len(ahead.rows) == 50 and ahead.draws and ahead.run_id == p.proposals_run_id()
    assert {d["window_id"]: d["probability"] for d in p.store.queue_draws()} == before
    # the same state in another file: the queue drawn there in place is the one drawn ahead
    twin = tmp_path / "twin.labeler"
    p.store.conn.execute("PRAGMA wal_checkpoint(FULL)")
    shutil.copy(p.path, twin)
    with Project.open(twin, annotator="tester") as q:
        here = q.review_queue(50)
        kept_there = {d["window_id"]: d["probability"] for d in q.store.queue_draws()}
    shown = p.show_review_draw(ahead)
    assert shown["window_id"].tolist() == here["window_id"].tolist()
    assert shown["reason"].tolist() == here["reason"].tolist()
    kept = {d["window_id"]: d["probability"] for d in p.store.queue_draws()}
    assert kept == kept_there
    assert {w: kept[w] for w, _q, _m in ahead.draws} == {w: q_ for w, q_, _m in ahead.draws}
    # stale: a label event since the draw; the queue shown is drawn anew and only its draws kept
    with p.store.atomic():
        p.store.conn.execute("DELETE FROM queue_draws")
    w = p.windows()["id"].to_numpy()
    stale = p.draw_review_queue()
    first = int(stale.rows[0]["window_id"])
    p.confirm([first], str(truth[np.searchsorted(w, first)]), source="queue")
    fresh = p.show_review_draw(stale)
    assert first not in fresh["window_id"].tolist()
    newer = {d["window_id"] for d in p.store.queue_draws()}
    assert newer and newer <= set(fresh["window_id"])
    assert not ({w_ for w_, _q, _m in stale.draws} - set(fresh["window_id"])) & newer
    assert {w_ for w_, _q, _m in stale.draws} - set(fresh["window_id"])


def test_a_wide_interval_resting_on_no_audit_comes_with_the_advice_to_answer_one():
    from labeler.app import words
    from labeler.quality import WIDE_INTERVAL, Estimate, audit_would_narrow
    from labeler.results import AccuracyReport

    wide = Estimate(0.8, 0.8 - WIDE_INTERVAL, 0.81, "cross-validation", 50)
    assert audit_would_narrow(wide)
    assert not audit_would_narrow(Estimate(0.8, 0.7, 0.9, "cross-validation", 50))
    assert not audit_would_narrow(Estimate(0.8, 0.3, 0.9, "cross-validation + audit", 80))
    assert not audit_would_narrow(Estimate(0.8, 0.3, 0.9, "audit", 30))
    assert not audit_would_narrow(Estimate(float("nan"), 0.0, 1.0, "none", 0))
    text = words.estimate(AccuracyReport(run_id=3, estimate=wide, audit_advised=True))
    assert "The interval is wide: press <b>Audit</b>" in text
    assert "interval is wide" not in words.estimate(AccuracyReport(run_id=3, estimate=wide))
    back = AccuracyReport.from_dict(AccuracyReport(run_id=3, estimate=wide,
                                                   audit_advised=True).as_dict())
    assert back.audit_advised


def test_accuracy_advises_an_audit_while_the_interval_is_wide_and_not_once_answered(
        project, sims, monkeypatch):
    import labeler.quality

    p = project
    truth = truth_of(p, sims)
    # windows spread over the recordings, one action each: every class in several stretches, a
    # figure from cross-validation alone
    for wid in p.windows()["id"].to_numpy()[::12]:
        confirm_truth(p, [wid], truth)
    p.refresh_proposals()
    e = p.accuracy_estimate()
    assert e.basis == "cross-validation", e.note
    # whether the interval counts as wide is read when the report is made: every figure is wide here
    monkeypatch.setattr(labeler.quality, "WIDE_INTERVAL", 0.0)
    e = p.accuracy_estimate()
    assert e.audit_advised and not e.needs_audit
    path = p.path
    r = run("accuracy", path)
    assert r.exit_code == 0, r.output
    assert f"the interval is wide: to narrow it, `labeler audit {path} -n 30`" in r.output
    a = p.draw_audit(12, random_state=3)
    confirm_truth(p, a["window_id"], truth, source="audit")
    e = p.accuracy_estimate()
    assert "audit" in e.basis and not e.audit_advised
    assert "interval is wide" not in run("accuracy", path).output


def test_the_audit_part_of_the_estimate_does_not_change_with_the_run_alone(project, sims):
    # two proposal runs on the same labels: the audit's answers are dealt into held-out folds and
    # bootstrapped the same way, so the headline is the same (it used to move by several points)
    p = project
    truth = truth_of(p, sims)
    answer_an_audit(p, truth)
    first = p.refresh_proposals()
    e1 = p.accuracy_estimate()
    second = p.refresh_proposals()
    e2 = p.accuracy_estimate()
    assert second.run_id != first.run_id and e2.run_id == second.run_id
    assert "audit" in e1.basis and e1.basis == e2.basis
    audit1 = next(s for s in e1.estimate.details.get("sources", [e1.estimate.as_dict()])
                  if s["basis"] == "audit")
    audit2 = next(s for s in e2.estimate.details.get("sources", [e2.estimate.as_dict()])
                  if s["basis"] == "audit")
    # (the runs' warm starts differ in the last digits only)
    assert [audit1[k] for k in ("value", "low", "high")] == pytest.approx(
        [audit2[k] for k in ("value", "low", "high")], abs=1e-9)


def test_accuracy_with_an_answered_audit_reads_the_stored_estimate_without_heavy_imports(
        project, sims):
    # the figure as the Python API gives it, printed by `labeler accuracy` in a new process that
    # imports neither pandas nor scipy nor scikit-learn (their start-up alone exceeds a second
    # on a loaded machine; common practice, no source)
    import json
    import subprocess
    import sys

    p = project
    truth = truth_of(p, sims)
    answer_an_audit(p, truth)
    want = p.accuracy_estimate()  # stores the run's part, as `labeler propose` does
    assert want.audit_runs and "audit" in want.basis
    path = str(p.path)
    p.close()
    code = ("import json, sys\nfrom labeler.cli import main\n"
            "try:\n    main(['accuracy', sys.argv[1]])\nexcept SystemExit as e:\n"
            "    assert not e.code, e.code\n"
            "heavy = sorted({m.split('.')[0] for m in sys.modules} & {'pandas', 'scipy', 'sklearn'})\n"
            "print(json.dumps(heavy))\n")
    here = Path(__file__).resolve().parents[1]  # this checkout's labeler, not an installed one
    out = subprocess.run([sys.executable, "-c", code, path], check=True, capture_output=True,
                         text=True, cwd=here).stdout.splitlines()
    assert json.loads(out[-1]) == []
    assert out[0].startswith(f"accuracy of proposed windows {want.value:.3f} ("
                             f"{want.level:.0%} interval {want.low:.3f}-{want.high:.3f})")
    assert out[-2] == f"  rests on: {want.note}" and "12 window(s)" in want.note


def test_the_proposer_kept_by_the_process_proposes_as_a_refresh_from_nothing(project, sims,
                                                                            tmp_path):
    """The app's worker refreshes with the proposer that made the latest run (warm start from
    its own label mass, only the class with a new confirmation solved again). Spreading stops
    each class within tol = 1e-6 of the exact solution (2-norm of the column), so proposals
    made from nothing on the same confirmations agree up to that: the same labels wherever the
    margin is not a near tie, confidences within 1e-4; margins within 1e-3, as they also take
    the distribution before smoothing, where a window with little label mass (the error divided
    by its mass) moves most (tolerances chosen here, no source)."""
    p = project
    truth = truth_of(p, sims)
    confirm_truth(p, p.review_queue(40)["window_id"], truth)
    p.refresh_proposals(estimate=False)
    kept = p._ctx.cache["proposer"][2]
    unconfirmed = p.proposals().query("not confirmed")["window_id"].to_numpy()
    for extra in unconfirmed[[5, 300]]:  # one more confirmation each time, as the worker does
        confirm_truth(p, [int(extra)], truth)
        p.reread()
        run = p.refresh_proposals(estimate=False)
        assert run.warm_start and p._ctx.cache["proposer"][2] is kept
        assert run.iterations < 40
    # the same recordings and confirmations in a new project, proposed once from nothing
    with Project.create(tmp_path / "cold.labeler", annotator="tester") as cold:
        cold.add_recording_data([sims[0][0], sims[1][0]])
        lab = p.labels()
        for name, ids in lab.groupby("class")["window_id"]:
            cold.confirm(ids.tolist(), name, create_class=True)
        first = cold.refresh_proposals(estimate=False)
        assert not first.warm_start
        a, b = p.proposals(), cold.proposals()
    assert (a["window_id"] == b["window_id"]).all() and (a["confirmed"] == b["confirmed"]).all()
    sure = (a["margin"] > 1e-3).to_numpy()
    assert sure.mean() > 0.9
    assert (a["label"][sure] == b["label"][sure]).all()
    assert np.abs(a["confidence"] - b["confidence"]).max() < 1e-4
    assert np.abs(a["margin"] - b["margin"]).max() < 1e-3
    # a run made by another process: the kept proposer is not used, the stored run is
    with Project.open(p.path, annotator="other") as q:
        confirm_truth(q, [int(unconfirmed[600])], truth)
        q.refresh_proposals(estimate=False)
    confirm_truth(p, [int(unconfirmed[700])], truth)
    p.reread()
    run = p.refresh_proposals(estimate=False)
    assert run.warm_start and p._ctx.cache["proposer"][2] is not kept
    assert run.confirmed == len(p.labels())


def test_the_window_order_and_reference_are_stored_once_per_graph_and_alpha(project, sims):
    """A run stores what it changes; the window order and the reference mass (the same for every
    run on one graph and alpha) are written with the first run that uses them and read with
    every later one; a run stored with every array in one blob is still read."""
    from labeler.npzview import npz_arrays, npz_bytes
    from labeler.service.proposals import FRAME_BLOB, LATEST_BLOB

    p = project
    truth, first = first_run(p, sims)
    store = p._ctx.store

    def frame_run():
        return store.conn.execute("SELECT run_id FROM blobs WHERE key = ?",
                                  (FRAME_BLOB,)).fetchone()[0]

    assert frame_run() == first.run_id
    confirm_truth(p, [int(p.proposals().query("not confirmed")["window_id"].iloc[7])], truth)
    p.reread()
    second = p.refresh_proposals(estimate=False)
    assert frame_run() == first.run_id  # not written again
    assert "window_id" not in npz_arrays(store.get_blob(LATEST_BLOB)[0])
    arrays = p._proposals.latest_arrays()
    assert arrays["meta"]["run_id"] == second.run_id
    assert np.array_equal(arrays["window_id"], p.windows()["id"].to_numpy())
    rid, seq = p._catalog.window_sequence()
    assert np.array_equal(arrays["recording_id"], rid) and np.array_equal(arrays["seq"], seq)
    spreader = p._ctx.cache["proposer"][2].spreader_
    assert np.array_equal(arrays["reference"], spreader.reference_mass().astype(np.float32))
    # another alpha: another reference, so the frame is written again
    third = p.refresh_proposals(alpha=0.8, estimate=False)
    assert frame_run() == third.run_id
    # a run stored before the frame was split off (every array in the run's blob) is read as is
    whole = {k: np.asarray(v) for k, v in p._proposals.latest_arrays().items() if k != "meta"}
    meta = store.blob_meta(LATEST_BLOB)
    with store.atomic():
        store.put_blob(LATEST_BLOB, npz_bytes(whole), meta, run_id=third.run_id)
        store.conn.execute("DELETE FROM blobs WHERE key = ?", (FRAME_BLOB,))
    p.reread()
    before = p.proposals()
    assert np.array_equal(p._proposals.latest_arrays()["window_id"], whole["window_id"])
    assert len(p.review_queue(10)) == 10
    p._ctx.cache.pop("proposer")
    fourth = p.refresh_proposals(alpha=0.8, estimate=False)
    assert fourth.warm_start and frame_run() == fourth.run_id
    assert (p.proposals()["window_id"] == before["window_id"]).all()


def test_a_refresh_writes_the_label_mass_of_the_classes_it_solved_again(project, sims):
    """The spreading's label mass is stored per class; one more confirmation solves one class
    again, and only its column is written; the columns read back are the fit's, bit for bit,
    also after another process made a run meanwhile."""
    from labeler.service.proposals import COLUMN_PREFIX, LATEST_BLOB

    p = project
    truth, first = first_run(p, sims)
    store = p._ctx.store

    def column_runs():
        return {k[len(COLUMN_PREFIX):]: m["run_id"] for k, (_, m) in
                store.get_blobs([], prefix=COLUMN_PREFIX).items()}

    classes = [str(int(c)) for c in p._proposals.latest_arrays()["classes"]]
    assert column_runs() == {c: first.run_id for c in classes}
    j = int(p.proposals().query("not confirmed")["window_id"].iloc[11])
    confirm_truth(p, [j], truth)
    p.reread()
    second = p.refresh_proposals(estimate=False)
    c = str(p._ledger.class_id(truth[np.searchsorted(p.windows()["id"].to_numpy(), j)]))
    assert column_runs() == {k: second.run_id if k == c else first.run_id for k in classes}
    assert store.blob_meta(LATEST_BLOB)["F_runs"] == column_runs()
    kept = p._ctx.cache["proposer"][2].spreader_
    assert np.array_equal(p._proposals.latest_arrays()["F"], kept.label_mass_.astype(np.float32))
    # another process runs meanwhile (writing every column); this one's next run, with its kept
    # proposer, is not the stored one any more: it starts from the stored run instead
    with Project.open(p.path, annotator="other") as q:
        confirm_truth(q, [int(q.proposals().query("not confirmed")["window_id"].iloc[40])], truth)
        third = q.refresh_proposals(estimate=False)
    assert set(column_runs().values()) == {third.run_id}
    confirm_truth(p, [int(p.proposals().query("not confirmed")["window_id"].iloc[90])], truth)
    p.reread()
    fourth = p.refresh_proposals(estimate=False)
    arrays = p._proposals.latest_arrays()
    assert arrays is not None and arrays["meta"]["run_id"] == fourth.run_id
    assert np.array_equal(arrays["F"], p._ctx.cache["proposer"][2].spreader_.label_mass_
                          .astype(np.float32))


def test_a_run_stored_by_another_process_during_a_refresh_leaves_the_columns_whole(project,
                                                                                    sims):
    """Another process stores a run between the start of a refresh with the kept proposer and
    its write: the columns the refresh did not solve again were overwritten meanwhile, so it
    writes them too, and the run it stores reads back as its fit."""
    from labeler.service.proposals import COLUMN_PREFIX

    p = project
    truth, _first = first_run(p, sims)
    kept = p._ctx.cache["proposer"][2]
    fit = kept.fit
    other = {}

    def fit_then_another_process_runs(*args, **kwargs):
        out = fit(*args, **kwargs)
        with Project.open(p.path, annotator="other") as q:
            other["run"] = q.refresh_proposals(estimate=False)
        return out

    kept.fit = fit_then_another_process_runs
    confirm_truth(p, [int(p.proposals().query("not confirmed")["window_id"].iloc[3])], truth)
    p.reread()
    run = p.refresh_proposals(estimate=False)
    assert run.warm_start and other["run"].run_id < run.run_id
    runs = {m["run_id"] for _, m in p._ctx.store.get_blobs([], prefix=COLUMN_PREFIX).values()}
    assert runs == {run.run_id}
    arrays = p._proposals.latest_arrays()
    assert arrays["meta"]["run_id"] == run.run_id
    assert np.array_equal(arrays["F"], kept.spreader_.label_mass_.astype(np.float32))
